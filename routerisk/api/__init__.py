"""The top-level functions: build or load a network, read inputs, score, suggest, review, plan.

Each function is a thin, typed wrapper over the library functions the commands call, so it
gives the same numbers as the command. Inputs are objects and frames; reading a file is a
separate step (:func:`read_routes`, :func:`read_events`, :func:`read_drives`,
:func:`read_areas`, :func:`read_runs`). Results convert with ``to_frame()``,
``to_geodataframe()``, ``to_dict()`` and ``to_map()`` (see :mod:`routerisk.results`).

A bad value raises a :class:`routerisk.errors.RouteriskError` whose ``field`` names the
parameter (``"departs"``, ``"fdr"``), never a command-line option.
"""

from __future__ import annotations

from routerisk.api._common import Departure as Departure
from routerisk.api.areas import review_areas
from routerisk.api.events import watch_events
from routerisk.api.network import build_network, load_network
from routerisk.api.plans import plan_day, plan_evidence
from routerisk.api.routes import score_routes, suggest_routes
from routerisk.inputs import read_areas, read_drives, read_events, read_routes, read_runs

__all__ = [
    "build_network",
    "load_network",
    "read_routes",
    "read_drives",
    "read_events",
    "read_areas",
    "read_runs",
    "score_routes",
    "suggest_routes",
    "review_areas",
    "plan_day",
    "plan_evidence",
    "watch_events",
]

"""routerisk: pedestrian-exposure scoring of automated-vehicle test routes.

The package is laid out by pipeline stage::

    routerisk.network    OSM file -> drivable graph, sources, tagging, severity, saved folder
    routerisk.io         reading route, drive, event, area and count files; atomic writes
    routerisk.matching   routes and recorded traces -> driven edges (Viterbi, HMM matching)
    routerisk.analysis   scoring, alternatives, area review, day plans, evidence, warnings,
                         calibration, uncertainty (computing only, nothing drawn)
    routerisk.render     maps, charts, HTML reports and plain words (one writer per result)
    routerisk.cli        the command line, one module per command
    routerisk.serve      the local planning page (Starlette)
    routerisk.profile    the frozen, validated exposure profile
    routerisk.parallel   tagging and area review tile by tile on Dask
    routerisk.testing    invented street networks for tests and benchmarks

The top-level functions (:mod:`routerisk.api`) are the front door for notebooks and scripts::

    import routerisk as rr
    net = rr.load_network("corvane-net")
    routes = rr.read_routes("routes.geojson", timezone=net.timezone)
    rr.score_routes(net, routes, departs=["2027-03-09T08:05"]).to_frame()

They are imported on first use, so ``import routerisk`` stays light (no geopandas,
matplotlib, folium or dask).
"""

from __future__ import annotations

__version__ = "0.1.0"

CAUTION = (
    "Caution: scores rank relative pedestrian exposure under the weights of the profile used; "
    "they are not crash predictions, not a safety case and not a permit. They model "
    "pedestrian presence by place and time of week (street baseline, crossings, nearby land "
    "uses) and the severity of a strike given its speed; crash likelihood by speed only where "
    "the profile turns it on. They do not model traffic or pedestrian counts, sight lines, "
    "driver or vehicle behaviour, weather or light. The relative index compares a route with "
    "the area at the same minutes under the same profile and cannot be compared across "
    "profiles. Local law, the permitting agency and licensed traffic engineers decide what "
    "testing is allowed."
)

#: The top-level functions, each imported from routerisk.api on first use.
_API = (
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
)
#: Light modules reachable as attributes (``rr.datasets.get_path("town")``).
_MODULES = ("datasets", "errors", "api", "results")

__all__ = ["CAUTION", "__version__", *_API, *_MODULES]


def __getattr__(name: str) -> object:
    """Import a top-level function (from routerisk.api) or a module on first use."""
    import importlib

    if name in _API:
        value: object = getattr(importlib.import_module(".api", __name__), name)
    elif name in _MODULES:
        value = importlib.import_module(f".{name}", __name__)
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    """List the public names, the lazy ones included."""
    return sorted({*globals(), *__all__})

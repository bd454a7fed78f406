"""Plan a test day: which run starts when, on which vehicle, at least total exposure risk.

The day's runs are read by :mod:`routerisk.io.runs` (re-exported here); this package is the
pure optimisation that schedules them. In pipeline order:

* :mod:`~routerisk.io.runs`: :func:`read_runs` reads a RUNS file (YAML or CSV) into
  :class:`RunSpec` rows (name, route file or start / end / via points, time window, optional
  vehicle, repeat count); :func:`parse_clock` / :func:`format_clock` for ``"HH:MM"`` times.
* :mod:`~routerisk.analysis.planning.model`: the scheduling input and output (:class:`Candidate`,
  :class:`Job`, :class:`Assignment`, :class:`Unplaced`, :class:`Schedule`),
  :func:`jobs_for_runs`, :func:`overlaps` and the integer time axis the solvers share.
* :mod:`~routerisk.analysis.planning.search`: the deterministic heuristic (insertion starts and
  local improvement) that gives the incumbent, and the answer for models too large to solve exactly.
* :mod:`~routerisk.analysis.planning.integer_program`: the exact method, a 0/1 programme in
  time-expanded flow form solved with HiGHS, its linear relaxations and reduced-cost fixing.
* :mod:`~routerisk.analysis.planning.solve`: :func:`solve_schedule`, most jobs placed, then least
  total risk (two lexicographic stages).
* :mod:`~routerisk.analysis.planning.naive`: :func:`naive_schedule`, every run at its earliest
  planned start, for comparison.

Each submodule imports its siblings directly (``runs`` <- ``model`` <- ``search`` /
``integer_program`` <- ``solve``; ``naive`` uses ``model`` only), never this package, so there
is no import cycle. This file only re-exports the public names, so ``from
routerisk.analysis.planning import solve_schedule`` and ``planning.read_runs`` keep working.
"""

from routerisk.analysis.planning.model import (
    Assignment,
    Candidate,
    Job,
    Schedule,
    Unplaced,
    jobs_for_runs,
    overlaps,
)
from routerisk.analysis.planning.naive import naive_schedule
from routerisk.analysis.planning.solve import solve_schedule
from routerisk.io.runs import RunSpec, format_clock, parse_clock, read_runs

__all__ = [
    "Assignment",
    "Candidate",
    "Job",
    "RunSpec",
    "Schedule",
    "Unplaced",
    "format_clock",
    "jobs_for_runs",
    "naive_schedule",
    "overlaps",
    "parse_clock",
    "read_runs",
    "solve_schedule",
]

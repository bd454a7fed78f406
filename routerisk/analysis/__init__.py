"""The computations: scoring, alternatives, area review, day plans, evidence, early warnings.

Nothing here draws: maps, charts and HTML are in :mod:`routerisk.render`. Modules:
:mod:`~routerisk.analysis.scoring` (time-aware risk of edges and routes),
:mod:`~routerisk.analysis.alternatives` (lower-exposure alternatives),
:mod:`~routerisk.analysis.review` (area review), :mod:`~routerisk.analysis.planning` and
:mod:`~routerisk.analysis.dayplan` (a test day's schedule), :mod:`~routerisk.analysis.evidence`
(test distance for a safety claim), :mod:`~routerisk.analysis.early_warning` and
:mod:`~routerisk.analysis.watch` (flags from logged events),
:mod:`~routerisk.analysis.calibration` (weights fitted to pedestrian counts) and
:mod:`~routerisk.analysis.uncertainty` (rankings under draws of the weights).
"""

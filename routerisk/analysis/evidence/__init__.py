"""Plan the test distance a statistical safety claim needs.

The claim is "the automated fleet's event rate is below a target", where the target is a
benchmark rate (for example human-driver deaths per distance) made better by an improvement
share. The package answers four questions (how far with no event, how far with ``k`` events
allowed, how far for a given power, and what the observed driving shows), each distance also
in fleet-years, and splits a drive log by exposure band and category influence, so a safety
case can say how much of the driving was near schools or busy streets.

Submodules: the statistics, then the writing.

- :mod:`~routerisk.analysis.evidence.formulas`: the exact Poisson limits (Garwood 1936), the
  binomial form and the normal approximation of Kalra and Paddock (2016), the exact power search;
- :mod:`~routerisk.analysis.evidence.plan`: :class:`EvidenceInputs` (validated),
  :func:`plan_evidence` and :class:`EvidencePlan`;
- :mod:`~routerisk.analysis.evidence.exposure`: :func:`distance_by_exposure`, :func:`read_segments`,
  :func:`segments_from_drives` (exposure-stratified evidence);
- :mod:`~routerisk.render.evidence_text`: :func:`describe`, every number in a sentence;
- :mod:`~routerisk.render.evidence_chart`: :func:`plot_upper_limit`, the PNG chart.

All rates inside are events per unit distance (per mile or per kilometre); the
:class:`EvidencePlan` reports them per the user's ``per`` distance.

Each submodule imports its siblings directly (``formulas`` <- ``exposure`` <- ``plan``;
``text`` <- ``plan`` and ``chart``; ``text`` and ``chart`` name ``EvidencePlan`` for type
checkers only), never this package, so there is no import cycle. This file only re-exports
the names other code uses, so ``evidence.plan_evidence`` and ``evidence._pct`` keep working.
"""

# ``segments_from_drives`` (used by the commands and the demo) and the text helpers ``_pct`` and
# ``_share_text`` (used by tests) are re-exported with ``as`` but kept out of ``__all__``, as
# before the split.
from routerisk.analysis.evidence.exposure import (
    ExposureEvidence,
    distance_by_exposure,
    read_segments,
)
from routerisk.analysis.evidence.exposure import segments_from_drives as segments_from_drives
from routerisk.analysis.evidence.exposure import segments_of_drives as segments_of_drives
from routerisk.analysis.evidence.formulas import (
    DAYS_PER_YEAR,
    MAX_ALLOWED_EVENTS,
    METRES_PER_UNIT,
    ExactPower,
    distance_allowed_events,
    distance_power_exact,
    distance_power_normal,
    distance_zero_events,
    distance_zero_events_binomial,
    fleet_distance_per_year,
    upper_rate,
)
from routerisk.analysis.evidence.plan import EvidenceInputs, EvidencePlan, plan_evidence
from routerisk.render.evidence_chart import plot_upper_limit
from routerisk.render.evidence_text import _pct as _pct
from routerisk.render.evidence_text import _share_text as _share_text
from routerisk.render.evidence_text import describe

__all__ = [
    "DAYS_PER_YEAR",
    "MAX_ALLOWED_EVENTS",
    "METRES_PER_UNIT",
    "EvidenceInputs",
    "EvidencePlan",
    "ExactPower",
    "ExposureEvidence",
    "distance_allowed_events",
    "distance_by_exposure",
    "distance_power_exact",
    "distance_power_normal",
    "distance_zero_events",
    "describe",
    "distance_zero_events_binomial",
    "fleet_distance_per_year",
    "plan_evidence",
    "plot_upper_limit",
    "read_segments",
    "upper_rate",
]

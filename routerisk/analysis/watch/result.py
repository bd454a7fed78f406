"""The watch settings, limits, a matched drive and the result of ``routerisk watch``."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from routerisk._cli_text import WATCH_EXPECTED, WATCH_GROUPS, WATCH_TESTS, WATCH_UNITS

MAX_TIME_GAP_S = 30.0
MAX_OFFSET_M = 50.0
GROUPS = WATCH_GROUPS
UNITS = WATCH_UNITS
TESTS = WATCH_TESTS
EXPECTED = WATCH_EXPECTED
#: Days over which expected false alarms are reported ("per month").
MONTH_DAYS = 30.0
HOUR_NS = 3_600_000_000_000
DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
#: What the early-warning numbers leave out; printed on every watch output.
LIMITS = (
    "Early warnings compare event counts with km driven (weighted by modelled pedestrian "
    "exposure unless --expected distance); they do not model who was on the street at the "
    "time, event severity, differences in reporting between vehicles or safety drivers, "
    "weather, light, software versions, or dependence between events of one drive."
)


@dataclass
class Drive:
    """One recorded drive: its name, matched edges, per-fix times and edges, edge times."""

    name: str
    times: np.ndarray  # int64 ns UTC per fix
    fix_edge: np.ndarray  # index into edges (row positions of the network), -1 if dropped
    edge_pos: np.ndarray  # network row positions of the driven edges
    edge_km: np.ndarray  # km driven on each
    edge_t0: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    edge_t1: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))


@dataclass
class WatchResult:
    """Units table, alerts, chart designs, rejected events and the settings used."""

    segments: pd.DataFrame
    alerts: pd.DataFrame
    matched: pd.DataFrame
    rejected: pd.DataFrame
    q: float
    designs: pd.DataFrame
    group: str
    periods: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)
    unit: str = "block"
    test: str = "auto"
    expected: str = "modelled"
    used: dict[str, str] = field(default_factory=dict)
    dispersion: dict[str, Any] = field(default_factory=dict)
    baseline: str = ""
    family: dict[str, Any] = field(default_factory=dict)
    members: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)

    @property
    def test_used(self) -> str:
        """Return the test used for the chosen expectation (``poisson`` or ``negbin``)."""
        return self.used[self.expected]

    def method_lines(self) -> list[str]:
        """Return one line per choice made, for every output (CSV comments, report, CLI)."""
        d = self.dispersion[self.expected]
        other = "distance" if self.expected == "modelled" else "modelled"
        return [
            f"unit of discovery: {self.unit}"
            + (
                " (both directions and the run between intersections merged)"
                if self.unit == "block"
                else " (each direction on its own)"
            ),
            f"expected counts: {self.expected} (also computed: {other}; column disagree)",
            f"test: {self.test_used} p-values (asked: {self.test}); over-dispersion: Pearson "
            f"chi-square/df {d.pearson_ratio:.3g} (p {d.pearson_p:.3g}), negative binomial "
            f"1/shape {d.inv_shape:.3g}, likelihood-ratio p {d.lr_p:.3g}"
            + (" (significant)" if d.significant else " (not significant)")
            + f" at {d.alpha:g}",
            f"CUSUM in-control rate: {self.baseline}",
            f"CUSUM design: {self.family.get('design', '')}; family in-control run length "
            f"{_fmt(self.family.get('family_arl0'))} days; expected false alarms per "
            f"{MONTH_DAYS:g} days of driving {_fmt(self.family.get('false_alarms_per_30_days'))}",
        ]

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk watch``."""
        mem = self.members
        segs = []
        for r in self.segments.itertuples(index=False):
            part = mem[mem["unit"] == r.unit] if len(mem) else mem
            segs.append(
                {
                    "unit": str(r.unit),
                    "street": str(r.street),
                    "band": str(r.band),
                    "events": int(r.events),
                    "events_forward": int(r.events_forward),
                    "events_backward": int(r.events_backward),
                    "km_driven": round(float(r.km), 6),
                    "km_forward": round(float(r.km_forward), 6),
                    "km_backward": round(float(r.km_backward), 6),
                    "expected": round(float(r.expected), 6),
                    "eb_rate": round(float(r.eb_rate), 6),
                    "p_value": float(f"{r.p_value:.6g}"),
                    "q_value": float(f"{r.q_value:.6g}"),
                    "flagged": bool(r.flagged),
                    "expected_modelled": round(float(r.expected_modelled), 6),
                    "expected_distance": round(float(r.expected_distance), 6),
                    "flagged_modelled": bool(r.flagged_modelled),
                    "flagged_distance": bool(r.flagged_distance),
                    "disagree": bool(r.disagree),
                    "edges": [
                        {
                            "edge": [int(m.u), int(m.v), int(m.key)],
                            "direction": "forward" if m.forward else "backward",
                            "events": int(m.events),
                            "km_driven": round(float(m.km), 6),
                        }
                        for m in part.itertuples(index=False)
                        if m.km > 0
                    ],
                }
            )
        alerts = [
            {
                "group": str(r.group),
                "since": str(r.period),
                "statistic": round(float(r.statistic), 6),
                "h": float(r.h),
            }
            for r in self.alerts.itertuples(index=False)
        ]
        rej = [
            {"row": int(r.row), "reason": str(r.reason)}
            for r in self.rejected.itertuples(index=False)
        ]
        charts = [
            {
                k: (
                    round(float(v), 6)
                    if isinstance(v, float)
                    else (int(v) if isinstance(v, np.integer) else str(v))
                )
                for k, v in r._asdict().items()
            }
            for r in self.designs.itertuples(index=False)
        ]
        return {
            "segments": segs,
            "alerts": alerts,
            "fdr": self.q,
            "unit": self.unit,
            "expected": self.expected,
            "group": self.group,
            "test": {
                "asked": self.test,
                "used": self.test_used,
                "dispersion": self.dispersion[self.expected].as_dict(),
            },
            "comparison": {
                k: {
                    "test_used": self.used[k],
                    "dispersion": self.dispersion[k].as_dict(),
                    "flagged": int(self.segments[f"flagged_{k}"].sum()),
                }
                for k in EXPECTED
            },
            "baseline": self.baseline,
            "cusum": {"charts": charts, "family": self.family},
            "events_matched": int(len(self.matched)),
            "events_rejected": rej,
            "limits": LIMITS,
        }


def _fmt(x: Any) -> str:
    if x is None:
        return "n/a"
    return f"{x:.3g}" if isinstance(x, float) else str(x)

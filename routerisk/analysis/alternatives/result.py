"""The result objects of ``routerisk suggest``: the plan, its alternatives, the candidates."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from routerisk.analysis.scoring import RouteScore

HARD_RULES = "hard rules"  # the bound a candidate breaks when no detour avoids a rule zone


@dataclass
class Alternative:
    """One suggested route with its exact score and the changes against the plan."""

    edges: list[tuple[int, int, int]]
    score: RouteScore
    risk_change_pct: float
    time_change_pct: float
    length_change_pct: float
    overlap_with_plan: float
    within_bounds: bool
    label: str = ""
    bounds_broken: list[str] = field(default_factory=list)
    caveats: list[str] = field(default_factory=list)
    fractions: np.ndarray | None = None  # share of each edge driven (None: all whole)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk suggest``."""
        d = self.score.to_dict()
        d.pop("name")
        d.update(
            {
                "label": self.label,
                "risk_change_pct": round(self.risk_change_pct, 3),
                "time_change_pct": round(self.time_change_pct, 3),
                "length_change_pct": round(self.length_change_pct, 3),
                "shared_length_with_plan": round(self.overlap_with_plan, 4),
                "within_bounds": self.within_bounds,
                "bounds_broken": list(self.bounds_broken),
                "caveats": list(self.caveats),
            }
        )
        return d


@dataclass
class Suggestion:
    """The plan, its alternatives, the trade-off points found, and a note."""

    name: str
    planned: RouteScore
    planned_edges: list[tuple[int, int, int]]
    alternatives: list[Alternative]
    front: list[tuple[float, float]] = field(default_factory=list)  # (minutes, risk)
    note: str = ""
    planned_fractions: np.ndarray | None = None  # share of each planned edge driven
    #: why no alternative met every bound (plain sentences; empty when some did)
    reasons: list[str] = field(default_factory=list)
    #: what the user can change to get one (plain sentences)
    next_steps: list[str] = field(default_factory=list)
    #: nearest departures (ISO, area time) at which the planned route breaks no hard rule
    rule_free_departures: dict[str, str | None] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of one route of ``routerisk suggest``."""
        return {
            "name": self.name,
            "planned": self.planned.to_dict(),
            "alternatives": [a.to_dict() for a in self.alternatives],
            "note": self.note,
            "reasons": list(self.reasons),
            "next_steps": list(self.next_steps),
            "rule_free_departures": self.rule_free_departures,
            "front": [[round(t, 4), round(r, 6)] for t, r in self.front],
        }


@dataclass
class Candidate:
    """A candidate path with its quick score and the bounds it breaks.

    ``hard rules`` among the bounds: no detour was found around a rule zone in force.
    """

    rows: np.ndarray  # the whole route: the plan's partial ends (if any) included
    fractions: np.ndarray  # share of each row driven
    risk: float
    minutes: float
    km: float
    overlap: float
    broken: list[str]


def edges_frame(s: Suggestion) -> pd.DataFrame:
    """Return the alternatives' scored segments stacked, with an ``option`` column."""
    parts = [s.planned.segments.assign(option="planned")]
    parts += [a.score.segments.assign(option=a.label) for a in s.alternatives]
    return pd.concat(parts, ignore_index=True)

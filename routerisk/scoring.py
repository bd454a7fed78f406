"""Time-aware pedestrian-exposure risk of edges and routes.

The risk of an edge entered at minute ``t`` of the week (area local time, Monday 00:00 = 0):

    risk = severity * (length_km * (baseline + sum_c weight_c * mult_c(t) * exp_c)
                       + crossing_weight * crossings)

split into parts: ``baseline``, ``crossings`` and one per category.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .profile import MINUTES_PER_WEEK, Profile


def minute_of_week(ts: pd.Timestamp | pd.DatetimeIndex | pd.Series) -> np.ndarray:
    """Return minutes since Monday 00:00 of local timestamps (int array)."""
    t = pd.DatetimeIndex(np.atleast_1d(ts)) if not isinstance(ts, pd.Series) else (
        pd.DatetimeIndex(ts))
    return ((t.dayofweek * 1440 + t.hour * 60 + t.minute).to_numpy() % MINUTES_PER_WEEK).astype(
        np.int64)


def edge_risk_parts(edges: pd.DataFrame, profile: Profile, minutes: np.ndarray | int
                    ) -> pd.DataFrame:
    """Return the risk parts of each edge row driven at the given minute(s) of the week.

    Parameters
    ----------
    edges
        Tagged edges (``length``, ``severity``, ``baseline``, ``crossings``, ``exp_<cat>``).
    profile
        The profile the edges were tagged with.
    minutes
        One minute of the week for all rows, or one per row.
    """
    n = len(edges)
    mins = np.broadcast_to(np.asarray(minutes, dtype=np.int64), (n,))
    mult = profile.multipliers(mins)
    sev = edges["severity"].to_numpy(dtype=float)
    km = edges["length"].to_numpy(dtype=float) / 1000.0
    parts = {"baseline": sev * km * edges["baseline"].to_numpy(dtype=float)}
    for j, c in enumerate(profile.categories):
        parts[c.name] = sev * km * c.weight * mult[:, j] * edges[f"exp_{c.name}"].to_numpy(
            dtype=float)
    parts["crossings"] = sev * profile.crossing_weight * edges["crossings"].to_numpy(
        dtype=float)
    out = pd.DataFrame(parts, index=edges.index)
    out["total"] = out.sum(axis=1)
    return out


def rules_in_force(edges: pd.DataFrame, profile: Profile, minutes: np.ndarray | int
                   ) -> np.ndarray:
    """Return an (n_edges, n_rules) bool array: rule covers the edge and is in force then."""
    n = len(edges)
    mins = np.broadcast_to(np.asarray(minutes, dtype=np.int64), (n,)) % MINUTES_PER_WEEK
    cols = []
    for i, rule in enumerate(profile.rules):
        cover = edges[f"rule_{i}"].to_numpy(dtype=bool)
        cols.append(cover & rule.by_minute[mins])
    return np.stack(cols, axis=1) if cols else np.zeros((n, 0), dtype=bool)

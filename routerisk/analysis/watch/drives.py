"""Map-matching drives and placing each event on the edge its vehicle was driving."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import shapely

from routerisk import matching
from routerisk.analysis.watch.result import (
    MAX_OFFSET_M,
    MAX_TIME_GAP_S,
    Drive,
)
from routerisk.errors import InputFileError
from routerisk.io.drives import read_drive_routes


def _visit_times(m: Any, km_full: np.ndarray, times: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return when each matched edge visit was entered and left (int64 ns UTC).

    Each kept fix is placed along the drive (km from the start, from its edge and its share
    along the edge); the entry and exit km of every visit are turned into times by linear
    interpolation between those fixes (clamped to the first and last fix).
    """
    frac = np.asarray(m.fractions, dtype=float)
    n = len(frac)
    st = 1.0 - frac  # driven share starts here: the visit ends at v ...
    st[-1] = m.end_offset - frac[-1]  # ... except the last, which ends part way
    st[0] = m.start_offset  # and the first, which starts part way
    cum = np.concatenate([[0.0], np.cumsum(frac * km_full)])
    pe = np.asarray(m.point_edge)
    use = pe >= 0
    if not use.any() or len(times) == 0:
        t = times[0] if len(times) else 0
        return np.full(n, t, dtype=np.int64), np.full(n, t, dtype=np.int64)
    s = pe[use]
    along = np.clip(np.nan_to_num(np.asarray(m.point_offset)[use]) - st[s], 0.0, frac[s])
    pos = np.maximum.accumulate(cum[s] + along * km_full[s])
    rel = (times[use] - times[0]).astype(float)
    t0 = times[0] + np.round(np.interp(cum[:-1], pos, rel)).astype(np.int64)
    t1 = times[0] + np.round(np.interp(cum[1:], pos, rel)).astype(np.int64)
    return t0, np.maximum(t1, t0)


def read_drives(net: Any, folder: str | Path, index: Any = None) -> list[Drive]:
    """Read and map-match every drive with times in ``folder``."""
    found = read_drive_routes(folder, default_tz=net.timezone)
    return match_drives(net, found, index)


def match_drives(net: Any, drives: list[Any], index: Any = None) -> list[Drive]:
    """Map-match read drives (routes with a time at every point) onto the network."""
    idx = index or matching.RoadIndex.of_network(net)
    eidx = net.edges.index
    km = net.edges["length"].to_numpy() / 1000.0
    out = []
    for r in drives:
        if r.times is None:
            raise InputFileError(
                "a drive needs a time at every point",
                path=r.source or None,
                field=f"route {r.name!r}",
            )
        m = matching.match_trace(idx, r)
        pos = m.rows(eidx)
        fe = np.asarray(m.point_edge)
        fix_edge = np.where(fe >= 0, pos[np.clip(fe, 0, len(pos) - 1)], -1)
        times = pd.DatetimeIndex(list(r.times)).tz_convert("UTC").as_unit("ns").asi8
        t0, t1 = _visit_times(m, km[pos], times)
        out.append(
            Drive(
                f"{Path(r.source).name}:{r.name}",
                times,
                fix_edge,
                pos,
                km[pos] * np.asarray(m.fractions),
                t0,
                t1,
            )
        )
    return out


def match_events(
    net: Any,
    events: pd.DataFrame,
    drives: list[Drive],
    *,
    max_time_gap_s: float = MAX_TIME_GAP_S,
    max_offset_m: float = MAX_OFFSET_M,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Place each event on the edge its vehicle was driving; return (matched, rejected)."""
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", net.crs, always_xy=True)
    geoms = net.edges.geometry.to_numpy()
    t_ev = (
        pd.DatetimeIndex(events["time"]).tz_convert("UTC").as_unit("ns").asi8
        if len(events)
        else np.zeros(0, dtype=np.int64)
    )
    x, y = to_xy.transform(events["lon"].to_numpy(), events["lat"].to_numpy())
    pts = shapely.points(x, y)
    gap = int(max_time_gap_s * 1e9)
    rows, rejected = [], []
    for i in range(len(events)):
        best = None
        for d in drives:
            if len(d.times) == 0 or not d.times[0] - gap <= t_ev[i] <= d.times[-1] + gap:
                continue
            j = int(np.clip(np.searchsorted(d.times, t_ev[i]), 0, len(d.times) - 1))
            cand = [k for k in (j - 1, j, j + 1) if 0 <= k < len(d.times)]
            k = min(cand, key=lambda k: abs(d.times[k] - t_ev[i]))
            # the nearest kept fix (a dropped fix has no edge of its own)
            kept = np.flatnonzero(d.fix_edge >= 0)
            if len(kept) == 0:
                continue
            k = int(kept[np.argmin(np.abs(kept - k))])
            dt_s = abs(d.times[k] - t_ev[i]) / 1e9
            if dt_s > max_time_gap_s:
                continue
            if best is None or dt_s < best[0]:
                best = (dt_s, d, int(d.fix_edge[k]))
        row = int(events["row"].iat[i]) if "row" in events else i
        if best is None:
            rejected.append({"row": row, "reason": "outside the times of every drive"})
            continue
        _, d, pos = best
        off = float(shapely.distance(pts[i], geoms[pos]))
        if off > max_offset_m:
            rejected.append(
                {"row": row, "reason": f"{off:.0f} m off the route driven then ({d.name})"}
            )
            continue
        rows.append(
            {
                "row": row,
                "drive": d.name,
                "pos": pos,
                "offset_m": off,
                "time": events["time"].iat[i],
                "type": events["type"].iat[i],
            }
        )
    return (
        pd.DataFrame(rows, columns=["row", "drive", "pos", "offset_m", "time", "type"]),
        pd.DataFrame(rejected, columns=["row", "reason"]),
    )

"""Early warnings: match logged safety events to the segments driven, rate them, flag them.

Events (interventions, hard braking, near misses) are placed on the segment the vehicle was
on at the event's time: the drive whose recorded trace covers that time, its map-matched edge
at the nearest fix in time. Events off the driven route, outside every drive's time span, or
with bad coordinates or times are reported and left out, never matched silently.

Units of discovery: a street block (``unit="block"``: both directions of an edge pair and the
run of same-named edges between intersections, merged) or a directed segment
(``unit="segment"``). Per unit: events and km (in total and per direction), the expected count
given the fleet's overall rate and the unit's modelled pedestrian exposure
(``expected="modelled"``) or its km alone (``expected="distance"``; both are always computed and
the units where their flags differ are marked), the empirical Bayes rate (Hauer 1997), a p-value
and Benjamini-Hochberg flags. The p-value is the exact Poisson tail or, when the counts are
over-dispersed (likelihood-ratio test against a negative binomial, ``test="auto"``) or when
asked (``test="negbin"``), the tail of the negative binomial prior predictive.

Per group (street, exposure band or hour of week) and day: a Poisson CUSUM (Page 1954; Lucas
1985). Each drive's km are split by the time each edge was driven (a drive across 09:00 puts
its km before nine in the 08 hour and the rest in the 09 hour; likewise at midnight). The
in-control rate is a given rate, the rate of a calibration period (charts then watch the days
after it), or by default the rate of all other groups (each group left out of its own rate, so
a hot group does not raise its own baseline). Each chart is designed for ``arl0`` days alone,
or for ``arl0_family`` x the number of charts so that the whole family has about
``arl0_family`` days between false alarms; the exact family run length and the expected false
alarms per 30 days of driving are reported.
"""

from __future__ import annotations

import datetime as dt
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import shapely

from routerisk import matching
from routerisk._cli_text import WATCH_EXPECTED, WATCH_GROUPS, WATCH_TESTS, WATCH_UNITS
from routerisk.analysis import early_warning
from routerisk.errors import InputFileError, OptionError
from routerisk.io import routes

log = logging.getLogger(__name__)

MAX_TIME_GAP_S = 30.0
MAX_OFFSET_M = 50.0
GROUPS = WATCH_GROUPS
UNITS = WATCH_UNITS
TESTS = WATCH_TESTS
EXPECTED = WATCH_EXPECTED
#: Days over which expected false alarms are reported ("per month").
MONTH_DAYS = 30.0
#: Event years accepted (as for route times, routerisk.io.routes).
YEARS = (1900, 2200)
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


def drive_files(folder: str | Path) -> list[Path]:
    """Return the .gpx, .geojson and .csv files of a drives folder, sorted by name."""
    d = Path(folder)
    if not d.is_dir():
        raise InputFileError("drives folder not found", path=d, field="--drives")
    files = sorted(p for p in d.iterdir() if p.suffix.lower() in (".gpx", ".geojson", ".csv"))
    if not files:
        raise InputFileError(
            "no .gpx, .geojson or .csv drives in the folder", path=d, field="--drives"
        )
    return files


def read_drives(net: Any, folder: str | Path, index: Any = None) -> list[Drive]:
    """Read and map-match every drive with times in ``folder``."""
    found = [r for f in drive_files(folder) for r in routes.read_routes(f, default_tz=net.timezone)]
    return match_drives(net, found, index)


def match_drives(net: Any, drives: list[Any], index: Any = None) -> list[Drive]:
    """Map-match read drives (routes with a time at every point) onto the network."""
    idx = index or matching.RoadIndex(net.graph)
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
        mi = pd.MultiIndex.from_tuples(list(m.edges), names=eidx.names)
        pos = eidx.get_indexer(mi)
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


def _wall_ns(t_ns: np.ndarray, tz: Any) -> np.ndarray:
    """Return local wall-clock times (ns since 1970-01-01 00:00 local) of UTC times."""
    if len(t_ns) == 0:
        return np.zeros(0, dtype=np.int64)
    idx = pd.to_datetime(np.asarray(t_ns, dtype=np.int64), utc=True).tz_convert(tz)
    return np.asarray(idx.tz_localize(None).as_unit("ns").asi8, dtype=np.int64)


def split_by_hour(
    t0: np.ndarray, t1: np.ndarray, km: np.ndarray, tz: Any
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Split each visit's km over the local clock hours it spans, evenly in time.

    Returns ``(visit, hour_bin, km)`` pieces; ``hour_bin`` counts local hours since
    1970-01-01 00:00 (so ``hour_bin // 24`` is the local day). A visit of zero duration
    stays whole in the hour it is in.
    """
    w0 = _wall_ns(t0, tz)
    w1 = w0 + (np.asarray(t1, dtype=np.int64) - np.asarray(t0, dtype=np.int64))
    b0 = w0 // HOUR_NS
    b1 = np.maximum(w1 - 1, w0) // HOUR_NS
    one = b0 == b1
    vis, bins, parts = [np.flatnonzero(one)], [b0[one]], [np.asarray(km)[one]]
    for i in np.flatnonzero(~one).tolist():
        dur = float(w1[i] - w0[i])
        for b in range(int(b0[i]), int(b1[i]) + 1):
            lo, hi = max(int(w0[i]), b * HOUR_NS), min(int(w1[i]), (b + 1) * HOUR_NS)
            vis.append(np.array([i]))
            bins.append(np.array([b], dtype=np.int64))
            parts.append(np.array([km[i] * (hi - lo) / dur]))
    return (
        np.concatenate(vis).astype(np.int64),
        np.concatenate(bins).astype(np.int64),
        np.concatenate(parts).astype(float),
    )


def _day_iso(hour_bin: np.ndarray) -> np.ndarray:
    days = (np.asarray(hour_bin, dtype=np.int64) // 24).astype("datetime64[D]")
    return np.datetime_as_string(days, unit="D")


def _hour_of_week(hour_bin: np.ndarray) -> np.ndarray:
    hb = np.asarray(hour_bin, dtype=np.int64)
    wd = (hb // 24 + 3) % 7  # 1970-01-01 was a Thursday (monday = 0)
    return np.array(
        [f"{DAY_NAMES[d]} {h:02d}" for d, h in zip(wd, hb % 24, strict=True)], dtype=object
    )


def discovery_units(edges: pd.DataFrame, unit: str) -> pd.DataFrame:
    """Return one row per network edge: its unit id, street and direction in the unit.

    ``segment``: each directed edge is its own unit. ``block``: an edge and its reverse
    (same end nodes and key) are one pair, and pairs meeting at a node where nothing else
    meets (exactly two pairs there) and carrying the same street name are merged into one run
    between intersections. A unit's direction runs from its end node met first when the run
    is walked from its smaller end node; ``forward`` tells whether the edge goes that way.
    """
    idx = edges.index
    u = np.asarray(idx.get_level_values(0), dtype=np.int64)
    v = np.asarray(idx.get_level_values(1), dtype=np.int64)
    k = np.asarray(idx.get_level_values(2), dtype=np.int64)
    names = edges["name"].fillna("").astype(str).to_numpy()
    out = pd.DataFrame({"u": u, "v": v, "key": k, "street": names})
    if unit == "segment":
        out["unit"] = [f"{a}-{b}-{c}" for a, b, c in zip(u, v, k, strict=True)]
        out["forward"] = True
        out["end_u"], out["end_v"], out["end_key"] = u, v, k
        return out
    lo, hi = np.minimum(u, v), np.maximum(u, v)
    pair, pairs = pd.factorize(pd.MultiIndex.from_arrays([lo, hi, k]), sort=True)
    pair_name = pd.Series(names).groupby(pair).first().to_numpy()
    parent = list(range(len(pairs)))

    def find(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    incident: dict[int, set[int]] = {}
    for p, (a, b, _) in enumerate(pairs):
        incident.setdefault(int(a), set()).add(p)
        incident.setdefault(int(b), set()).add(p)
    loop = np.array([a == b for a, b, _ in pairs])
    for node in sorted(incident):
        ps = sorted(incident[node])
        if len(ps) == 2 and not loop[ps].any() and pair_name[ps[0]] == pair_name[ps[1]]:
            ra, rb = find(ps[0]), find(ps[1])
            if ra != rb:
                parent[max(ra, rb)] = min(ra, rb)
    block = np.array([find(p) for p in range(len(pairs))])
    order: dict[int, dict[int, int]] = {}
    ids: dict[int, str] = {}
    ends: dict[int, tuple[int, int, int]] = {}
    seen: dict[str, int] = {}
    for b in sorted(set(block.tolist())):
        members = np.flatnonzero(block == b).tolist()
        pos, start, end = _walk_block([(int(pairs[p][0]), int(pairs[p][1])) for p in members])
        order[b] = pos
        name = f"{start}-{end}"
        seen[name] = seen.get(name, 0) + 1
        if seen[name] > 1:
            name = f"{name}~{seen[name]}"
        ids[b] = name
        ends[b] = (start, end, int(pairs[members[0]][2]))
    eb = block[pair]
    out["unit"] = [ids[b] for b in eb]
    out["forward"] = [order[b][a] <= order[b][c] for b, a, c in zip(eb, u, v, strict=True)]
    out["end_u"] = [ends[b][0] for b in eb]
    out["end_v"] = [ends[b][1] for b in eb]
    out["end_key"] = [ends[b][2] for b in eb]
    return out


def _walk_block(links: list[tuple[int, int]]) -> tuple[dict[int, int], int, int]:
    """Walk a run of node pairs from its smaller end; return node order, start and end node."""
    adj: dict[int, list[tuple[int, int]]] = {}
    for p, (a, c) in enumerate(links):
        adj.setdefault(a, []).append((p, c))
        adj.setdefault(c, []).append((p, a))
    tips = sorted(n for n, lst in adj.items() if len(lst) == 1)
    start = tips[0] if tips else min(adj)
    pos, cur, used = {start: 0}, start, set()
    while True:
        nxt = [(p, o) for p, o in adj[cur] if p not in used]
        if not nxt:
            break
        p, o = min(nxt)
        used.add(p)
        if o in pos:
            break
        pos[o] = len(pos)
        cur = o
    for a, c in links:  # nodes the walk missed (should not happen) keep a stable order
        pos.setdefault(a, len(pos))
        pos.setdefault(c, len(pos))
    return pos, start, tips[-1] if len(tips) > 1 else cur


def _check_options(
    q: float,
    shift: float,
    arl0: float,
    arl0_family: float | None,
    group: str,
    unit: str,
    test: str,
    expected: str,
    baseline_until: Any,
    baseline_rate: float | None,
) -> None:
    for name, val, choices in (
        ("--group", group, GROUPS),
        ("--unit", unit, UNITS),
        ("--test", test, TESTS),
        ("--expected", expected, EXPECTED),
    ):
        if val not in choices:
            raise OptionError(f"must be one of {', '.join(choices)}", field=name)
    if not 0 < q < 1:
        raise OptionError(f"must be between 0 and 1, got {q}", field="--fdr")
    if not shift > 1:
        raise OptionError(f"must be above 1, got {shift}", field="--shift")
    if not arl0 > 1:
        raise OptionError(f"must be above 1, got {arl0}", field="--arl0")
    if arl0_family is not None and not (math.isfinite(arl0_family) and arl0_family > 1):
        raise OptionError(f"must be above 1, got {arl0_family}", field="--arl0-family")
    if baseline_rate is not None and not (math.isfinite(baseline_rate) and baseline_rate > 0):
        raise OptionError(f"must be a positive rate, got {baseline_rate}", field="--baseline-rate")
    if baseline_rate is not None and baseline_until is not None:
        raise OptionError(
            "give either --baseline-until or --baseline-rate, not both", field="--baseline-rate"
        )


def _until(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, dt.datetime):
        return value.date().isoformat()
    if isinstance(value, dt.date):
        return value.isoformat()
    try:
        return dt.date.fromisoformat(str(value).strip()).isoformat()
    except ValueError as exc:
        raise OptionError(f"not a date (YYYY-MM-DD): {value!r}", field="--baseline-until") from exc


def watch(
    net: Any,
    events_path: str | Path,
    drives_folder: str | Path,
    *,
    q: float = 0.1,
    shift: float = 2.0,
    arl0: float = 500.0,
    arl0_family: float | None = None,
    group: str = "street",
    unit: str = "block",
    test: str = "auto",
    expected: str = "modelled",
    baseline_until: Any = None,
    baseline_rate: float | None = None,
    alpha: float = 0.05,
) -> WatchResult:
    """Run the early-warning analysis on an event log and a drives folder.

    Reads the files and calls :func:`watch_matched` (see there for the settings).
    """
    opts = dict(
        q=q,
        shift=shift,
        arl0=arl0,
        arl0_family=arl0_family,
        group=group,
        unit=unit,
        test=test,
        expected=expected,
        baseline_until=baseline_until,
        baseline_rate=baseline_rate,
    )
    check_settings(**opts)
    good, bad = early_warning.read_events(events_path, tz=net.timezone)
    return watch_matched(net, good, bad, read_drives(net, drives_folder), alpha=alpha, **opts)


def check_settings(
    *,
    q: float = 0.1,
    shift: float = 2.0,
    arl0: float = 500.0,
    arl0_family: float | None = None,
    group: str = "street",
    unit: str = "block",
    test: str = "auto",
    expected: str = "modelled",
    baseline_until: Any = None,
    baseline_rate: float | None = None,
) -> None:
    """Raise OptionError for a setting of :func:`watch` out of range."""
    _check_options(
        q, shift, arl0, arl0_family, group, unit, test, expected, baseline_until, baseline_rate
    )


def watch_matched(
    net: Any,
    good: pd.DataFrame,
    bad: pd.DataFrame,
    drives: list[Drive],
    *,
    q: float = 0.1,
    shift: float = 2.0,
    arl0: float = 500.0,
    arl0_family: float | None = None,
    group: str = "street",
    unit: str = "block",
    test: str = "auto",
    expected: str = "modelled",
    baseline_until: Any = None,
    baseline_rate: float | None = None,
    alpha: float = 0.05,
) -> WatchResult:
    """Run the early-warning analysis on read events (good, rejected) and matched drives.

    ``baseline_until`` (a date, local) takes the CUSUM in-control rate from the days up to and
    including it, and the charts watch the days after; ``baseline_rate`` gives the rate (events
    per km, weighted by the relative exposure when ``expected="modelled"``). ``alpha`` is the
    level of the over-dispersion test that ``test="auto"`` follows.
    """
    _check_options(
        q, shift, arl0, arl0_family, group, unit, test, expected, baseline_until, baseline_rate
    )
    until = _until(baseline_until)
    rejected = (
        bad[["row", "reason"]].copy() if len(bad) else pd.DataFrame(columns=["row", "reason"])
    )
    if len(good):  # times beyond the nanosecond calendar cannot be placed on any drive
        years = pd.DatetimeIndex(good["time"]).year
        odd = np.asarray((years < YEARS[0]) | (years > YEARS[1]))
        if odd.any():
            rejected = pd.concat(
                [
                    rejected,
                    pd.DataFrame(
                        {
                            "row": good["row"].to_numpy()[odd],
                            "reason": f"time outside the years {YEARS[0]}-{YEARS[1]}",
                        }
                    ),
                ],
                ignore_index=True,
            )
            good = good.loc[~odd].reset_index(drop=True)
    matched, off = match_events(net, good, drives)
    rejected = pd.concat([rejected, off], ignore_index=True).sort_values("row", kind="stable")
    edges = net.edges
    n = len(edges)
    km = np.zeros(n)
    for d in drives:
        np.add.at(km, d.edge_pos, d.edge_km)
    ev_pos = matched["pos"].to_numpy(dtype=np.int64)
    counts = np.bincount(ev_pos, minlength=n) if len(matched) else np.zeros(n, dtype=np.int64)
    driven = km > 0
    expo = edges["exposure_km"].to_numpy(dtype=float)
    mean = float((expo * km)[driven].sum() / km[driven].sum()) if driven.any() else 0.0
    weights = {
        "modelled": np.maximum(expo / mean if mean > 0 else np.ones(n), 1e-6),
        "distance": np.ones(n),
    }
    mem = discovery_units(edges, unit)
    mem["events"], mem["km"] = counts, km
    mem["band"] = edges["band"].astype(str).to_numpy()
    for kind in EXPECTED:
        mem[f"wkm_{kind}"] = km * weights[kind]
    matched = matched.assign(unit=mem["unit"].to_numpy()[ev_pos])
    table = _unit_table(mem)
    used, disp, parts = {}, {}, {}
    for kind in EXPECTED:
        tab = pd.DataFrame(
            {
                "unit": table["unit"],
                "events": table["events"],
                "km": table["km"],
                "weight": table[f"wkm_{kind}"] / table["km"],
            }
        )
        disp[kind] = early_warning.dispersion_test(tab["events"], table[f"wkm_{kind}"], alpha=alpha)
        nb = test == "negbin" or (test == "auto" and disp[kind].significant)
        used[kind] = "negbin" if nb else "poisson"
        parts[kind], _ = early_warning.unit_rates(
            tab,
            weight="weight",
            q=q,
            method="likelihood" if nb else "moments",
            pvalue="prior_loo" if nb else "poisson",
        )
    rates = parts[expected].copy()
    for col in (
        "street",
        "band",
        "u",
        "v",
        "key",
        "events_forward",
        "events_backward",
        "km_forward",
        "km_backward",
    ):
        rates[col] = table[col].to_numpy()
    for kind in EXPECTED:
        for col in ("expected", "p_value", "flagged"):
            rates[f"{col}_{kind}"] = parts[kind][col].to_numpy()
    rates["disagree"] = rates["flagged_modelled"] != rates["flagged_distance"]
    rates = rates.sort_values(
        ["flagged", "p_value", "unit"], ascending=[False, True, True], kind="stable"
    ).reset_index(drop=True)
    periods = _periods(net, drives, matched, mem, weights[expected], group)
    monitored, rate_of, baseline = _baseline(periods, until, baseline_rate, expected)
    monitored = monitored.assign(expected=monitored["wkm"] * monitored["group"].map(rate_of))
    designs, alerts, family = _charts(
        monitored, shift=shift, arl0=arl0, arl0_family=arl0_family, rate_of=rate_of
    )
    mem_out = mem[mem["unit"].isin(set(rates["unit"]))][
        ["unit", "u", "v", "key", "street", "forward", "events", "km"]
    ].reset_index(drop=True)
    return WatchResult(
        rates,
        alerts,
        matched,
        rejected.reset_index(drop=True),
        q,
        designs,
        group,
        monitored,
        unit=unit,
        test=test,
        expected=expected,
        used=used,
        dispersion=disp,
        baseline=baseline,
        family=family,
        members=mem_out,
    )


def _unit_table(mem: pd.DataFrame) -> pd.DataFrame:
    """Sum the driven edges of each unit: events and km, in total and per direction."""
    d = mem[mem["km"] > 0].copy()
    fw = d["forward"].to_numpy(dtype=bool)
    d["events_forward"] = np.where(fw, d["events"], 0)
    d["events_backward"] = np.where(fw, 0, d["events"])
    d["km_forward"] = np.where(fw, d["km"], 0.0)
    d["km_backward"] = np.where(fw, 0.0, d["km"])
    g = d.groupby("unit", sort=True)
    sums = g[
        [
            "events",
            "km",
            "events_forward",
            "events_backward",
            "km_forward",
            "km_backward",
            "wkm_modelled",
            "wkm_distance",
        ]
    ].sum()
    main = (
        d.sort_values(["unit", "km"], ascending=[True, False], kind="stable")
        .groupby("unit", sort=True)
        .first()
    )  # band and street of the member driven most
    out = sums.join(main[["street", "band", "end_u", "end_v", "end_key"]]).reset_index()
    return out.rename(columns={"end_u": "u", "end_v": "v", "end_key": "key"})


def _periods(
    net: Any,
    drives: list[Drive],
    matched: pd.DataFrame,
    mem: pd.DataFrame,
    weight: np.ndarray,
    group: str,
) -> pd.DataFrame:
    """Return events, km and weighted km per group and local day (km split by clock hour)."""
    streets = mem["street"].replace("", "unnamed street").to_numpy()
    bands = mem["band"].to_numpy()
    rows = []
    for d in drives:
        if len(d.edge_pos) == 0:
            continue
        vis, hb, part = split_by_hour(d.edge_t0, d.edge_t1, d.edge_km, net.timezone)
        pos = d.edge_pos[vis]
        rows.append(
            pd.DataFrame({"pos": pos, "hb": hb, "events": 0, "km": part, "wkm": part * weight[pos]})
        )
    if len(matched):
        t = pd.DatetimeIndex(matched["time"]).tz_convert("UTC").as_unit("ns").asi8
        hb = _wall_ns(t, net.timezone) // HOUR_NS
        rows.append(
            pd.DataFrame(
                {
                    "pos": matched["pos"].to_numpy(dtype=np.int64),
                    "hb": hb,
                    "events": 1,
                    "km": 0.0,
                    "wkm": 0.0,
                }
            )
        )
    cols = ["group", "period", "events", "km", "wkm"]
    if not rows:
        return pd.DataFrame(columns=cols)
    p = pd.concat(rows, ignore_index=True)
    if group == "street":
        g = streets[p["pos"]]
    elif group == "band":
        g = bands[p["pos"]]
    else:
        g = _hour_of_week(p["hb"].to_numpy())
    p["group"], p["period"] = g, _day_iso(p["hb"].to_numpy())
    return p.groupby(["group", "period"], as_index=False, sort=True)[["events", "km", "wkm"]].sum()[
        cols
    ]


def _baseline(
    periods: pd.DataFrame, until: str | None, rate: float | None, expected: str
) -> tuple[pd.DataFrame, dict[str, float], str]:
    """Return the periods to watch, the in-control rate of each group and how it was set."""
    per = "weighted km" if expected == "modelled" else "km"
    groups = sorted(periods["group"].unique().tolist()) if len(periods) else []
    if rate is not None:
        return periods, dict.fromkeys(groups, float(rate)), f"given, {rate:g} events per {per}"
    if until is not None:
        cal = periods["period"].astype(str) <= until
        e, w = float(periods.loc[cal, "events"].sum()), float(periods.loc[cal, "wkm"].sum())
        if w <= 0:
            raise OptionError(f"no driving on or before {until}", field="--baseline-until")
        if e == 0:
            raise OptionError(
                f"no events on or before {until}: the in-control rate would be 0",
                field="--baseline-until",
            )
        watched = periods.loc[~cal].reset_index(drop=True)
        if not len(watched):
            raise OptionError(f"no driving after {until} to watch", field="--baseline-until")
        r = e / w
        return (
            watched,
            dict.fromkeys(groups, r),
            (
                f"calibration period up to {until}: {e:.0f} events over {w:.3f} {per} = {r:.4g} "
                f"per {per}; charts watch the days after"
            ),
        )
    tot = periods.groupby("group")[["events", "wkm"]].sum()
    e_all, w_all = float(tot["events"].sum()), float(tot["wkm"].sum())
    out = {}
    for g, r in tot.iterrows():
        w_rest = w_all - float(r["wkm"])
        out[str(g)] = (
            (e_all - float(r["events"])) / w_rest
            if w_rest > 0
            else (e_all / w_all if w_all > 0 else 0.0)
        )
    return (
        periods,
        out,
        (
            f"leave-one-group-out: each group's rate is the events per {per} of all other groups "
            "(the same data, not a calibration period)"
        ),
    )


def _charts(
    periods: pd.DataFrame,
    *,
    shift: float,
    arl0: float,
    arl0_family: float | None,
    rate_of: dict[str, float],
) -> tuple[pd.DataFrame, pd.DataFrame, dict[str, Any]]:
    """Design one CUSUM per group, run it, and describe the family of charts."""
    cols = ["group", "days", "rate", "mu0", "k", "h", "arl0_target", "arl0", "arl1"]
    mu = {}
    for g, part in periods.groupby("group", sort=True):
        pos = part["expected"] > 0
        if pos.any():
            mu[str(g)] = float(part.loc[pos, "expected"].mean())
    n = len(mu)
    each = arl0_family * n if arl0_family is not None else arl0
    rows, found, designs = [], [], []
    all_days = periods["period"].nunique() if len(periods) else 0
    shares = []
    for g, m in mu.items():
        part = periods[periods["group"] == g]
        d = early_warning.design_cusum(m, ratio=shift, arl0=each)
        designs.append(d)
        shares.append(len(part) / all_days)
        rows.append(
            {
                "group": g,
                "days": len(part),
                "rate": rate_of[g],
                "mu0": d.mu0,
                "k": d.k,
                "h": d.h,
                "arl0_target": d.arl0_target,
                "arl0": d.arl0,
                "arl1": d.arl1,
            }
        )
        hit = early_warning.cusum_alerts(part, design=d)
        if len(hit):
            found.append(hit)
    alerts = (
        pd.concat(found, ignore_index=True)
        if found
        else pd.DataFrame(columns=["group", "period", "statistic", "h"])
    )
    if len(alerts):
        alerts = alerts.sort_values(["period", "group"], kind="stable").reset_index(drop=True)
    family: dict[str, Any] = {
        "charts": n,
        "arl0_each": each,
        "arl0_family_target": arl0_family,
        "design": (
            f"each of {n} charts at {arl0_family:g} x {n} = {each:g} days"
            if arl0_family is not None
            else f"each chart alone at {arl0:g} days (not a family design)"
        ),
        "family_arl0": None,
        "false_alarms_per_30_days": None,
    }
    if designs:
        family["family_arl0"] = round(early_warning.family_arl(designs), 3)
        family["false_alarms_per_30_days"] = round(
            early_warning.false_alarms_per(MONTH_DAYS, designs, shares), 4
        )
    return pd.DataFrame(rows, columns=cols), alerts, family


def cusum_chart(result: WatchResult, groups: list[str]) -> bytes:
    """Return a PNG of each group's CUSUM statistic over its decision interval, by day."""
    from routerisk.render import report

    fig = report.new_figure(8.0, 3.2)
    ax = fig.subplots()
    design = {r.group: r for r in result.designs.itertuples(index=False)}
    for g in groups:
        if g not in design:
            continue
        r = design[g]
        d = early_warning.CusumDesign(r.mu0, 0.0, r.k, r.h, r.arl0_target, r.arl0, r.arl1, 1)
        part = result.periods[result.periods["group"] == g].sort_values("period")
        s = early_warning.cusum_path(
            part["events"].to_numpy(), part["expected"].to_numpy(), design=d
        )
        ax.step(range(len(s)), s / r.h if r.h > 0 else s, where="post", label=g)
    ax.axhline(1.0, color="#8e2a58", ls="--", lw=1, label="decision interval h (alarm above)")
    ax.set_xlabel("day (in order of driving)")
    ax.set_ylabel("CUSUM statistic / h")
    ax.legend(fontsize=7)
    ax.grid(alpha=0.3)
    return report.png_bytes(fig)


def _comment(lines: list[str]) -> str:
    return "".join(f"# {x}\n" for x in lines)


def flag_map(net: Any, result: WatchResult, prov: dict[str, Any] | None = None) -> Any:
    """Return the map of the network with the flagged units (folium), with provenance."""
    from routerisk.render import mapview

    seg = result.segments
    flagged = seg[seg["flagged"]]
    mem = result.members
    fl_mem = mem[mem["unit"].isin(set(flagged["unit"]))].merge(
        flagged[["unit", "eb_ratio"]], on="unit"
    )
    edges = net.edges.reset_index()
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), context=net)
    edges["_c"] = "#b9b4a8"
    edges["street"] = edges["name"].fillna("")
    mapview.add_lines(m, edges, name="network", colour_col="_c", fields={}, weight=2, opacity=0.6)
    if len(flagged):
        fl = (
            fl_mem.drop(columns=["street"])
            .merge(
                flagged[["unit", "street", "events", "expected", "eb_rate", "p_value"]].rename(
                    columns={"events": "unit_events"}
                ),
                on="unit",
            )
            .merge(edges[["u", "v", "key", "geometry"]], on=["u", "v", "key"])
        )
        import geopandas as gpd

        fl = gpd.GeoDataFrame(fl, geometry="geometry", crs=net.crs)
        fl["_c"] = "#c1121f"
        mapview.add_lines(
            m,
            fl,
            name=f"flagged {result.unit}s",
            colour_col="_c",
            weight=7,
            fields={
                "street": "street",
                "unit": result.unit,
                "unit_events": "events (both directions)",
                "events": "events (this direction)",
                "expected": "expected",
                "eb_rate": "EB rate per km",
                "p_value": f"p-value ({result.test_used})",
            },
        )
    mapview.layer_control(m)
    mapview.add_panel(
        m,
        mapview.legend_html(
            "Early warnings",
            [
                (
                    "#c1121f",
                    f"{result.unit} flagged (FDR-controlled, {result.test_used} test, "
                    f"{result.expected} expected)",
                ),
                ("#b9b4a8", "network"),
            ],
            background=mapview.background_of(m),
        ),
    )
    if prov is not None:
        mapview.add_provenance(m, prov)
    return m


def write_outputs(
    net: Any,
    result: WatchResult,
    out: str | Path,
    *,
    force: bool = False,
    close: bool = False,
    inputs: dict[str, Any] | None = None,
) -> Path:
    """Write overlay.yaml, segments.csv, charts.csv, map.html and report.html into ``out``.

    Each records the tool version, the profile fingerprint and the checksums of the
    network source and of ``inputs`` (role -> file or folder: events, drives), and says
    which unit, expectation, test and baseline were used.
    """
    from routerisk import CAUTION
    from routerisk.io.atomic import atomic_directory, provenance, provenance_line
    from routerisk.network import overlay
    from routerisk.render import mapview, report

    prov = provenance(profile=net.profile.fingerprint, network=net, inputs=inputs)
    seg = result.segments
    flagged = seg[seg["flagged"]]
    how = result.method_lines()
    mem = result.members
    fl_mem = mem[mem["unit"].isin(set(flagged["unit"]))].merge(
        flagged[["unit", "eb_ratio"]], on="unit"
    )
    with atomic_directory(out, force=force) as tmp:
        overlay.write_overlay(
            tmp / "overlay.yaml",
            overlay.flagged_rows(fl_mem, close=close),
            profile=net.profile.fingerprint,
            source=f"routerisk watch ({result.unit} units, "
            f"{result.test_used} test, {result.expected} expected)",
            made_from=prov,
        )
        cols = [
            "unit",
            "street",
            "band",
            "u",
            "v",
            "key",
            "events",
            "events_forward",
            "events_backward",
            "km",
            "km_forward",
            "km_backward",
            "expected",
            "eb_rate",
            "eb_ratio",
            "p_value",
            "q_value",
            "flagged",
            "expected_modelled",
            "expected_distance",
            "flagged_modelled",
            "flagged_distance",
            "disagree",
        ]
        head = _comment([CAUTION, LIMITS, *how, provenance_line(prov)])
        table = seg[cols].round(6)
        for col in ("p_value", "q_value"):  # small p-values keep their digits
            table[col] = [f"{x:.6g}" for x in seg[col]]
        (tmp / "segments.csv").write_text(
            head + table.to_csv(index=False, lineterminator="\n"), encoding="utf-8"
        )
        (tmp / "charts.csv").write_text(
            head + result.designs.round(6).to_csv(index=False, lineterminator="\n"),
            encoding="utf-8",
        )
        m = flag_map(net, result, prov)
        (tmp / "map.html").write_text(mapview.render(m), encoding="utf-8")
        groups = list(result.alerts["group"].astype(str)[:5]) or list(
            result.periods.groupby("group")["events"]
            .sum()
            .sort_values(ascending=False)
            .index.astype(str)[:3]
        )
        show = [
            "unit",
            "street",
            "events",
            "events_forward",
            "events_backward",
            "km",
            "expected",
            "eb_rate",
            "p_value",
            "q_value",
        ]
        dis = seg[seg["disagree"]]
        body = [
            report.section(
                "How these numbers were made",
                "".join(report.paragraph(x) for x in how),
                report.paragraph(LIMITS),
            ),
            report.section(
                f"Flagged {result.unit}s",
                report.frame_html(flagged[show].round(4), index=False)
                if len(flagged)
                else report.paragraph(
                    f"No {result.unit} has more events than its "
                    f"{result.expected} expectation explains at a false "
                    f"discovery rate of {result.q:g}."
                ),
            ),
            report.section(
                "Where modelled and distance-only expectations disagree",
                report.paragraph(
                    "Modelled expectations tolerate more events where the model expects more "
                    "pedestrians; distance-only expectations use the km driven alone. Each "
                    "row is flagged under one and not the other."
                ),
                report.frame_html(
                    dis[
                        [
                            "unit",
                            "street",
                            "events",
                            "km",
                            "expected_modelled",
                            "flagged_modelled",
                            "expected_distance",
                            "flagged_distance",
                        ]
                    ].round(4),
                    index=False,
                )
                if len(dis)
                else report.paragraph("None: both flag the same units."),
            ),
            report.section(
                "CUSUM charts (one per group)",
                report.frame_html(result.designs.round(4), index=False)
                if len(result.designs)
                else report.paragraph("No group has a positive in-control expectation."),
            ),
            report.section(
                "CUSUM alerts",
                report.frame_html(result.alerts, index=False)
                if len(result.alerts)
                else report.paragraph("No alert."),
                report.image_html(cusum_chart(result, groups), alt="CUSUM statistics over time"),
            ),
            report.section(
                "Events left out",
                report.frame_html(result.rejected, index=False)
                if len(result.rejected)
                else report.paragraph("None."),
            ),
        ]
        fam = result.family
        facts = [
            ("profile", f"{net.profile.name} ({net.profile.fingerprint})"),
            ("events matched", len(result.matched)),
            ("false discovery rate", result.q),
            ("test", f"{result.test_used} (asked: {result.test})"),
            ("unit", result.unit),
            ("expected", result.expected),
            (
                "CUSUM",
                f"{fam.get('design')}; family run length "
                f"{_fmt(fam.get('family_arl0'))} days, "
                f"{_fmt(fam.get('false_alarms_per_30_days'))} false alarms "
                f"per {MONTH_DAYS:g} days",
            ),
        ]
        (tmp / "report.html").write_text(
            report.page("Early warnings", body, facts=facts, provenance=prov), encoding="utf-8"
        )
    return Path(out)


__all__ = [
    "discovery_units",
    "watch",
    "write_outputs",
    "match_events",
    "read_drives",
    "split_by_hour",
    "dt",
]

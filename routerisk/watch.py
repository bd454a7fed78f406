"""Early warnings: match logged safety events to the segments driven, rate them, flag them.

Events (interventions, hard braking, near misses) are placed on the segment the vehicle was
on at the event's time: the drive whose recorded trace covers that time, its map-matched edge
at the nearest fix in time. Events off the driven route, outside every drive's time span, or
with bad coordinates or times are reported and left out, never matched silently.

Per segment: events, km driven, the expected count given the fleet's overall rate and the
segment's modelled pedestrian exposure, the empirical Bayes rate (gamma prior by the method of
moments; Hauer 1997), an exact Poisson p-value and Benjamini-Hochberg flags. Per group
(street, exposure band or hour of week) and day: a Poisson CUSUM (Page 1954; Lucas 1985).
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import shapely

from . import early_warning, matching, routes
from ._cli_text import WATCH_GROUPS
from .errors import InputFileError, OptionError

log = logging.getLogger(__name__)

MAX_TIME_GAP_S = 30.0
MAX_OFFSET_M = 50.0
GROUPS = WATCH_GROUPS
#: Event years accepted (as for route times, routerisk.routes).
YEARS = (1900, 2200)


@dataclass
class Drive:
    """One recorded drive: its name, matched edges, and per-fix times and edges."""

    name: str
    times: np.ndarray  # int64 ns UTC per fix
    fix_edge: np.ndarray  # index into edges (row positions of the network), -1 if dropped
    edge_pos: np.ndarray  # network row positions of the driven edges
    edge_km: np.ndarray  # km driven on each


@dataclass
class WatchResult:
    """Segments table, alerts, rejected events and the settings used."""

    segments: pd.DataFrame
    alerts: pd.DataFrame
    matched: pd.DataFrame
    rejected: pd.DataFrame
    q: float
    design: Any
    group: str
    periods: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk watch``."""
        segs = [{
            "edge": [int(r.u), int(r.v), int(r.key)], "street": str(r.street),
            "events": int(r.events), "km_driven": round(float(r.km), 6),
            "expected": round(float(r.expected), 6), "eb_rate": round(float(r.eb_rate), 6),
            "p_value": float(f"{r.p_value:.6g}"), "flagged": bool(r.flagged),
        } for r in self.segments.itertuples(index=False)]
        alerts = [{"group": str(r.group), "since": str(r.period),
                   "statistic": round(float(r.statistic), 6)}
                  for r in self.alerts.itertuples(index=False)]
        rej = [{"row": int(r.row), "reason": str(r.reason)}
               for r in self.rejected.itertuples(index=False)]
        return {"segments": segs, "alerts": alerts, "fdr": self.q,
                "cusum": self.design.as_dict() if self.design else None,
                "group": self.group, "events_matched": int(len(self.matched)),
                "events_rejected": rej}


def read_drives(net: Any, folder: str | Path, index: Any = None) -> list[Drive]:
    """Read and map-match every drive with times in ``folder``."""
    d = Path(folder)
    if not d.is_dir():
        raise InputFileError("drives folder not found", path=d, field="--drives")
    files = sorted(p for p in d.iterdir() if p.suffix.lower() in (".gpx", ".geojson", ".csv"))
    if not files:
        raise InputFileError("no .gpx, .geojson or .csv drives in the folder", path=d,
                             field="--drives")
    idx = index or matching.RoadIndex(net.graph)
    eidx = net.edges.index
    km = net.edges["length"].to_numpy() / 1000.0
    out = []
    for f in files:
        for r in routes.read_routes(f, default_tz=net.timezone):
            if r.times is None:
                raise InputFileError("a drive needs a time at every point", path=f,
                                     field=f"route {r.name!r}")
            m = matching.match_trace(idx, r)
            mi = pd.MultiIndex.from_tuples(list(m.edges), names=eidx.names)
            pos = eidx.get_indexer(mi)
            fe = np.asarray(m.point_edge)
            fix_edge = np.where(fe >= 0, pos[np.clip(fe, 0, len(pos) - 1)], -1)
            times = pd.DatetimeIndex(list(r.times)).tz_convert("UTC").as_unit("ns").asi8
            out.append(Drive(f"{f.name}:{r.name}", times, fix_edge, pos,
                             km[pos] * np.asarray(m.fractions)))
    return out


def match_events(net: Any, events: pd.DataFrame, drives: list[Drive], *,
                 max_time_gap_s: float = MAX_TIME_GAP_S,
                 max_offset_m: float = MAX_OFFSET_M) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Place each event on the edge its vehicle was driving; return (matched, rejected)."""
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", net.crs, always_xy=True)
    geoms = net.edges.geometry.to_numpy()
    t_ev = pd.DatetimeIndex(events["time"]).tz_convert("UTC").as_unit("ns").asi8 if len(
        events) else \
        np.zeros(0, dtype=np.int64)
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
            rejected.append({"row": row, "reason": f"{off:.0f} m off the route driven then "
                                                   f"({d.name})"})
            continue
        rows.append({"row": row, "drive": d.name, "pos": pos, "offset_m": off,
                     "time": events["time"].iat[i], "type": events["type"].iat[i]})
    return (pd.DataFrame(rows, columns=["row", "drive", "pos", "offset_m", "time", "type"]),
            pd.DataFrame(rejected, columns=["row", "reason"]))


def _hour_label(ts: pd.Series, tz: Any) -> pd.Series:
    local = pd.DatetimeIndex(ts).tz_convert(tz)
    names = np.array(["mon", "tue", "wed", "thu", "fri", "sat", "sun"])
    return pd.Series([f"{names[d]} {h:02d}" for d, h in zip(local.day_of_week, local.hour,
                                                           strict=True)])


def watch(net: Any, events_path: str | Path, drives_folder: str | Path, *, q: float = 0.1,
          shift: float = 2.0, arl0: float = 500.0, group: str = "street",
          use_exposure: bool = True, pvalue: str = "poisson") -> WatchResult:
    """Run the early-warning analysis; see the module docstring."""
    if group not in GROUPS:
        raise OptionError(f"must be one of {', '.join(GROUPS)}", field="--group")
    if not 0 < q < 1:
        raise OptionError(f"must be between 0 and 1, got {q}", field="--fdr")
    if not shift > 1:
        raise OptionError(f"must be above 1, got {shift}", field="--shift")
    if not arl0 > 1:
        raise OptionError(f"must be above 1, got {arl0}", field="--arl0")
    good, bad = early_warning.read_events(events_path, tz=net.timezone)
    rejected = bad[["row", "reason"]].copy() if len(bad) else pd.DataFrame(
        columns=["row", "reason"])
    if len(good):  # times beyond the nanosecond calendar cannot be placed on any drive
        years = pd.DatetimeIndex(good["time"]).year
        odd = np.asarray((years < YEARS[0]) | (years > YEARS[1]))
        if odd.any():
            rejected = pd.concat([rejected, pd.DataFrame({
                "row": good["row"].to_numpy()[odd],
                "reason": f"time outside the years {YEARS[0]}-{YEARS[1]}"})],
                ignore_index=True)
            good = good.loc[~odd].reset_index(drop=True)
    drives = read_drives(net, drives_folder)
    matched, off = match_events(net, good, drives)
    rejected = pd.concat([rejected, off], ignore_index=True).sort_values("row", kind="stable")
    edges = net.edges
    n = len(edges)
    km = np.zeros(n)
    for d in drives:
        np.add.at(km, d.edge_pos, d.edge_km)
    counts = np.bincount(matched["pos"].to_numpy(dtype=np.int64), minlength=n) if len(
        matched) else np.zeros(n, dtype=np.int64)
    driven = np.flatnonzero(km > 0)
    expo = edges["exposure_km"].to_numpy(dtype=float)
    if use_exposure:
        mean = float((expo[driven] * km[driven]).sum() / km[driven].sum())
        weight = expo[driven] / mean if mean > 0 else np.ones(len(driven))
    else:
        weight = np.ones(len(driven))
    idx = edges.index[driven]
    table = pd.DataFrame({
        "unit": [f"{u}-{v}-{k}" for u, v, k in idx], "u": idx.get_level_values(0),
        "v": idx.get_level_values(1), "key": idx.get_level_values(2),
        "street": edges["name"].fillna("").to_numpy()[driven],
        "band": edges["band"].to_numpy()[driven],
        "events": counts[driven], "km": km[driven], "weight": np.maximum(weight, 1e-6)})
    rates, prior = early_warning.unit_rates(table, unit="unit", events="events", km="km",
                                            weight="weight", q=q, pvalue=pvalue)
    for col in ("u", "v", "key", "street", "band"):
        rates[col] = table[col].to_numpy()
    rates = rates.sort_values(["flagged", "p_value", "unit"], ascending=[False, True, True],
                              kind="stable").reset_index(drop=True)
    # CUSUM per group and day: expected = overall rate x weighted km driven that day
    m_rate = float(prior.mean)  # events per weighted km, the pooled in-control rate
    period_rows = []
    pos_to_row = {int(p): i for i, p in enumerate(driven)}
    w_of = dict(zip(driven.tolist(), table["weight"].tolist(), strict=True))
    for d in drives:
        day = pd.Timestamp(d.times[0], tz="UTC").tz_convert(net.timezone).date().isoformat()
        hour = _hour_label(pd.Series(pd.to_datetime(d.times[:1], utc=True)), net.timezone)[0]
        for p, k_ in zip(d.edge_pos, d.edge_km, strict=True):
            g = _group_of(group, table, pos_to_row[int(p)], hour)
            period_rows.append((g, day, 0, m_rate * k_ * w_of[int(p)]))
    for r in matched.itertuples(index=False):
        day = pd.Timestamp(r.time).tz_convert(net.timezone).date().isoformat()
        hour = _hour_label(pd.Series([r.time]), net.timezone)[0]
        g = _group_of(group, table, pos_to_row[int(r.pos)], hour)
        period_rows.append((g, day, 1, 0.0))
    periods = pd.DataFrame(period_rows, columns=["group", "period", "events", "expected"])
    periods = periods.groupby(["group", "period"], as_index=False).sum()
    # one chart per group, designed for that group's typical expected count per day
    design = None
    alert_parts = []
    for g, part in periods.groupby("group", sort=True):
        mu_g = float(part.loc[part["expected"] > 0, "expected"].mean()) if (
            part["expected"] > 0).any() else 0.0
        if mu_g <= 0:
            continue
        d_g = early_warning.design_cusum(mu_g, ratio=shift, arl0=arl0)
        design = design or d_g
        found = early_warning.cusum_alerts(part, design=d_g)
        if len(found):
            alert_parts.append(found)
    alerts = pd.concat(alert_parts, ignore_index=True) if alert_parts else pd.DataFrame(
        columns=["group", "period", "statistic", "h"])
    if len(alerts):
        alerts = alerts.sort_values(["period", "group"], kind="stable").reset_index(drop=True)
    return WatchResult(rates, alerts, matched, rejected.reset_index(drop=True), q, design,
                       group, periods)


def _group_of(group: str, table: pd.DataFrame, row: int, hour: str) -> str:
    if group == "street":
        return str(table["street"].iat[row]) or "unnamed street"
    if group == "band":
        return str(table["band"].iat[row])
    return hour


def cusum_chart(result: WatchResult, groups: list[str]) -> bytes:
    """Return a PNG of the CUSUM statistic over time for the given groups."""
    from . import report

    fig = report.new_figure(8.0, 3.2)
    ax = fig.subplots()
    d = result.design
    for g in groups:
        part = result.periods[result.periods["group"] == g].sort_values("period")
        s = early_warning.cusum_path(part["events"].to_numpy(), part["expected"].to_numpy(),
                                     design=d)
        ax.step(range(len(s)), s, where="post", label=g)
    ax.axhline(d.h, color="#8e2a58", ls="--", lw=1, label=f"decision interval h = {d.h:.2f}")
    ax.set_xlabel("day (in order of driving)")
    ax.set_ylabel("CUSUM statistic (events)")
    ax.legend(fontsize=7)
    ax.grid(alpha=0.3)
    return report.png_bytes(fig)


def write_outputs(net: Any, result: WatchResult, out: str | Path, *, force: bool = False,
                  close: bool = False, inputs: dict[str, Any] | None = None) -> Path:
    """Write overlay.yaml, segments.csv, map.html and report.html into ``out``.

    Each records the tool version, the profile fingerprint and the checksums of the
    network source and of ``inputs`` (role -> file or folder: events, drives).
    """
    from . import CAUTION, mapview, overlay, report
    from ._io import atomic_directory, provenance, provenance_line

    prov = provenance(profile=net.profile.fingerprint, network=net, inputs=inputs)
    seg = result.segments
    flagged = seg[seg["flagged"]]
    with atomic_directory(out, force=force) as tmp:
        overlay.write_overlay(tmp / "overlay.yaml", overlay.flagged_rows(flagged, close=close),
                              profile=net.profile.fingerprint, source="routerisk watch",
                              made_from=prov)
        cols = ["u", "v", "key", "street", "band", "events", "km", "expected", "eb_rate",
                "eb_ratio", "p_value", "q_value", "flagged"]
        (tmp / "segments.csv").write_text(
            f"# {CAUTION}\n# {provenance_line(prov)}\n"
            + seg[cols].round(6).to_csv(index=False, lineterminator="\n"), encoding="utf-8")
        edges = net.edges.reset_index()
        ll = net.edges.to_crs("EPSG:4326").total_bounds
        m = mapview.new_map(tuple(ll))
        edges["_c"] = "#b9b4a8"
        edges["street"] = edges["name"].fillna("")
        mapview.add_lines(m, edges, name="network", colour_col="_c", fields={}, weight=2,
                          opacity=0.6)
        if len(flagged):
            fl = flagged.merge(edges[["u", "v", "key", "geometry"]], on=["u", "v", "key"])
            import geopandas as gpd

            fl = gpd.GeoDataFrame(fl, geometry="geometry", crs=net.crs)
            fl["_c"] = "#c1121f"
            mapview.add_lines(m, fl, name="flagged segments", colour_col="_c", weight=7,
                              fields={"street": "street", "events": "events",
                                      "expected": "expected", "eb_rate": "EB rate per km",
                                      "p_value": "p-value"})
        mapview.add_panel(m, mapview.legend_html("Early warnings", [
            ("#c1121f", "segment flagged (FDR-controlled)"), ("#b9b4a8", "network")]))
        mapview.add_provenance(m, prov)
        (tmp / "map.html").write_text(mapview.render(m), encoding="utf-8")
        groups = list(result.alerts["group"].astype(str)[:5]) or list(
            result.periods.groupby("group")["events"].sum().sort_values(ascending=False)
            .index.astype(str)[:3])
        body = [
            report.section("Flagged segments", report.frame_html(
                flagged[["street", "events", "km", "expected", "eb_rate", "p_value",
                         "q_value"]].round(4), index=False) if len(flagged) else
                report.paragraph("No segment has more events than its exposure explains at "
                                 f"a false discovery rate of {result.q:g}.")),
            report.section("CUSUM alerts", report.frame_html(result.alerts, index=False)
                           if len(result.alerts) else report.paragraph("No alert."),
                           report.image_html(cusum_chart(result, groups),
                                             alt="CUSUM statistics over time")),
            report.section("Events left out", report.frame_html(result.rejected, index=False)
                           if len(result.rejected) else report.paragraph("None.")),
        ]
        facts = [("profile", f"{net.profile.name} ({net.profile.fingerprint})"),
                 ("events matched", len(result.matched)),
                 ("false discovery rate", result.q),
                 ("CUSUM", f"shift x{result.design.ratio:g}, in-control ARL "
                           f"{result.design.arl0:.0f} days (target "
                           f"{result.design.arl0_target:g})")]
        (tmp / "report.html").write_text(report.page("Early warnings", body, facts=facts,
                                                     provenance=prov), encoding="utf-8")
    return Path(out)


__all__ = ["watch", "write_outputs", "match_events", "read_drives", "dt"]

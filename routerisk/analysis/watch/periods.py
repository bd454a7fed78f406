"""Events and km per group and local day; the CUSUM baseline and charts."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from routerisk.analysis import early_warning
from routerisk.analysis.watch.result import (
    DAY_NAMES,
    HOUR_NS,
    MONTH_DAYS,
    Drive,
)
from routerisk.errors import OptionError
from routerisk.io.timezones import wall_clock_ns as _wall_ns


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

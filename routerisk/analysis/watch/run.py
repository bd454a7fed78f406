"""The watch workflow: check the settings, read, match, rate and chart."""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from routerisk.analysis import early_warning
from routerisk.analysis.watch.drives import match_events, read_drives
from routerisk.analysis.watch.periods import _baseline, _charts, _periods
from routerisk.analysis.watch.result import (
    EXPECTED,
    GROUPS,
    TESTS,
    UNITS,
    Drive,
    WatchResult,
)
from routerisk.analysis.watch.units import _unit_table, discovery_units
from routerisk.errors import OptionError
from routerisk.io.timezones import YEARS


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

"""Tests of routerisk.analysis.evidence and the ``routerisk evidence`` command."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import routerisk
from routerisk.analysis import evidence
from routerisk.cli import main
from routerisk.errors import InputFileError, OptionError

FLEET_MI_PER_YEAR = 100 * 24 * 365 * 25  # 100 vehicles, 24 h a day, 25 mph: 21.9 million mi


def _inputs(**kw: object) -> evidence.EvidenceInputs:
    base: dict[str, object] = {"benchmark": 1.09, "per": 1e8}
    base.update(kw)
    return evidence.EvidenceInputs(**base)  # type: ignore[arg-type]


def _cli_json(capsys: pytest.CaptureFixture[str], *argv: str) -> dict[str, object]:
    assert main(["evidence", *argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


# --- reference figures ---------------------------------------------------------------------


def test_kalra_paddock_zero_failures() -> None:
    plan = evidence.plan_evidence(_inputs(improvement=0.0))
    # Kalra and Paddock (2016), "Driving to safety", Transp. Res. Part A 94:182-193: about
    # 275 million failure-free miles show a rate below 1.09 per 100 million at 95 % [secondary]
    assert plan.miles_no_failure == pytest.approx(275e6, rel=0.005)
    assert plan.miles_no_failure_binomial == pytest.approx(275e6, rel=0.005)
    # same source: 100 vehicles x 24 h x 25 mph = 21.9 million mi a year, ~12.5 years [computed]
    assert plan.fleet_miles_per_year == pytest.approx(21.9e6)
    assert plan.years_no_failure == pytest.approx(12.5, abs=0.1)
    # improvement 0: power figures are not defined and say why
    assert plan.miles_power is None and plan.years_power is None
    assert plan.miles_power_exact is None and plan.power_note


def test_kalra_paddock_power_figure() -> None:
    plan = evidence.plan_evidence(_inputs(improvement=0.2, confidence=0.95, power=0.8))
    # Kalra and Paddock (2016), Transp. Res. Part A 94:182-193: about 11 billion miles and about
    # 518 years for the fleet above, to show a 20 % improvement at 95 % / 80 % power
    # [secondary: figures from a secondary copy, not checked against the paper]
    # (the normal approximation is no longer the headline: miles_power_normal_approx)
    assert plan.miles_power_normal_approx == pytest.approx(11e9, rel=0.05)
    assert plan.years_power_normal_approx == pytest.approx(518, abs=1.0)
    # the score form of the normal approximation does not reproduce the quoted figure
    score = evidence.distance_power_normal(1.09e-8, 0.872e-8, 0.95, 0.8, variance="score")
    assert score > 1.15 * plan.miles_power_normal_approx
    # the headline is the exact Poisson test [computed, no published source]
    assert plan.miles_power == plan.miles_power_exact == pytest.approx(12.91e9, rel=0.001)


def test_garwood_upper_count_limits() -> None:
    target = 2.5e-8
    # Garwood (1936), "Fiducial limits for the Poisson distribution", Biometrika 28:437-442:
    # 95 % one-sided upper limits of the count for k = 0..3 [published]
    for k, limit in enumerate([2.996, 4.744, 6.296, 7.754]):
        n_k = evidence.distance_allowed_events(target, 0.95, k)
        assert n_k * target == pytest.approx(limit, abs=5e-4)


def test_common_practice_fifteen_years() -> None:
    # common practice, no source [practice]: 11 deaths per 1e9 miles, 100 vehicles x 24 h x
    # 25 mph, 20 % improvement, 95 %: about 15.5 years with no fatality
    plan = evidence.plan_evidence(evidence.EvidenceInputs(benchmark=11, per=1e9))
    assert plan.target_rate == pytest.approx(8.8)
    assert plan.years_no_failure == pytest.approx(15.5, abs=0.1)


# --- agreement with scipy, computed independently -------------------------------------------


@pytest.mark.parametrize("confidence", [0.5, 0.9, 0.95, 0.99])
def test_zero_event_distance_matches_chi2_and_poisson(confidence: float) -> None:
    target = 3e-7
    n = evidence.distance_zero_events(target, confidence)
    assert n == pytest.approx(stats.chi2.ppf(confidence, 2) / (2 * target), rel=1e-12)
    # at that distance, seeing no event is exactly 1 - C likely when the rate is the target
    assert stats.poisson.pmf(0, target * n) == pytest.approx(1 - confidence, rel=1e-9)


@pytest.mark.parametrize(("distance", "events"), [(1e6, 0), (2.5e6, 3), (4e7, 40)])
def test_upper_rate_is_exact_poisson_limit(distance: float, events: int) -> None:
    up = evidence.upper_rate(distance, events, 0.95)
    # Garwood's limit: the rate at which seeing <= K events is exactly 5 % likely
    assert stats.poisson.cdf(events, up * distance) == pytest.approx(0.05, rel=1e-7)
    assert evidence.upper_rate(0.0, events, 0.95) == math.inf


def test_normal_power_distance_gives_the_asked_power() -> None:
    lam0, lam1, c, p = 2e-6, 1.4e-6, 0.9, 0.85
    n = evidence.distance_power_normal(lam0, lam1, c, p)
    # Wald test with the variance of the observed (true = target) rate
    achieved = stats.norm.cdf((lam0 - lam1) * math.sqrt(n / lam1) - stats.norm.ppf(c))
    assert achieved == pytest.approx(p, abs=1e-12)


def _brute_exact_power(lam0: float, lam1: float, c: float, p: float) -> tuple[float, int]:
    # scan every distance where the critical count of the exact test steps up
    counts = np.arange(0, 5000)
    n_c = stats.chi2.ppf(c, 2 * counts + 2) / (2 * lam0)
    # critical count check: at n_c, P(X <= c | lam0 n_c) = 1 - C exactly
    assert np.allclose(stats.poisson.cdf(counts, lam0 * n_c), 1 - c, rtol=1e-6)
    powers = stats.poisson.cdf(counts, lam1 * n_c)
    i = int(np.argmax(powers >= p))
    return float(n_c[i]), i


@pytest.mark.parametrize(
    ("improvement", "confidence", "power"),
    [(0.2, 0.95, 0.8), (0.5, 0.9, 0.9), (0.35, 0.99, 0.5), (0.9, 0.8, 0.7)],
)
def test_exact_power_matches_brute_force(
    improvement: float, confidence: float, power: float
) -> None:
    lam0 = 1.09e-8
    lam1 = (1 - improvement) * lam0
    got = evidence.distance_power_exact(lam0, lam1, confidence, power)
    assert got is not None
    n, k = _brute_exact_power(lam0, lam1, confidence, power)
    assert got.max_events == k
    assert got.distance == pytest.approx(n, rel=1e-12)
    assert got.achieved >= power
    # just below that distance the test has one critical count fewer and too little power
    if k > 0:
        n_prev = stats.chi2.ppf(confidence, 2 * k) / (2 * lam0)
        assert stats.poisson.cdf(k - 1, lam1 * n_prev) < power


def test_exact_power_reference_case() -> None:
    plan = evidence.plan_evidence(_inputs())
    assert plan.miles_power_exact == pytest.approx(12.91e9, rel=0.001)  # computed, no source
    assert plan.events_power_exact == 121
    assert plan.years_power_exact == pytest.approx(589.5, abs=0.5)


def test_exact_power_at_step_rises_with_count() -> None:
    # the bisection in distance_power_exact assumes this; check it on a grid
    counts = np.arange(0, 20000)
    for c in (0.5, 0.9, 0.95, 0.99):
        mean0 = stats.chi2.ppf(c, 2 * counts + 2) / 2
        for ratio in (0.1, 0.5, 0.8, 0.99):
            powers = stats.poisson.cdf(counts, ratio * mean0)
            assert (np.diff(powers) >= -1e-12).all()


def test_binomial_form_and_fleet_years() -> None:
    assert evidence.distance_zero_events_binomial(1e-8, 0.95) == pytest.approx(
        math.log(0.05) / math.log1p(-1e-8), rel=1e-12
    )  # log1p: log(1 - 1e-8) loses digits
    assert evidence.distance_zero_events_binomial(1.5, 0.95) is None
    plan = evidence.plan_evidence(_inputs(fleet=10, hours_per_day=8, speed=30))
    assert plan.years_no_failure == pytest.approx(plan.miles_no_failure / (10 * 8 * 365 * 30))


def test_km_gives_the_same_claim_in_kilometres() -> None:
    mi = evidence.plan_evidence(_inputs())
    km_per_mi = 1.609344  # international mile
    km = evidence.plan_evidence(
        evidence.EvidenceInputs(
            benchmark=1.09, per=1e8 * km_per_mi, units="km", speed=25 * km_per_mi
        )
    )
    assert km.miles_no_failure == pytest.approx(mi.miles_no_failure * km_per_mi)
    assert km.years_no_failure == pytest.approx(mi.years_no_failure)
    assert km.years_power == pytest.approx(mi.years_power)


# --- observations ----------------------------------------------------------------------------


def test_observed_shown_and_not_shown() -> None:
    # 275 million mi with no fatality: below 1.09 per 100 million (improvement 0) ...
    shown = evidence.plan_evidence(_inputs(improvement=0.0, observed=275e6, events=0))
    assert shown.shown is True
    assert shown.upper_rate == pytest.approx(stats.chi2.ppf(0.95, 2) / (2 * 275e6) * 1e8)
    # ... but not below the 20 % better target
    plan = evidence.plan_evidence(_inputs(observed=275e6, events=0))
    assert plan.shown is False and plan.upper_rate > plan.target_rate
    plan = evidence.plan_evidence(_inputs(observed=1e9, events=2))
    assert plan.shown is bool(stats.chi2.ppf(0.95, 6) / 2e9 < 0.872e-8)
    none = evidence.plan_evidence(_inputs())
    assert none.upper_rate is None and none.shown is None
    zero = evidence.plan_evidence(_inputs(observed=0, events=0))
    assert zero.upper_rate is None and zero.shown is False and zero.upper_rate_note


# --- exposure-stratified evidence -------------------------------------------------------------


def _segments() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "length_m": [1609.344, 3218.688, 1609.344, 804.672],
            "band": ["high", "low", "low", "high"],
            "risk": [5.0, 1.0, 1.5, 4.0],
            "infl_school": [1.0, 0.0, 0.5, 0.0],
            "infl_transit": [0.0, 0.25, 0.0, 1.0],
            "street": ["Gull Row", "Kelp Lane", "Kelp Lane", "Tern Way"],
        }
    )


def test_distance_by_exposure() -> None:
    out = evidence.distance_by_exposure(_segments(), needed=3.0, units="mi")
    assert out.total == pytest.approx(4.5)
    bands = out.by_band.set_index("band")
    assert list(out.by_band["band"]) == ["low", "high"]  # ordered by mean risk
    assert bands.loc["low", "driven"] == pytest.approx(3.0)
    assert bands.loc["high", "driven"] == pytest.approx(1.5)
    assert bands.loc["low", "still_needed"] == 0.0
    assert bands.loc["high", "still_needed"] == pytest.approx(1.5)
    assert bands.loc["high", "segments"] == 2
    cats = out.by_category.set_index("category")
    assert cats.loc["school", "driven"] == pytest.approx(1.5)
    assert cats.loc["transit", "driven"] == pytest.approx(1.0)
    assert cats.loc["school", "share"] == pytest.approx(1.5 / 4.5)
    km = evidence.distance_by_exposure(_segments(), needed=3.0, units="km")
    assert km.total == pytest.approx(4.5 * 1.609344)


@pytest.mark.parametrize(
    ("change", "column"),
    [
        (lambda f: f.drop(columns="length_m"), "length_m"),
        (lambda f: f.drop(columns="band"), "band"),
        (lambda f: f.assign(length_m=[1.0, -2.0, 3.0, 4.0]), "length_m"),
        (lambda f: f.assign(length_m=[1.0, "x", 3.0, 4.0]), "length_m"),
        (lambda f: f.assign(band=["a", None, "b", "c"]), "band"),
        (lambda f: f.assign(infl_school=[0.0, 1.5, 0.0, 0.0]), "infl_school"),
        (lambda f: f.assign(infl_park=[0.0, np.nan, 0.0, 0.0]), "infl_park"),
    ],
)
def test_distance_by_exposure_rejects_bad_columns(change: object, column: str) -> None:
    with pytest.raises(InputFileError) as err:
        evidence.distance_by_exposure(
            change(_segments()),
            needed=1.0,  # type: ignore[operator]
            path="drive/segments.geojson",
        )
    assert err.value.field == column
    assert err.value.path == "drive/segments.geojson"


def _write_geojson(path: object, frame: pd.DataFrame) -> None:
    feats = [
        {
            "type": "Feature",
            "properties": rec,
            "geometry": {"type": "LineString", "coordinates": [[-38.0, 38.5], [-37.99, 38.5]]},
        }
        for rec in frame.to_dict(orient="records")
    ]
    with open(path, "w", encoding="utf-8") as fh:  # type: ignore[call-overload]
        json.dump({"type": "FeatureCollection", "features": feats}, fh)


def test_cli_segments(tmp_path: object, capsys: pytest.CaptureFixture[str]) -> None:
    seg = tmp_path / "segments.geojson"  # type: ignore[operator]
    _write_geojson(seg, _segments())
    data = _cli_json(capsys, "--benchmark", "11", "--per", "1e9", "--segments", str(seg))
    by_band = {row["band"]: row for row in data["by_band"]}  # type: ignore[attr-defined]
    assert by_band["low"]["driven"] == pytest.approx(3.0)
    assert by_band["low"]["still_needed"] == pytest.approx(data["miles_no_failure"] - 3.0)
    assert {row["category"] for row in data["by_category"]} == {"school", "transit"}  # type: ignore[attr-defined]
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", "--segments", str(seg)]) == 0
    out = capsys.readouterr().out
    assert "band high" in out and "school" in out and routerisk.CAUTION in out


def test_cli_segments_missing_column(tmp_path: object, capsys: pytest.CaptureFixture[str]) -> None:
    seg = tmp_path / "segments.geojson"  # type: ignore[operator]
    _write_geojson(seg, _segments().drop(columns="band"))
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", "--segments", str(seg)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and str(seg) in err and "band" in err
    bad = tmp_path / "bad.geojson"  # type: ignore[operator]
    bad.write_text("{not json", encoding="utf-8")
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", "--segments", str(bad)]) == 2
    assert str(bad) in capsys.readouterr().err
    missing = tmp_path / "none.geojson"  # type: ignore[operator]
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", "--segments", str(missing)]) == 2
    assert "no such file" in capsys.readouterr().err


# --- command line -----------------------------------------------------------------------------

REQUIRED_KEYS = {
    "miles_no_failure",
    "years_no_failure",
    "miles_power",
    "years_power",
    "upper_rate",
    "target_rate",
    "shown",
}


def test_cli_json_reference(capsys: pytest.CaptureFixture[str]) -> None:
    data = _cli_json(
        capsys, "--benchmark", "1.09", "--per", "1e8", "--observed", "3e8", "--events", "0"
    )
    assert REQUIRED_KEYS <= set(data)
    # headline: exact Poisson test [computed, see test_exact_power_reference_case]
    assert data["miles_power"] == pytest.approx(12.91e9, rel=0.001)
    assert data["years_power"] == pytest.approx(589.5, abs=0.5)
    # Kalra and Paddock (2016), Transp. Res. Part A 94:182-193, normal approximation [secondary]
    assert data["miles_power_normal_approx"] == pytest.approx(11.34e9, rel=0.001)
    assert data["years_power_normal_approx"] == pytest.approx(518.0, abs=0.1)
    # the two differ by 12 % (> 10 %): warned
    assert any("normal approximation" in w for w in data["warnings"])  # type: ignore[union-attr]
    assert data["target_rate"] == pytest.approx(0.872)
    assert data["shown"] is False  # 3e8 mi without an event: limit 0.9986 > 0.872 per 1e8
    assert data["upper_rate"] == pytest.approx(0.9986, abs=1e-4)
    assert [row["events"] for row in data["allowed_events"]] == [0, 1, 2, 3]  # type: ignore[union-attr]
    data = _cli_json(
        capsys,
        "--benchmark",
        "1.09",
        "--per",
        "1e8",
        "--improvement",
        "0",
        "--allowed-events",
        "0,5",
        "10",
    )
    assert data["miles_power"] is None and data["years_power"] is None
    assert data["upper_rate"] is None and data["shown"] is None
    assert [row["events"] for row in data["allowed_events"]] == [0, 5, 10]  # type: ignore[union-attr]


def test_cli_plain_output_and_chart(tmp_path: object, capsys: pytest.CaptureFixture[str]) -> None:
    chart = tmp_path / "limit.png"  # type: ignore[operator]
    assert (
        main(
            [
                "evidence",
                "--benchmark",
                "11",
                "--per",
                "1e9",
                "--observed",
                "1e8",
                "--events",
                "1",
                "--chart",
                str(chart),
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert out.rstrip().endswith(routerisk.CAUTION)
    assert f"Chart written to {chart}." in out
    assert "15.5 years" in out and "not shown yet" in out
    assert not list(tmp_path.glob(".*.part"))  # type: ignore[attr-defined]
    data = chart.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000


@pytest.mark.parametrize(
    ("extra", "option"),
    [
        (["--confidence", "1"], "--confidence"),
        (["--confidence", "nan"], "--confidence"),
        (["--power", "0"], "--power"),
        (["--improvement", "1"], "--improvement"),
        (["--improvement", "-0.1"], "--improvement"),
        (["--benchmark", "0"], "--benchmark"),
        (["--benchmark", "many"], "--benchmark"),
        (["--per=-1e9"], "--per"),
        (["--fleet", "0"], "--fleet"),
        (["--speed", "-5"], "--speed"),
        (["--hours-per-day", "25"], "--hours-per-day"),
        (["--hours-per-day", "0"], "--hours-per-day"),
        (["--units", "miles"], "--units"),
        (["--observed", "-1", "--events", "0"], "--observed"),
        (["--observed", "1e6", "--events", "-1"], "--events"),
        (["--observed", "1e6", "--events", "1.5"], "--events"),
        (["--observed", "1e6", "--events", "inf"], "--events"),
        (["--observed", "0", "--events", "1"], "--events"),  # events in no distance
        (["--observed", "1e6"], "--events"),
        (["--events", "2"], "--observed"),
        (["--allowed-events", "1", "-2"], "--allowed-events"),
        (["--allowed-events", "two"], "--allowed-events"),
        (["--chart", "limit.jpg"], "--chart"),
    ],
)
def test_cli_bad_options(extra: list[str], option: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert err.startswith("routerisk: error: ") and option in err


def test_cli_requires_benchmark(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["evidence", "--per", "1e9"]) == 2
    assert "--benchmark" in capsys.readouterr().err
    assert main(["evidence", "--benchmark", "11"]) == 2
    assert "--per" in capsys.readouterr().err


def test_library_rejects_bad_values() -> None:
    with pytest.raises(OptionError) as err:
        _inputs(speed=float("inf"))
    assert err.value.field == "--speed"
    with pytest.raises(OptionError):
        _inputs(events=True, observed=1e9)  # a bool is not a count


# --- issue 17, points 7-9 ------------------------------------------------------------------


def test_real_event_counts_are_accepted_with_a_warning_when_surprising(
    capsys: pytest.CaptureFixture[str],
) -> None:
    # 1 event in 1000 mi at 1.09 per 100 million: unlikely but possible; the old cap
    # (observed x rate x 1000 = 0.0109) refused it
    data = _cli_json(
        capsys,
        "--benchmark",
        "1.09",
        "--per",
        "1e8",
        "--improvement",
        "0.2",
        "--observed",
        "1000",
        "--events",
        "1",
    )
    assert data["shown"] is False
    # scipy.stats.poisson: P(X >= 1 | 1.09e-5) = 1.09e-5 > 1e-6, so no event-count warning
    assert stats.poisson.sf(0, 1000 * 1.09e-8) > 1e-6
    assert not [w for w in data["warnings"] if "events in" in w]  # type: ignore[union-attr]
    # 1000 events in 1 million mi at 11 per billion (0.011 expected): accepted, warned once
    assert (
        main(
            [
                "evidence",
                "--benchmark",
                "11",
                "--per",
                "1e9",
                "--observed",
                "1e6",
                "--events",
                "1000",
                "--json",
            ]
        )
        == 0
    )
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    surprise = [w for w in data["warnings"] if "events in" in w]
    assert len(surprise) == 1 and "far above" in surprise[0]
    lines = [line for line in captured.err.splitlines() if "events in" in line]
    assert len(lines) == 1 and lines[0].startswith("routerisk: warning: ")
    # the threshold is the exact Poisson tail (scipy.stats.poisson.sf) below 1e-6
    mu = 1e8 * 1.09e-8  # 1.09 expected events
    k = next(k for k in range(1, 100) if stats.poisson.sf(k - 1, mu) < 1e-6)  # P(X >= k)

    def warned(events: int) -> bool:
        plan = evidence.plan_evidence(_inputs(observed=1e8, events=events))
        return any("events in" in w for w in plan.warnings)

    assert warned(k) and not warned(k - 1)
    # impossible inputs are still refused
    with pytest.raises(OptionError) as err:
        _inputs(observed=0.0, events=2)
    assert err.value.field == "--events"
    assert evidence.plan_evidence(_inputs(observed=10.0, events=10**7)).upper_rate > 0


def test_power_headline_is_exact_at_large_improvement(capsys: pytest.CaptureFixture[str]) -> None:
    plan = evidence.plan_evidence(_inputs(improvement=0.999))
    lam0 = 1.09e-8
    # hand calculation: with 0 events allowed the exact test rejects from -ln(0.05) / lam0 =
    # 274.8 million mi, where its power is exp(-0.001 x 2.996) = 0.997 >= 0.8
    assert plan.miles_power == pytest.approx(-math.log(0.05) / lam0, rel=1e-9)
    assert plan.miles_power == pytest.approx(274.84e6, rel=1e-4)
    assert plan.events_power_exact == 0
    # normal approximation, Kalra and Paddock (2016) form with scipy.stats.norm quantiles
    z = stats.norm.ppf(0.95) + stats.norm.ppf(0.8)
    assert plan.miles_power_normal_approx == pytest.approx(
        z**2 * 0.001 * lam0 / (0.999 * lam0) ** 2, rel=1e-9
    )
    assert plan.miles_power_normal_approx == pytest.approx(568_343, rel=1e-5)
    assert any("normal approximation" in w for w in plan.warnings)
    text = " ".join(evidence.describe(plan))
    assert "99.9% better" in text and "100%" not in text
    assert main(["evidence", "--benchmark", "1.09", "--per", "1e8", "--improvement", "0.999"]) == 0
    assert "normal approximation" in capsys.readouterr().err


def test_exact_power_never_below_zero_event_distance() -> None:
    lam0 = 1e-8
    for c in (0.8, 0.95, 0.999):
        for improvement in (0.001, 0.05, 0.2, 0.5, 0.9, 0.999, 0.999999):
            got = evidence.distance_power_exact(lam0, (1 - improvement) * lam0, c, 0.8)
            assert got is not None
            assert got.distance >= evidence.distance_zero_events(lam0, c) * (1 - 1e-12)
            if got.max_events < 3000:  # brute force (scipy.stats) on the smaller cases
                n, k = _brute_exact_power(lam0, (1 - improvement) * lam0, c, 0.8)
                assert got.max_events == k and got.distance == pytest.approx(n, rel=1e-12)


@pytest.mark.parametrize(
    ("share", "text"),
    [
        (0.2, "20%"),
        (0.95, "95%"),
        (0.999, "99.9%"),
        (0.9994, "99.94%"),
        (0.99999, "99.999%"),
        (0.001, "0.1%"),
        (0.5, "50%"),
    ],
)
def test_percentages_are_never_rounded_up_to_100(share: float, text: str) -> None:
    assert evidence._pct(share) == text


def test_strata_bonferroni_and_holm(tmp_path: object, capsys: pytest.CaptureFixture[str]) -> None:
    plan = evidence.plan_evidence(_inputs(benchmark=11.0, per=1e9))
    target = plan.inputs.target_per_unit
    exposure = evidence.distance_by_exposure(_segments(), needed=plan.miles_no_failure)
    plan = plan.with_exposure(exposure)
    assert plan.strata == 4  # 2 bands + 2 categories
    rows = {r.get("band", r.get("category")): r for r in plan.by_band + plan.by_category}
    alpha = 0.05

    def n(conf: float) -> float:  # zero-event distance -ln(1 - C) / target, hand calculation
        return -math.log(1 - conf) / target

    for row in rows.values():
        assert row["needed"] == pytest.approx(n(0.95))
        # Bonferroni: confidence 1 - alpha / m for every stratum
        assert row["needed_bonferroni"] == pytest.approx(n(1 - alpha / 4))
        assert row["still_needed_bonferroni"] == pytest.approx(n(1 - alpha / 4) - row["driven"])
    # Holm (1979) step-down: most driven first at alpha / 4, then alpha / 3, alpha / 2, alpha;
    # driven: low 3.0, high 1.5, school 1.5 (tie: bands first), transit 1.0
    for name, m_left in (("low", 4), ("high", 3), ("school", 2), ("transit", 1)):
        assert rows[name]["needed_holm"] == pytest.approx(n(1 - alpha / m_left))
    assert rows["transit"]["needed_holm"] == pytest.approx(rows["transit"]["needed"])
    seg = tmp_path / "segments.geojson"  # type: ignore[operator]
    _write_geojson(seg, _segments())
    assert main(["evidence", "--benchmark", "11", "--per", "1e9", "--segments", str(seg)]) == 0
    out = capsys.readouterr().out
    assert "must reach the figure separately" in out
    assert "Bonferroni" in out and "Holm" in out
    data = _cli_json(capsys, "--benchmark", "11", "--per", "1e9", "--segments", str(seg))
    assert data["strata"] == 4
    assert data["by_band"][0]["needed_bonferroni"] == pytest.approx(n(1 - alpha / 4))  # type: ignore[index]


def test_a_small_driven_share_never_reads_as_zero():
    # common practice, no source: a share that exists is not printed as "0%"
    from routerisk.analysis.evidence import _share_text

    assert _share_text(0.0046) == "under 1%"
    assert _share_text(0.0) == "0%"
    assert _share_text(0.997) == "over 99%"
    assert _share_text(0.22) == "22%"

"""Tests of routerisk.analysis.early_warning: event reading, EB rates, BH flags, Poisson CUSUM.

Every outside value names its source and marker beside it ([published], [secondary],
[memory], [practice], or "derived here" for arithmetic done in the comment). Simulations are
seeded and vectorised with numpy; the figures they measure are printed in the assertion
messages.
"""

from __future__ import annotations

import json
import math
from datetime import datetime, timedelta, tzinfo

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from routerisk.analysis import early_warning as ew
from routerisk.errors import InputFileError, OptionError, RouteriskError

# ---------------------------------------------------------------------------------------------
# read_events
# ---------------------------------------------------------------------------------------------

CSV_TEXT = """time,lat,lon,type,vehicle,severity
2024-05-06T08:15:00+00:00,38.501,-38.002,intervention,av-1,2
2024-05-06T08:16:00Z,38.502,-38.003,hard_brake,av-1,1
2024-05-06 07:30:00,38.503,-38.004,near_miss,av-2,3
2024-05-06T08:17:00-03:00,,-38.001,hard_brake,av-2,1
2024-05-06T08:18:00+00:00,95.0,-38.001,hard_brake,av-2,1
2024-05-06T08:19:00+00:00,38.5,-200,near_miss,av-1,
yesterday,38.5,-38.0,intervention,av-1,2
2024-05-06,38.5,-38.0,intervention,av-1,2
2024-05-06T08:20:00+00:00,38.5,-38.0,  ,av-1,2
2024-05-06T08:21:00+00:00,north,-38.0,near_miss,av-3,1
"""


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_read_events_csv_splits_good_and_rejected(tmp_path):
    p = _write(tmp_path, "events.csv", CSV_TEXT)
    # Etc/GMT+3 is 3 h *behind* UTC (POSIX sign of the IANA "etcetera" zones) [memory]
    good, bad = ew.read_events(p, tz="Etc/GMT+3")
    assert list(good["row"]) == [1, 2, 3]
    assert list(good.columns[:6]) == ["time", "lat", "lon", "type", "vehicle", "severity"]
    assert str(good["time"].dtype) == "datetime64[us, UTC]"
    assert good["time"].tolist() == [
        pd.Timestamp("2024-05-06T08:15:00Z"),
        pd.Timestamp("2024-05-06T08:16:00Z"),
        pd.Timestamp("2024-05-06T10:30:00Z"),  # 07:30 local at UTC-3
    ]
    assert good["lat"].tolist() == [38.501, 38.502, 38.503]
    assert good["type"].tolist() == ["intervention", "hard_brake", "near_miss"]
    assert good["severity"].tolist() == [2.0, 1.0, 3.0]  # all numbers -> float
    assert good["vehicle"].tolist() == ["av-1", "av-1", "av-2"]

    reasons = dict(zip(bad["row"], bad["reason"], strict=True))
    assert sorted(reasons) == [4, 5, 6, 7, 8, 9, 10]  # nothing dropped silently
    assert reasons[4] == "lat missing"
    assert reasons[5].startswith("lat out of range")
    assert reasons[6].startswith("lon out of range")
    assert reasons[7].startswith("time not ISO 8601")
    assert reasons[8].startswith("time has no time of day")
    assert reasons[9] == "type missing"
    assert reasons[10].startswith("lat not a number")
    assert bad.loc[bad["row"] == 10, "lat"].iloc[0] == "north"  # rejected rows keep the text


def test_read_events_naive_time_without_tz_is_rejected(tmp_path):
    p = _write(tmp_path, "events.csv", CSV_TEXT)
    good, bad = ew.read_events(p)
    assert 3 not in set(good["row"])
    why = bad.loc[bad["row"] == 3, "reason"].iloc[0]
    assert "no UTC offset and no tz" in why


def test_read_events_collects_every_problem_of_a_row(tmp_path):
    text = "time,lat,lon,type\nsoon,100,x,\n"
    _, bad = ew.read_events(_write(tmp_path, "e.csv", text))
    assert bad["reason"].iloc[0].split("; ")[0].startswith("lat out of range")
    assert [r.split(":")[0] for r in bad["reason"].iloc[0].split("; ")] == [
        "lat out of range [-90, 90]",
        "lon not a number",
        "time not ISO 8601",
        "type missing",
    ]


class _InventedSummerZone(tzinfo):
    """An invented zone: UTC-3, and UTC-2 from 2024-03-10 02:00 to 2024-10-06 02:00 local.

    Follows PEP 495 (fold=0 is the earlier reading of a repeated hour, and in a gap the
    offset before the change) [published: PEP 495, "Local Time Disambiguation", 2015].
    """

    STD = timedelta(hours=-3)
    SUMMER = timedelta(hours=-2)
    START = datetime(2024, 3, 10, 2, 0)  # local standard time; clocks jump to 03:00
    END = datetime(2024, 10, 6, 2, 0)  # local summer time; clocks fall back to 01:00

    def utcoffset(self, dt):
        wall = dt.replace(tzinfo=None)
        if self.START <= wall < self.START + timedelta(hours=1):
            return self.STD if dt.fold == 0 else self.SUMMER
        if self.END - timedelta(hours=1) <= wall < self.END:
            return self.SUMMER if dt.fold == 0 else self.STD
        return self.SUMMER if self.START <= wall < self.END else self.STD

    def dst(self, dt):
        return self.utcoffset(dt) - self.STD

    def tzname(self, dt):
        return "INVENTED"

    def fromutc(self, dt):
        utc = dt.replace(tzinfo=None)
        start_utc, end_utc = self.START - self.STD, self.END - self.SUMMER
        if start_utc <= utc < end_utc:
            return (utc + self.SUMMER).replace(tzinfo=self, fold=0)
        fold = 1 if end_utc <= utc < end_utc + timedelta(hours=1) else 0
        return (utc + self.STD).replace(tzinfo=self, fold=fold)


def test_read_events_rejects_ambiguous_and_nonexistent_local_times(tmp_path):
    text = (
        "time,lat,lon,type\n"
        "2024-03-10T02:30:00,38.5,-38.0,near_miss\n"  # in the spring gap
        "2024-10-06T01:30:00,38.5,-38.0,near_miss\n"  # in the repeated hour
        "2024-06-01T12:00:00,38.5,-38.0,near_miss\n"  # summer: UTC-2
        "2024-12-01T12:00:00,38.5,-38.0,near_miss\n"  # winter: UTC-3
    )
    good, bad = ew.read_events(_write(tmp_path, "e.csv", text), tz=_InventedSummerZone())
    assert good["time"].tolist() == [
        pd.Timestamp("2024-06-01T14:00:00Z"),
        pd.Timestamp("2024-12-01T15:00:00Z"),
    ]
    assert "does not exist" in bad["reason"].iloc[0]
    assert "ambiguous" in bad["reason"].iloc[1]


def test_read_events_geojson(tmp_path):
    def feat(geom, **props):
        return {"type": "Feature", "geometry": geom, "properties": props}

    doc = {
        "type": "FeatureCollection",
        "features": [
            feat(
                {"type": "Point", "coordinates": [-38.01, 38.49]},
                time="2024-05-06T09:00:00+00:00",
                type="intervention",
                vehicle="av-1",
                drive="d7",
            ),
            feat(
                {"type": "LineString", "coordinates": [[-38.0, 38.5], [-38.1, 38.5]]},
                time="2024-05-06T09:01:00+00:00",
                type="near_miss",
            ),
            feat(None, time="2024-05-06T09:02:00+00:00", type="near_miss"),
            feat(
                {"type": "Point", "coordinates": [-38.0, -91.0]},
                time="2024-05-06T09:03:00+00:00",
                type="hard_brake",
            ),
            feat(
                {"type": "Point", "coordinates": [-38.0, 38.5, 12.0]},
                time="2024-05-06T09:04:00+00:00",
                type=None,
                severity="high",
            ),
        ],
    }
    p = _write(tmp_path, "events.geojson", json.dumps(doc))
    good, bad = ew.read_events(p)
    assert good["row"].tolist() == [1]
    assert (good["lat"].iloc[0], good["lon"].iloc[0]) == (38.49, -38.01)  # [lon, lat] order
    assert good["drive"].iloc[0] == "d7"  # extra properties kept as text
    reasons = dict(zip(bad["row"], bad["reason"], strict=True))
    assert reasons[2] == "geometry is LineString, not Point"
    assert reasons[3] == "no geometry"
    assert reasons[4].startswith("lat out of range")
    assert reasons[5] == "type missing"


def test_read_events_errors_name_file_and_column(tmp_path):
    missing = tmp_path / "none.csv"
    with pytest.raises(InputFileError) as info:
        ew.read_events(missing)
    assert info.value.path == str(missing)

    p = _write(tmp_path, "e.csv", "time,lat,lon,kind\n2024-05-06T08:00:00Z,38.5,-38.0,x\n")
    with pytest.raises(InputFileError) as info:
        ew.read_events(p)
    assert (info.value.path, info.value.field) == (str(p), "type")
    assert isinstance(info.value, RouteriskError)

    g = _write(
        tmp_path,
        "e.geojson",
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "geometry": {"type": "Point", "coordinates": [-38, 38.5]},
                        "properties": {"type": "near_miss"},
                    }
                ],
            }
        ),
    )
    with pytest.raises(InputFileError) as info:
        ew.read_events(g)
    assert info.value.field == "time"

    with pytest.raises(InputFileError):
        ew.read_events(_write(tmp_path, "empty.csv", ""))
    with pytest.raises(InputFileError):
        ew.read_events(_write(tmp_path, "bad.geojson", "{not json"))
    with pytest.raises(OptionError) as info:
        ew.read_events(p, tz="Nowhere/Invented")
    assert info.value.field == "tz"


def test_read_events_header_only_gives_empty_tables(tmp_path):
    good, bad = ew.read_events(_write(tmp_path, "e.csv", "time,lat,lon,type\n"))
    assert len(good) == 0 and len(bad) == 0
    assert str(good["time"].dtype) == "datetime64[us, UTC]"


# ---------------------------------------------------------------------------------------------
# Empirical Bayes
# ---------------------------------------------------------------------------------------------

# Hand example (derived here, exact fractions):
#   k = [0, 2, 4, 10, 4], e = [10, 10, 20, 20, 40] km, w = 1.
#   W = 100, sum k = 20 -> m = 0.2 per km; expected E m = [2, 2, 4, 4, 8].
#   S = sum (k - E m)^2 / E = 4/10 + 0 + 0 + 36/20 + 16/40 = 0.4 + 1.8 + 0.4 = 2.6
#   sum E^2 = 100 + 100 + 400 + 400 + 1600 = 2600;  W - sum E^2 / W = 100 - 26 = 74
#   v = (S - (n - 1) m) / 74 = (2.6 - 0.8) / 74 = 9/370
#   a = m^2 / v = 0.04 * 370/9 = 74/45;   b = m / v = 0.2 * 370/9 = 74/9
#   posterior (a + k)/(b + e) = (74 + 45 k) / (370 + 45 e):
#     unit 1: 74/820, unit 2: 164/820 = 0.2, unit 3: 254/1270 = 0.2,
#     unit 4: 524/1270, unit 5: 254/2170
HAND = pd.DataFrame(
    {
        "unit": ["s1", "s2", "s3", "s4", "s5"],
        "events": [0, 2, 4, 10, 4],
        "km": [10.0, 10.0, 20.0, 20.0, 40.0],
    }
)


def test_eb_matches_hand_computed_example():
    units, prior = ew.unit_rates(HAND)
    rel = 1e-12
    assert prior.mean == pytest.approx(0.2, rel=rel)
    assert prior.variance == pytest.approx(9 / 370, rel=rel)
    assert prior.shape == pytest.approx(74 / 45, rel=rel)
    assert prior.rate == pytest.approx(74 / 9, rel=rel)
    assert not prior.collapsed
    assert units["eb_rate"].tolist() == pytest.approx(
        [74 / 820, 164 / 820, 254 / 1270, 524 / 1270, 254 / 2170], rel=rel
    )
    assert units["expected"].tolist() == pytest.approx([2, 2, 4, 4, 8], rel=rel)
    assert units["raw_rate"].tolist() == pytest.approx([0, 0.2, 0.2, 0.5, 0.1], rel=rel)
    assert units["eb_ratio"].tolist() == pytest.approx(
        [74 / 820 / 0.2, 1, 1, 524 / 1270 / 0.2, 254 / 2170 / 0.2], rel=rel
    )
    assert units["unit"].tolist() == HAND["unit"].tolist()
    assert json.dumps(prior.as_dict(), allow_nan=False)  # JSON-safe


def test_eb_weight_is_a_relative_exposure():
    # (km, w) must act as weighted exposure km*w (module model; derived here)
    w = np.array([0.5, 2.0, 1.0, 1.5, 0.8])
    tab = HAND.assign(w=w)
    weighted, pw = ew.unit_rates(tab, weight="w")
    plain, pp = ew.unit_rates(HAND.assign(km=HAND["km"] * w))
    assert pw.as_dict() == pytest.approx(pp.as_dict())
    assert weighted["expected"].tolist() == pytest.approx(plain["expected"].tolist(), rel=1e-12)
    assert weighted["p_value"].tolist() == pytest.approx(plain["p_value"].tolist(), rel=1e-12)
    # EB rate per km = w * posterior rate per weighted km
    theta = pw.posterior_mean(tab["events"], tab["km"] * w)
    assert weighted["eb_rate"].tolist() == pytest.approx((w * theta).tolist(), rel=1e-12)


def test_eb_collapses_without_extra_variation():
    # k exactly proportional to e (derived here): m = 7/70 = 0.1, S = 0,
    # v = (0 - 2 * 0.1) / (70 - 2100/70) = -0.2/40 = -0.005 <= 0 -> prior collapses.
    tab = pd.DataFrame({"unit": [1, 2, 3], "events": [1, 2, 4], "km": [10.0, 20.0, 40.0]})
    units, prior = ew.unit_rates(tab)
    assert prior.collapsed and prior.variance == 0.0 and math.isinf(prior.shape)
    assert prior.moment_variance == pytest.approx(-0.005, rel=1e-12)
    assert units["eb_rate"].tolist() == pytest.approx([0.1, 0.1, 0.1], rel=1e-12)
    assert prior.as_dict()["shape"] is None


def test_eb_zero_km_unit_and_input_errors():
    tab = pd.DataFrame({"unit": [1, 2, 3], "events": [0, 3, 1], "km": [0.0, 10.0, 5.0]})
    units, prior = ew.unit_rates(tab)
    assert math.isnan(units["raw_rate"].iloc[0]) and units["p_value"].iloc[0] == 1.0
    assert prior.n_units == 2
    with pytest.raises(InputFileError) as info:
        ew.unit_rates(tab.assign(events=[1, 3, 1]))
    assert info.value.field == "km"
    with pytest.raises(InputFileError) as info:
        ew.unit_rates(tab.assign(events=[0, 2.5, 1]))
    assert info.value.field == "events"
    with pytest.raises(InputFileError) as info:
        ew.unit_rates(tab.assign(unit=[1, 1, 3]))
    assert info.value.field == "unit"
    with pytest.raises(InputFileError) as info:
        ew.unit_rates(tab, weight="w")
    assert info.value.field == "w"
    with pytest.raises(OptionError) as info:
        ew.unit_rates(tab, q=1.5)
    assert info.value.field == "q"
    with pytest.raises(OptionError):
        ew.unit_rates(tab, method="guess")


def test_poisson_pvalues_agree_with_independent_computation():
    units, _ = ew.unit_rates(HAND)
    for k, mu, p in zip(units["events"], units["expected"], units["p_value"], strict=True):
        # 1 - sum_{j<k} e^-mu mu^j / j!  (Poisson definition; independent of scipy)
        direct = 1.0 - sum(math.exp(-mu) * mu**j / math.factorial(j) for j in range(k))
        assert p == pytest.approx(direct, rel=1e-9, abs=1e-15)
        assert p == pytest.approx(1.0 - stats.poisson.cdf(k - 1, mu), rel=1e-9)  # SciPy
    assert units["p_value"].iloc[0] == 1.0  # k = 0
    k = np.array([0, 1, 5, 30])
    mu = np.array([0.5, 0.5, 1.2, 9.0])
    assert ew.poisson_pvalues(k, mu) == pytest.approx(1 - stats.poisson.cdf(k - 1, mu), rel=1e-9)


def test_prior_pvalues_are_the_negative_binomial_tail():
    units, prior = ew.unit_rates(HAND, pvalue="prior")
    # gamma-Poisson mixture = NB(n = a, p = b / (b + E)) [memory; Hauer 1997 ch. on EB]
    p = prior.rate / (prior.rate + HAND["km"].to_numpy())
    nb = 1.0 - stats.nbinom.cdf(HAND["events"].to_numpy() - 1, prior.shape, p)
    assert units["p_value"].to_numpy() == pytest.approx(nb, rel=1e-9)


def test_likelihood_fit():
    prior = ew.GammaPrior(2.0, 4.0, 0.5, 0.125, 0.125, "moments", False, 4)
    k, e = np.array([0, 3, 1, 9]), np.array([2.0, 4.0, 1.0, 11.0])
    # marginal log-likelihood = sum of NB(a, b/(b+E)) log-pmfs (SciPy nbinom)
    ref = stats.nbinom.logpmf(k, 2.0, 4.0 / (4.0 + e)).sum()
    assert prior.log_likelihood(k, e) == pytest.approx(ref, rel=1e-12)

    rng = np.random.default_rng(5)
    e = rng.uniform(2.0, 20.0, 3000)
    k = rng.poisson(e * rng.gamma(2.0, 1 / 4.0, e.size))  # true a = 2, b = 4
    mom = ew.fit_gamma_prior(k, e)
    ml = ew.fit_gamma_prior(k, e, method="likelihood")
    assert ml.log_likelihood(k, e) >= mom.log_likelihood(k, e)
    for da, dm in [(1.02, 1.0), (0.98, 1.0), (1.0, 1.01), (1.0, 0.99)]:  # local maximum
        a, m = ml.shape * da, ml.mean * dm
        near = ew.GammaPrior(a, a / m, m, m * m / a, 0.0, "x", False, 1)
        assert near.log_likelihood(k, e) <= ml.log_likelihood(k, e) + 1e-9
    assert ml.shape == pytest.approx(2.0, rel=0.15) and mom.shape == pytest.approx(2.0, rel=0.15)
    assert ml.mean == pytest.approx(0.5, rel=0.05)
    # under-dispersed table (the collapse example): the likelihood collapses too
    assert ew.fit_gamma_prior([1, 2, 4], [10, 20, 40], method="likelihood").collapsed


# ---------------------------------------------------------------------------------------------
# Benjamini-Hochberg
# ---------------------------------------------------------------------------------------------

# Hand example (derived here), m = 10, q = 0.05, thresholds i q / m = 0.005 i.
#   sorted p:   0.001 0.012 0.014 0.021 0.024 0.06  0.3   0.5   0.7   0.9
#   threshold:  0.005 0.010 0.015 0.020 0.025 0.030 0.035 0.040 0.045 0.050
#   p <= thr:   yes   no    yes   no    yes   no    no    no    no    no
#   max i = 5 -> flag the five smallest (step-up flags 0.012 and 0.021 though they miss their
#   own thresholds; a step-down rule would stop at i = 1).
#   adjusted, sorted: 0.01, 0.14/3, 0.14/3, 0.048, 0.048, 0.1, 3/7, 0.625, 7/9, 0.9
BH_P = np.array([0.014, 0.5, 0.001, 0.021, 0.9, 0.012, 0.024, 0.3, 0.06, 0.7])


def test_bh_hand_example():
    flags = ew.benjamini_hochberg(BH_P, q=0.05)
    assert flags.tolist() == [True, False, True, True, False, True, True, False, False, False]
    adj = ew.bh_adjusted(BH_P)
    expect_sorted = [0.01, 0.14 / 3, 0.14 / 3, 0.048, 0.048, 0.1, 3 / 7, 0.625, 7 / 9, 0.9]
    assert np.sort(adj).tolist() == pytest.approx(expect_sorted, rel=1e-12)
    assert ((adj <= 0.05) == flags).all()
    # SciPy's independent implementation (scipy.stats.false_discovery_control, method "bh")
    assert adj == pytest.approx(stats.false_discovery_control(BH_P, method="bh"), rel=1e-12)


def test_bh_batches_and_edge_cases():
    rng = np.random.default_rng(3)
    p = rng.uniform(size=(50, 40)) ** 3
    batch = ew.benjamini_hochberg(p, q=0.1)
    rows = np.array([ew.benjamini_hochberg(r, q=0.1) for r in p])
    assert (batch == rows).all() and batch.any() and not batch.all()
    assert (ew.bh_adjusted(p) <= 0.1).tolist() == batch.tolist()
    assert not ew.benjamini_hochberg([0.2, 0.5, 0.9], q=0.1).any()
    assert ew.benjamini_hochberg([0.01, 0.01], q=0.01).tolist() == [True, True]  # ties
    assert ew.benjamini_hochberg([], q=0.1).shape == (0,)
    with pytest.raises(OptionError):
        ew.benjamini_hochberg([0.1], q=0.0)
    with pytest.raises(ValueError, match="within"):
        ew.benjamini_hochberg([0.1, 1.2], q=0.1)


# ---------------------------------------------------------------------------------------------
# Simulated logs: false discovery rate and detection of a hot spot
# ---------------------------------------------------------------------------------------------

N_SEGMENTS = 200
Q = 0.1


def _segments(rng):
    """Known exposure: km ~ Gamma(2, 5) (mean 10 km), weight ~ Gamma(4, 0.25) (mean 1)."""
    km = rng.gamma(2.0, 5.0, N_SEGMENTS)
    w = rng.gamma(4.0, 0.25, N_SEGMENTS)
    return km, w


def test_fdr_without_hot_spot_is_at_most_q():
    # Null: every segment's mean is km * w * 0.2, heterogeneous only through known exposure.
    # BH guarantees FDR <= q m0/m for independent p-values [memory, Benjamini-Hochberg 1995];
    # with no true hot spot the FDP of a seed is 1 if anything is flagged, else 0.
    fdp = []
    for seed in range(200):
        rng = np.random.default_rng(seed)
        km, w = _segments(rng)
        k = rng.poisson(km * w * 0.2)
        units, _ = ew.unit_rates(
            pd.DataFrame({"unit": range(N_SEGMENTS), "events": k, "km": km, "w": w}),
            weight="w",
            q=Q,
        )
        fdp.append(float(units["flagged"].any()))
    observed = float(np.mean(fdp))
    assert observed <= Q + 0.02, f"observed FDR {observed:.3f} over 200 seeds, q = {Q}"


def test_fdr_with_ten_hot_spots_is_at_most_q():
    fdp = []
    for seed in range(200):
        rng = np.random.default_rng(10_000 + seed)
        km, w = _segments(rng)
        rate = np.full(N_SEGMENTS, 0.2)
        rate[:10] *= 3.0  # ten true hot spots
        k = rng.poisson(km * w * rate)
        units, _ = ew.unit_rates(
            pd.DataFrame({"unit": range(N_SEGMENTS), "events": k, "km": km, "w": w}),
            weight="w",
            q=Q,
        )
        flags = units["flagged"].to_numpy()
        fdp.append(flags[10:].sum() / max(flags.sum(), 1))
    observed = float(np.mean(fdp))
    assert observed <= Q + 0.02, f"observed FDR {observed:.3f} with 10 hot spots, q = {Q}"


def test_prior_pvalues_control_fdr_under_unexplained_heterogeneity():
    # True rates vary as Gamma(5, mean 0.2) that no exposure explains. Against the pooled rate
    # (pvalue="poisson") such units are real departures and get flagged; the prior-predictive
    # test asks whether a unit stands out from that spread, and should flag rarely.
    anyflag = {"poisson": [], "prior": []}
    for seed in range(100):
        rng = np.random.default_rng(20_000 + seed)
        km, w = _segments(rng)
        k = rng.poisson(km * w * rng.gamma(5.0, 0.2 / 5.0, N_SEGMENTS))
        tab = pd.DataFrame({"unit": range(N_SEGMENTS), "events": k, "km": km, "w": w})
        for kind in anyflag:
            units, _ = ew.unit_rates(tab, weight="w", q=Q, pvalue=kind)
            anyflag[kind].append(float(units["flagged"].any()))
    prior_rate, poisson_rate = np.mean(anyflag["prior"]), np.mean(anyflag["poisson"])
    assert prior_rate <= Q + 0.03, f"prior p-values: flagged something in {prior_rate:.2f}"
    assert poisson_rate > 0.3, f"poisson p-values: flagged something in {poisson_rate:.2f}"


DETECTION_LIMIT = 200  # drives; stated detection bound of the planted 3x hot spot


def test_planted_hot_spot_is_flagged_within_stated_drives():
    # Each drive covers each of the 200 segments with probability 0.25; segment lengths
    # U(0.2, 1.0) km, weights Gamma(4, 0.25); base rate 0.5 events per weighted km
    # (about 15 events per drive over ~30 km; an assumption of the test, not data).
    # Segment 0 (0.6 km, weight 1) has 3x the rate: 0.225 expected events per drive instead
    # of 0.075. After every drive: pooled expected counts, Poisson p-values, BH at q = 0.1.
    n_drives, n_seeds, hot = 250, 50, 0
    first = []
    for seed in range(n_seeds):
        rng = np.random.default_rng(30_000 + seed)
        length = rng.uniform(0.2, 1.0, N_SEGMENTS)
        w = rng.gamma(4.0, 0.25, N_SEGMENTS)
        length[hot], w[hot] = 0.6, 1.0
        rate = np.full(N_SEGMENTS, 0.5)
        rate[hot] *= 3.0
        km = (rng.random((n_drives, N_SEGMENTS)) < 0.25) * length
        k = np.cumsum(rng.poisson(km * w * rate), axis=0)
        exp_w = np.cumsum(km * w, axis=0)
        m = k.sum(axis=1, keepdims=True) / exp_w.sum(axis=1, keepdims=True)
        flags = ew.benjamini_hochberg(ew.poisson_pvalues(k, exp_w * m), q=Q)
        hits = np.flatnonzero(flags[:, hot])
        first.append(hits[0] + 1 if hits.size else np.inf)
    first = np.array(first)
    share = float(np.mean(first <= DETECTION_LIMIT))
    med, p90 = np.median(first), np.percentile(first, 90)
    msg = (
        f"hot spot first flagged: median {med:.0f} drives, 90th percentile {p90:.0f}, "
        f"{share:.0%} of {n_seeds} seeds within {DETECTION_LIMIT} drives"
    )
    assert share >= 0.9, msg
    assert med <= 100, msg


# ---------------------------------------------------------------------------------------------
# Poisson CUSUM
# ---------------------------------------------------------------------------------------------


def test_cusum_reference_value_and_hand_path():
    d = ew.design_cusum(1.0, ratio=2.0, arl0=200)
    # Lucas (1985) [memory]: k = (mu1 - mu0) / ln(mu1/mu0) = 1 / ln 2 = 1.4427 -> 1.44 on 1/100
    assert d.k == pytest.approx(1.44, abs=1e-12)
    assert d.arl0 >= 200 and d.h > 0
    # hand path (derived here): S = 0, 1.56, 1.56 + 4 - 1.44 = 4.12, 2.68, 3.24
    s = ew.cusum_path([0, 3, 4, 0, 2], 1.0, design=d)
    assert s.tolist() == pytest.approx([0.0, 1.56, 4.12, 2.68, 3.24], abs=1e-12)
    # the log-likelihood-ratio form is the same chart scaled by ln r (derived here)
    llr, L = [], 0.0
    for x in [0, 3, 4, 0, 2]:
        L = max(0.0, L + x * math.log(2.0) - 1.0 * (2.0 - 1.0))
        llr.append(L)
    exact = ew.CusumDesign(1.0, 2.0, 1 / math.log(2.0), 1.0, 1.0, 1.0, 1.0, 1)
    s_exact = ew.cusum_path([0, 3, 4, 0, 2], 1.0, design=exact)
    assert (s_exact * math.log(2.0)).tolist() == pytest.approx(llr, rel=1e-12)


def test_cusum_arl_closed_form_at_h_zero():
    # h = 0: alarm at the first x > k, so the run length is geometric with
    # ARL = 1 / P(X > k) (derived here); k = 1.44 -> 1 / P(X >= 2).
    for mu in (0.4, 1.0, 3.0):
        expect = 1.0 / stats.poisson.sf(1, mu)
        assert ew.cusum_arl(mu, k=1.44, h=0.0) == pytest.approx(expect, rel=1e-10)


def _run_lengths(design, mean, runs, seed, chunk=256):
    """Simulate zero-start run lengths of the chart at a constant Poisson mean."""
    rng = np.random.default_rng(seed)
    rl = np.zeros(runs)
    s = np.zeros(runs)
    alive = np.arange(runs)
    t0 = 0
    while alive.size:
        x = rng.poisson(mean, (alive.size, chunk))
        path = ew.cusum_path(x, design.mu0, design=design, start=s[alive])
        over = design.alarm(path)
        hit = over.any(axis=1)
        rl[alive[hit]] = t0 + np.argmax(over[hit], axis=1) + 1
        s[alive[~hit]] = path[~hit, -1]
        alive = alive[~hit]
        t0 += chunk
    return rl


@pytest.mark.parametrize(("mu0", "ratio", "arl0", "seed"), [(1.0, 2.0, 200, 7), (0.3, 3.0, 300, 9)])
def test_cusum_in_control_arl_matches_simulation(mu0, ratio, arl0, seed):
    # Design by the Brook-Evans Markov chain [memory]; check by simulation, 4000 seeded runs
    # (standard error about 1.6 % of the ARL).
    d = ew.design_cusum(mu0, ratio=ratio, arl0=arl0)
    rl = _run_lengths(d, mu0, 4000, seed)
    sim, se = rl.mean(), rl.std() / math.sqrt(rl.size)
    msg = (
        f"mu0={mu0} r={ratio}: h={d.h}, ARL0 target {arl0}, Markov {d.arl0:.1f}, "
        f"simulated {sim:.1f} +- {se:.1f}"
    )
    assert sim == pytest.approx(d.arl0, rel=0.10), msg
    assert abs(sim - d.arl0) <= 3 * se, msg  # the chain is exact, so only noise may remain
    assert d.arl0 == pytest.approx(arl0, rel=0.10), msg
    rl1 = _run_lengths(d, mu0 * ratio, 4000, seed + 1)
    se1 = rl1.std() / math.sqrt(rl1.size)
    msg1 = f"ARL1 Markov {d.arl1:.2f}, simulated {rl1.mean():.2f} +- {se1:.2f}"
    assert abs(rl1.mean() - d.arl1) <= 3 * se1, msg1


def test_cusum_statistic_landing_on_h_is_in_control():
    # 3 x (3 - 1.44) = 4.68 = h of the mu0 = 1, r = 2, ARL0 = 200 design: an in-control state
    # of the Markov chain, which floating-point sums may overshoot by ~1e-15 (derived here).
    d = ew.design_cusum(1.0, ratio=2.0, arl0=200)
    assert d.h == pytest.approx(4.68, abs=1e-12)
    s = ew.cusum_path([3, 3, 3, 3], 1.0, design=d)
    assert d.alarm(s).tolist() == [False, False, False, True]


def test_cusum_alerts_hand_example():
    d = ew.CusumDesign(
        mu0=1.0, ratio=2.0, k=1.44, h=3.5, arl0_target=1.0, arl0=1.0, arl1=1.0, grid=100
    )
    table = pd.DataFrame(
        {
            "segment": ["a"] * 4 + ["b"] * 4 + ["c"] * 3,
            "week": [4, 1, 2, 3, 1, 2, 3, 4, 1, 2, 3],
            "events": [0, 0, 3, 4, 2, 2, 3, 4, 0, 1, 2],
            "expected": [1.0, 1.0, 1.0, 1.0, 0.5, 0.5, 2.0, 2.0, 1.0, 1.0, 1.0],
        }
    )
    alerts = ew.cusum_alerts(table, design=d, group="segment", period="week")
    # a (sorted weeks 1..4, x = 0, 3, 4, 0): S = 0, 1.56, 4.12 > 3.5 -> week 3.
    # b: k_t = 1.44 * expected = 0.72, 0.72, 2.88, 2.88; S = 1.28, 2.56, 2.68, 3.80 -> week 4.
    # c: S = 0, 0, 0.56 -> no alarm.
    assert alerts["segment"].tolist() == ["a", "b"]
    assert alerts["week"].tolist() == [3, 4]
    assert alerts["statistic"].tolist() == pytest.approx([4.12, 3.80], abs=1e-12)
    with pytest.raises(InputFileError) as info:
        ew.cusum_alerts(table.drop(columns="expected"), design=d, group="segment", period="week")
    assert info.value.field == "expected"


def test_cusum_alerts_detects_a_doubling():
    # 40 in-control segments and one whose rate doubles from week 30, mean 1 per week;
    # ARL0 = 500 weeks per segment, so with 40 x 60 weeks a few false alarms are possible.
    d = ew.design_cusum(1.0, ratio=2.0, arl0=500)
    rng = np.random.default_rng(42)
    weeks = np.arange(60)
    frames = []
    for seg in range(41):
        mean = np.where((seg == 40) & (weeks >= 30), 2.0, 1.0)
        frames.append(
            pd.DataFrame(
                {"group": seg, "period": weeks, "events": rng.poisson(mean), "expected": 1.0}
            )
        )
    alerts = ew.cusum_alerts(pd.concat(frames), design=d)
    hit = alerts.loc[alerts["group"] == 40]
    assert len(hit) == 1 and 30 <= hit["period"].iloc[0] < 30 + 4 * d.arl1, alerts
    assert len(alerts) <= 5, alerts


def test_cusum_design_errors():
    with pytest.raises(OptionError) as info:
        ew.design_cusum(1.0, ratio=1.0)
    assert info.value.field == "ratio"
    with pytest.raises(OptionError):
        ew.design_cusum(0.0)
    with pytest.raises(OptionError):
        ew.design_cusum(1.0, arl0=1.0)


# ---------------------------------------------------------------------------------------------
# Over-dispersion, negative binomial and leave-one-out prior predictive p-values
# ---------------------------------------------------------------------------------------------


def _nb_units(seed, n=150, inv_shape=0.3):
    rng = np.random.default_rng(seed)
    e = rng.uniform(0.2, 5.0, n)
    theta = rng.gamma(1 / inv_shape, inv_shape, n) if inv_shape > 0 else np.ones(n)
    return rng.poisson(1.3 * e * theta).astype(float), e


def test_dispersion_pearson_is_scipys_chi_square():
    # Pearson chi-square with the pooled rate and n - 1 degrees of freedom; tail from
    # scipy.stats.chi2 (reference library), statistic computed here independently.
    k, e = _nb_units(3)
    d = ew.dispersion_test(k, e)
    m = k.sum() / e.sum()
    x2 = float(np.sum((k - e * m) ** 2 / (e * m)))
    assert d.pearson_chi2 == pytest.approx(x2, rel=1e-12)
    assert d.df == k.size - 1
    assert d.pearson_ratio == pytest.approx(x2 / (k.size - 1), rel=1e-12)
    assert d.pearson_p == pytest.approx(stats.chi2.sf(x2, k.size - 1), rel=1e-9)


def test_negative_binomial_fit_matches_statsmodels():
    # Reference library: statsmodels NegativeBinomial (NB2, loglike_method="nb2") with an
    # intercept and the exposure as offset fits the same model as fit_gamma_prior's
    # likelihood method: mean E m, Var = mu (1 + alpha mu), alpha = 1/shape.
    sm = pytest.importorskip("statsmodels.api")
    k, e = _nb_units(5, inv_shape=0.3)
    ref = sm.NegativeBinomial(k, np.ones((k.size, 1)), exposure=e, loglike_method="nb2").fit(
        disp=0, maxiter=500, method="bfgs", gtol=1e-10
    )
    mine = ew.dispersion_test(k, e)
    assert mine.prior.mean == pytest.approx(math.exp(ref.params[0]), rel=1e-4)
    assert mine.inv_shape == pytest.approx(ref.params[1], rel=1e-3)
    ll_pois = float(np.sum(stats.poisson.logpmf(k, e * k.sum() / e.sum())))  # scipy
    assert mine.lr_stat == pytest.approx(2 * (ref.llf - ll_pois), rel=1e-5)
    # boundary mixture 0.5 chi2(0) + 0.5 chi2(1) (Self and Liang 1987) [memory]
    assert mine.lr_p == pytest.approx(0.5 * stats.chi2.sf(mine.lr_stat, 1), rel=1e-9)
    assert mine.significant


def test_dispersion_not_significant_for_poisson_counts():
    # Poisson counts with a common rate: the likelihood-ratio test rejects at 5 % in about
    # 5 % of samples at most; over 40 seeded samples at most 6 rejections (binomial tail,
    # derived here: P(X >= 7 | n=40, p=0.05) ~ 0.014 under an exact 5 % test).
    rejected = sum(
        ew.dispersion_test(*_nb_units(100 + s, inv_shape=0.0)).significant for s in range(40)
    )
    assert rejected <= 6, rejected


def test_loo_prior_pvalues_equal_explicit_refits():
    # Each unit's tail under the prior fitted by maximum likelihood on the other units,
    # recomputed here by plain refits; the tail itself is scipy.stats.nbinom.sf.
    k, e = _nb_units(8, n=60, inv_shape=0.4)
    k[0] += 25  # a hot unit
    p = ew.loo_prior_pvalues(k, e)
    for i in range(k.size):
        if k[i] == 0:
            assert p[i] == 1.0
            continue
        keep = np.arange(k.size) != i
        pr = ew.fit_gamma_prior(k[keep], e[keep], method="likelihood")
        ref = stats.nbinom.sf(k[i] - 1, pr.shape, pr.rate / (pr.rate + e[i]))
        assert p[i] == pytest.approx(ref, rel=1e-5, abs=1e-12), i
    # the hot unit stands out more against a prior it did not help to fit
    full = ew.unit_rates(
        pd.DataFrame({"unit": range(k.size), "events": k, "km": e}),
        method="likelihood",
        pvalue="prior",
    )[0]["p_value"].to_numpy()
    assert p[0] < full[0]


# ---------------------------------------------------------------------------------------------
# A family of charts
# ---------------------------------------------------------------------------------------------


def _family_run_lengths(designs, runs, seed, chunk=128):
    """Simulate the family's run length: the first day any of the charts alarms."""
    rng = np.random.default_rng(seed)
    rl = np.full(runs, np.inf)
    s = np.zeros((len(designs), runs))
    t0 = 0
    alive = np.ones(runs, dtype=bool)
    while alive.any():
        first = np.full(runs, np.inf)
        for j, d in enumerate(designs):
            x = rng.poisson(d.mu0, (runs, chunk))
            path = ew.cusum_path(x, d.mu0, design=d, start=s[j])
            over = d.alarm(path)
            hit = over.any(axis=1)
            first[hit] = np.minimum(first[hit], np.argmax(over[hit], axis=1) + 1)
            s[j] = path[:, -1]
        new = alive & np.isfinite(first)
        rl[new] = t0 + first[new]
        alive &= ~new
        t0 += chunk
    return rl


def test_family_run_length_matches_simulation_within_ten_percent():
    # Each of 6 charts designed at 60 x 6 = 360 periods (the --arl0-family design); the exact
    # combined run length (product of the charts' Markov-chain survival functions) is checked
    # by a seeded simulation of all six charts together, 3000 runs, within 10 %.
    mus = [0.2, 0.5, 0.8, 1.2, 2.0, 3.5]
    designs = [ew.design_cusum(m, ratio=2.0, arl0=60 * len(mus)) for m in mus]
    exact = ew.family_arl(designs)
    rl = _family_run_lengths(designs, 3000, seed=17)
    sim, se = rl.mean(), rl.std() / math.sqrt(rl.size)
    msg = f"family ARL exact {exact:.1f}, simulated {sim:.1f} +- {se:.1f}"
    assert sim == pytest.approx(exact, rel=0.10), msg
    assert exact == pytest.approx(60, rel=0.15), msg  # the design meets its family target
    # a single chart's "family" is the chart itself
    assert ew.family_arl(designs[:1]) == pytest.approx(designs[0].arl0, rel=1e-6)
    # renewal rate: 30 x sum 1/ARL0_i false alarms per 30 periods
    assert ew.false_alarms_per(30, designs) == pytest.approx(
        30 * sum(1 / d.arl0 for d in designs), rel=1e-12
    )

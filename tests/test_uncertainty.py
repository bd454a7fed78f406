"""Weight draws, intervals, pairwise probabilities and Sobol indices (routerisk/analysis/uncertainty.py)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import yaml

from routerisk import datasets
from routerisk.analysis import scoring
from routerisk.analysis import uncertainty as un
from routerisk.cli import main
from routerisk.errors import ProfileError
from routerisk.io import routes
from routerisk.profile import load_profile, parse_profile


def _law(centre, cov=None, normal=(), ranges=()):
    return un.WeightLaw(
        tuple(f"w{i}" for i in range(len(centre))),
        np.asarray(centre, float),
        tuple(normal),
        np.zeros((0, 0)) if cov is None else np.asarray(cov),
        tuple(ranges),
    )


@pytest.fixture(scope="module")
def town_scores(town_net):
    planned = routes.read_routes(datasets.get_path("routes"), default_tz=town_net.timezone)
    return scoring.score_routes(town_net, planned)


def test_unit_parts_reproduce_the_scores(town_net, town_scores):
    fixed, unit = un.unit_parts(town_net, town_scores)
    w = np.array([c.weight for c in town_net.profile.categories])
    np.testing.assert_allclose(fixed + unit @ w, [s.risk for s in town_scores], rtol=1e-9)
    for k, s in enumerate(town_scores):
        for j, c in enumerate(town_net.profile.categories):
            assert unit[k, j] * c.weight == pytest.approx(
                s.by_category[c.name], rel=1e-9, abs=1e-12
            )


def test_monte_carlo_matches_the_analytic_interval(town_net, town_scores):
    """Linear form, normal weights: mean and sd exactly from the covariance (no floor hit)."""
    from scipy.stats import norm

    fixed, unit = un.unit_parts(town_net, town_scores)
    centre = np.array([c.weight for c in town_net.profile.categories])
    sd = 0.08 * centre  # far from zero: the floor at 0 is never reached in 20,000 draws
    corr = np.full((len(centre),) * 2, 0.3) + 0.7 * np.eye(len(centre))
    law = _law(centre, np.outer(sd, sd) * corr, normal=range(len(centre)))
    n = 20_000
    risks = fixed + un.draw_weights(law, n, np.random.default_rng(3)) @ unit.T
    mean, s = un.analytic(fixed, unit, law)
    assert (s > 0).sum() >= 3
    # sampling error: mean within 4 standard errors, sd within 4 / sqrt(2n) relative
    assert np.all(np.abs(risks.mean(0) - mean) <= 4 * s / np.sqrt(n) + 1e-12)
    live = s > 0
    assert np.all(np.abs(risks.std(0)[live] / s[live] - 1) <= 4 / np.sqrt(2 * n))
    # 90 % interval: quantiles' standard error sqrt(p(1-p)/n) / density (common practice)
    z = norm.ppf(0.95)
    q_se = np.sqrt(0.05 * 0.95 / n) / norm.pdf(z) * s
    for q, sign in ((0.05, -1), (0.95, 1)):
        assert np.all(
            np.abs(np.quantile(risks, q, axis=0) - (mean + sign * z * s)) <= 4 * q_se + 1e-12
        )


def test_pairwise_probability_hand_built():
    fixed = np.array([1.0, 1.0])
    unit = np.array([[2.0, 5.0], [3.0, 5.0]])  # differ only in weight 0
    rng = np.random.default_rng(0)
    law = _law([2.0, 1.0], [[0.01]], normal=[0])  # interval of w0 far above 0
    p = un.prob_lower(fixed + un.draw_weights(law, 5000, rng) @ unit.T)
    assert p[0, 1] == 1.0 and p[1, 0] == 0.0
    # equal parts: ties count half
    p = un.prob_lower(fixed + un.draw_weights(law, 5000, rng) @ np.vstack([unit[0]] * 2).T)
    assert p[0, 1] == 0.5
    # symmetric: each route leans on one of two weights with the same law
    law = _law([1.0, 1.0], ranges=[(0, 0.5, 1.5, "uniform"), (1, 0.5, 1.5, "uniform")])
    p = un.prob_lower(
        fixed + un.draw_weights(law, 20_000, rng) @ np.array([[1.0, 0.0], [0.0, 1.0]]).T
    )
    assert abs(p[0, 1] - 0.5) < 4 * 0.5 / np.sqrt(20_000)
    assert p[0, 1] + p[1, 0] == pytest.approx(1.0)


def _four_weight_case():
    # y = 1 + 3 w0 + 1 w1 + 0.5 w2 + 0 w3, uniform weights
    bounds = [[0.0, 2.0], [1.0, 4.0], [0.5, 1.5], [0.0, 1.0]]
    law = _law(
        [1.0, 2.5, 1.0, 0.5], ranges=[(i, lo, hi, "uniform") for i, (lo, hi) in enumerate(bounds)]
    )
    return bounds, law, np.array([1.0]), np.array([[3.0, 1.0, 0.5, 0.0]])


def test_sobol_estimator_equals_salib_on_its_own_samples():
    # reference: SALib (Herman and Usher 2017), sobol.sample / sobol.analyze, same model
    from SALib.analyze import sobol as sobol_analyze
    from SALib.sample import sobol as sobol_sample

    bounds, _, fixed, unit = _four_weight_case()
    problem = {"num_vars": 4, "names": ["a", "b", "c", "d"], "bounds": bounds}
    x = sobol_sample.sample(problem, 1024, calc_second_order=False, seed=5)
    y = fixed[0] + x @ unit[0]
    ref = sobol_analyze.analyze(problem, y, calc_second_order=False, seed=5)
    step = 6
    f_a, f_b = y[0::step], y[step - 1 :: step]
    f_ab = np.column_stack([y[j + 1 :: step] for j in range(4)])
    s1, st = un.sobol_indices(f_a, f_b, f_ab)
    np.testing.assert_allclose(s1, ref["S1"], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(st, ref["ST"], rtol=1e-9, atol=1e-12)


def test_sobol_indices_agree_with_salib_within_its_interval():
    # reference: SALib sobol.analyze with its bootstrap confidence intervals (95 %)
    from SALib.analyze import sobol as sobol_analyze
    from SALib.sample import sobol as sobol_sample

    bounds, law, fixed, unit = _four_weight_case()
    problem = {"num_vars": 4, "names": ["a", "b", "c", "d"], "bounds": bounds}
    x = sobol_sample.sample(problem, 4096, calc_second_order=False, seed=11)
    ref = sobol_analyze.analyze(problem, fixed[0] + x @ unit[0], calc_second_order=False, seed=11)
    s1, st, vary = un.sensitivity(fixed, unit, law, 8192, np.random.default_rng(2))
    assert vary == [0, 1, 2, 3]
    assert np.all(np.abs(s1[:, 0] - ref["S1"]) <= 2 * ref["S1_conf"] + 1e-3)
    assert np.all(np.abs(st[:, 0] - ref["ST"]) <= 2 * ref["ST_conf"] + 1e-3)
    # linear model, independent inputs: S1 = ST = a_i^2 var_i / sum (from memory)
    var = np.array([(hi - lo) ** 2 / 12 for lo, hi in bounds]) * unit[0] ** 2
    exact = var / var.sum()
    assert np.all(np.abs(s1[:, 0] - exact) < 0.03) and np.all(np.abs(st[:, 0] - exact) < 0.03)


def _ranged_profile(tmp_path: Path, **weights) -> Path:
    doc = yaml.safe_load(Path(load_profile().source).read_text())
    for k, v in weights.items():
        doc["categories"][k]["weight"] = v
    p = tmp_path / "ranged.yaml"
    p.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    return p


def test_weight_ranges_are_read_and_checked(tmp_path):
    p = load_profile(
        _ranged_profile(
            tmp_path,
            school={"low": 2.0, "high": 8.0, "spread": "log-uniform"},
            retail={"low": 1.0, "high": 2.0},
        )
    )
    assert p.category("school").weight == pytest.approx(4.0)  # geometric mean
    assert p.category("retail").weight == pytest.approx(1.5)
    law = un.weight_law(p)
    w = un.draw_weights(law, 20_000, np.random.default_rng(0))
    j = p.category_names.index("school")
    assert w[:, j].min() >= 2.0 and w[:, j].max() <= 8.0
    assert np.median(np.log(w[:, j])) == pytest.approx(np.log(4.0), abs=0.03)
    doc = yaml.safe_load(Path(load_profile().source).read_text())
    doc["categories"]["school"]["weight"] = {"low": 3.0, "high": 1.0}
    with pytest.raises(ProfileError) as exc:
        parse_profile(doc, path="p.yaml")
    assert exc.value.field == "categories.school.weight.low" and "above" in exc.value.message
    doc["categories"]["school"]["weight"] = {"low": 0.0, "high": 1.0, "spread": "log-uniform"}
    with pytest.raises(ProfileError, match="must be > 0"):
        parse_profile(doc, path="p.yaml")


def _score(args, capsys):
    code = main(["score", str(datasets.get_path("routes")), *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_score_uncertainty_is_seeded_and_reproducible(town_dir, tmp_path, capsys):
    prof = _ranged_profile(
        tmp_path,
        school={"low": 1.0, "high": 6.0},
        retail={"low": 0.5, "high": 3.0, "spread": "log-uniform"},
    )
    base = ["--network", str(town_dir), "--profile", str(prof), "--uncertainty", "500", "--json"]
    c1, a, _ = _score([*base, "--seed", "4"], capsys)
    c2, b, _ = _score([*base, "--seed", "4"], capsys)
    c3, c, _ = _score([*base, "--seed", "5"], capsys)
    assert c1 == c2 == c3 == 0 and a == b and a != c
    doc = json.loads(a)
    assert doc["made_from"]["uncertainty_seed"] == 4
    u = doc["uncertainty"]
    assert u["weights_varied"] == ["school", "retail"] and len(u["routes"]) == 4
    for rt in u["routes"]:
        assert rt["low"] <= rt["median"] <= rt["high"]
    school = next(rt for rt in u["routes"] if rt["name"] == "school-run")
    assert school["total"]["school"] > school["total"]["retail"]
    assert len(u["pairs"]) == 6  # routes at their own times: every pair


def test_score_uncertainty_reaches_the_table_and_the_map(town_dir, tmp_path, capsys):
    prof = _ranged_profile(tmp_path, school={"low": 1.0, "high": 6.0})
    out = tmp_path / "out"
    args = ["--network", str(town_dir), "--profile", str(prof), "--uncertainty", "300"]
    code, text, _ = _score([*args, "--json"], capsys)
    u = json.loads(text)["uncertainty"]
    code, _, _ = _score([*args, "--out", str(out)], capsys)
    assert code == 0
    csv = (out / "routes.csv").read_text()
    assert "# risk_median, risk_low, risk_high: 300 weight draws (seed 1)" in csv
    import pandas as pd

    table = pd.read_csv(out / "routes.csv", comment="#")
    by = {r["name"]: r for r in u["routes"]}
    for row in table.itertuples(index=False):
        assert row.risk_low == pytest.approx(by[row.name]["low"], abs=1e-6)
        assert row.risk_low <= row.risk_median <= row.risk_high
    page = (out / "map.html").read_text()
    assert "90 % interval" in page and "risk under weight draws" in page
    assert "lower than" in page


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (["--uncertainty", "0"], "--uncertainty: must be a whole number of draws of at least 1"),
        (["--seed", "3"], "--seed: --seed needs --uncertainty"),
        (["--uncertainty", "10"], "needs a profile with an 'uncertainty' block"),
    ],
)
def test_score_uncertainty_bad_options(extra, words, town_dir, tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = _score(["--network", str(town_dir), "--out", str(out), *extra], capsys)
    assert code == 2 and len(err.strip().splitlines()) == 1 and words in err, err
    assert not out.exists()


def test_suggest_uncertainty_gives_probability_against_the_plan(town_dir, tmp_path, capsys):
    prof = _ranged_profile(
        tmp_path, school={"low": 1.0, "high": 6.0}, retail={"low": 0.5, "high": 3.0}
    )
    args = [
        "suggest",
        str(datasets.get_path("routes")),
        "--network",
        str(town_dir),
        "--profile",
        str(prof),
        "--uncertainty",
        "400",
        "--seed",
        "2",
        "--json",
    ]
    assert main(args) == 0
    a = capsys.readouterr().out
    assert main(args) == 0
    assert capsys.readouterr().out == a
    doc = json.loads(a)
    assert doc["made_from"]["uncertainty_seed"] == 2
    for route, unc in zip(doc["routes"], doc["uncertainty"]["routes"], strict=True):
        assert route["name"] == unc["name"]
        for alt, u in zip(route["alternatives"], unc["alternatives"], strict=True):
            assert 0.0 <= u["p_lower_than_plan"] <= 1.0
            if alt["risk_change_pct"] < -50:  # far lower at every draw of two weights
                assert u["p_lower_than_plan"] == 1.0
    # the map's side panel carries the intervals and the probabilities
    page_path = tmp_path / "alt.html"
    assert main([*args[:-1], "--map", str(page_path)]) == 0
    capsys.readouterr()
    page = page_path.read_text()
    assert "90 % interval" in page and "P(lower than the plan)" in page
    assert (
        main(
            [
                "suggest",
                str(datasets.get_path("routes")),
                "--network",
                str(town_dir),
                "--uncertainty",
                "0",
            ]
        )
        == 2
    )


def test_review_band_intervals_recompute_the_bands(town_net, tmp_path):
    from routerisk.analysis import review

    areas = review.read_areas(datasets.get_path("area"), crs=town_net.crs)
    # degenerate ranges (low = high = the weight): every draw must give the tagged bands
    same = {c.name: {"low": c.weight, "high": c.weight} for c in town_net.profile.categories}
    fixed = town_net.retag(load_profile(_ranged_profile(tmp_path, **same)))
    res = review.review_areas(fixed, areas)
    u = un.area_bands(res, 50, 3)
    for a, ua in zip(res.areas, u["areas"], strict=True):
        for band, km in a["km_by_band"].items():
            got = ua["km_by_band"][band]
            assert got["low"] == got["median"] == got["high"]
            assert got["median"] == pytest.approx(km, abs=1e-4)  # review rounds to 4 places
    wide = {"school": {"low": 0.0, "high": 9.0}, "retail": {"low": 0.0, "high": 6.0}}
    net2 = town_net.retag(load_profile(_ranged_profile(tmp_path, **wide)))
    res2 = review.review_areas(net2, areas)
    u2 = un.area_bands(res2, 400, 3)
    main_area = u2["areas"][0]["km_by_band"]
    assert main_area["intense"]["high"] > main_area["intense"]["low"]


def test_review_uncertainty_cli(town_dir, tmp_path, capsys):
    prof = _ranged_profile(tmp_path, school={"low": 1.0, "high": 6.0})
    args = [
        "review",
        str(datasets.get_path("area")),
        "--network",
        str(town_dir),
        "--profile",
        str(prof),
        "--uncertainty",
        "200",
        "--json",
    ]
    assert main(args) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["uncertainty"]["weights_varied"] == ["school"]
    assert (
        main(
            [
                "review",
                str(datasets.get_path("area")),
                "--network",
                str(town_dir),
                "--uncertainty",
                "0",
            ]
        )
        == 2
    )
    assert "--uncertainty" in capsys.readouterr().err

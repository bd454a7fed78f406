"""Calibration of a profile on pedestrian counts (routerisk/analysis/calibration/, routerisk/io/counts.py)."""

from __future__ import annotations

import csv
import io
import warnings
from pathlib import Path

import numpy as np
import pytest
import yaml

from routerisk import datasets
from routerisk.analysis import calibration as cb
from routerisk.cli import main
from routerisk.io import counts as counts_io
from routerisk.profile import load_profile, parse_profile

#: The hidden profile of the sample count programme (sample_area/make_counts.py).
TRUE = {"school": 4.5, "retail": 2.2, "park": 0.3, "transit": 1.6}


@pytest.fixture(scope="module")
def design(town_net):
    counts = counts_io.read_counts(datasets.get_path("counts"), town_net.timezone)
    placement = cb.place_sites(town_net, counts)
    return cb.build_design(town_net, counts, placement)


def _true_theta(profile, scale=40.0):
    return np.r_[scale, scale * np.array([TRUE.get(c.name, c.weight) for c in profile.categories])]


def test_poisson_fit_equals_statsmodels_glm(design):
    # reference: statsmodels GLM, Poisson family, identity link, same design matrix, fitted
    # by Newton's method so its covariance is the inverse observed Hessian (as ours)
    import statsmodels.api as sm

    f = cb.fit_fixed(design.Z, design.y)
    assert not f.at_bound.any()
    fam = sm.families.Poisson(link=sm.families.links.Identity())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = sm.GLM(design.y, design.Z, family=fam).fit(method="newton", maxiter=200)
    np.testing.assert_allclose(f.theta, ref.params, rtol=1e-4)
    np.testing.assert_allclose(f.se, ref.bse, rtol=1e-4)
    assert f.loglik == pytest.approx(ref.llf, rel=1e-9)


def test_negative_binomial_fit_equals_statsmodels_at_fixed_alpha(design):
    # reference: statsmodels GLM, NegativeBinomial(alpha) family (NB2), identity link,
    # Newton's method (observed Hessian)
    import statsmodels.api as sm

    nb = cb.fit_nb(design.Z, design.y)
    assert 0.02 < nb.alpha < 0.3  # generated with alpha 0.08
    fam = sm.families.NegativeBinomial(alpha=nb.alpha, link=sm.families.links.Identity())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = sm.GLM(design.y, design.Z, family=fam).fit(method="newton", maxiter=200)
    np.testing.assert_allclose(nb.theta, ref.params, rtol=1e-4)
    np.testing.assert_allclose(nb.se, ref.bse, rtol=1e-4)
    assert nb.loglik == pytest.approx(ref.llf, rel=1e-9)
    # alpha is the maximum of the profile likelihood
    for a in (nb.alpha * 0.97, nb.alpha * 1.03):
        assert cb.fit_fixed(design.Z, design.y, alpha=a).loglik < nb.loglik


def test_dispersion_test_picks_the_model(design, town_net):
    rng = np.random.default_rng(7)
    mu = design.Z @ _true_theta(town_net.profile)
    pois_y = rng.poisson(mu).astype(float)
    p, nb = cb.fit_fixed(design.Z, pois_y), cb.fit_nb(design.Z, pois_y)
    assert cb.dispersion_test(pois_y, p, nb)["chosen"] == "poisson"
    y = design.y  # the sample counts carry NB noise (alpha 0.08)
    p, nb = cb.fit_fixed(design.Z, y), cb.fit_nb(design.Z, y)
    assert cb.dispersion_test(y, p, nb)["chosen"] == "negative binomial"


def test_recovery_and_coverage_over_200_seeds(design, town_net):
    """Each weight's 95 % interval covers the true value 90-99 % of the time."""
    from scipy.stats import norm

    theta = _true_theta(town_net.profile)
    truth = np.r_[theta[0], theta[1:] / theta[0]]
    mu = design.Z @ theta
    z = norm.ppf(0.975)
    hits = np.zeros(len(theta))
    for seed in range(200):
        rng = np.random.default_rng(seed)
        y = rng.poisson(rng.gamma(1 / 0.08, 0.08 * mu)).astype(float)
        f = cb.fit_nb(design.Z, y)
        est, cov = cb.weights_from(f.theta, f.cov)
        se = np.sqrt(np.diag(cov))
        hits += np.abs(est - truth) <= z * se
    share = hits / 200
    assert ((share >= 0.90) & (share <= 0.99)).all(), share


def test_sample_programme_recovers_the_hidden_weights(town_net):
    cal = cb.calibrate(town_net, datasets.get_path("counts"))
    assert cal.fit.family == "negative binomial"
    recs = {w["category"]: w for w in cal.weights()}
    for name, true in TRUE.items():
        assert recs[name]["low"] <= true <= recs[name]["high"], recs[name]
    assert cal.placement.left_out and cal.placement.left_out[0][0] == "C99"
    assert cal.cv["deviance_fitted"] < cal.cv["deviance_judged"]


def _rows(path: Path) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(path.read_text(encoding="utf-8"))))


def _write(path: Path, rows: list[dict[str, str]]) -> Path:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(counts_io.COLUMNS), lineterminator="\n")
    w.writeheader()
    w.writerows(rows)
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def test_categories_without_sites_are_not_fitted(town_net, tmp_path):
    rows = _rows(datasets.get_path("counts"))
    e = town_net.edges
    counts = counts_io.read_counts(datasets.get_path("counts"), town_net.timezone)
    pl = cb.place_sites(town_net, counts)
    near = set(
        pl.sites.loc[
            pl.sites["placed"] & (e["exp_hospital"].to_numpy()[pl.sites["edge"].clip(0)] > 0),
            "site",
        ]
    )
    assert near
    path = _write(tmp_path / "c.csv", [r for r in rows if r["site"] not in near])
    cal = cb.calibrate(town_net, path)
    rec = {w["category"]: w for w in cal.weights()}["hospital"]
    assert rec == {**rec, "fitted": False, "weight": 1.0, "low": None, "sites_near": 0}
    assert "hospital" in cal.design.not_fitted
    doc = cb.calibrated_document(cal, out_path=tmp_path / "p.yaml", counts_sha256="x")
    assert doc["categories"]["hospital"]["weight"] == 1.0
    assert "hospital" not in doc["uncertainty"]["weights"]


def test_cli_writes_a_valid_fingerprinted_profile_and_report(town_dir, tmp_path):
    out, rep = tmp_path / "cal.yaml", tmp_path / "cal.html"
    args = [
        "calibrate",
        str(datasets.get_path("counts")),
        "--network",
        str(town_dir),
        "--out",
        str(out),
        "--report",
        str(rep),
    ]
    assert main(args) == 0
    prof = load_profile(out)
    assert prof.uncertainty is not None
    assert list(prof.uncertainty.weights) == list(prof.category_names)
    cov = np.array(prof.uncertainty.covariance)
    assert np.linalg.eigvalsh(cov).min() > 0
    assert prof.category("school").weight == pytest.approx(4.2, abs=1.0)
    # the block is part of the fingerprint
    doc = yaml.safe_load(out.read_text())
    doc["uncertainty"]["covariance"][0][0] *= 2
    assert parse_profile(doc).fingerprint != prof.fingerprint
    page = rep.read_text()
    from routerisk import CAUTION
    from routerisk.render import report

    assert CAUTION in page and 'name="routerisk-provenance"' in page
    assert "not crash" in page and report.external_references(page) == []
    first = (out.read_bytes(), rep.read_bytes())
    assert main([*args, "--force"]) == 0
    assert (out.read_bytes(), rep.read_bytes()) == first


def test_profiles_without_uncertainty_keep_their_fingerprint():
    prof = load_profile()
    assert prof.uncertainty is None and "uncertainty" not in prof.to_dict()
    # fingerprint as computed before the block existed (same normalised content)
    import hashlib
    import json

    text = json.dumps(
        prof.to_dict(),
        sort_keys=True,
        separators=(",", ":"),
        default=lambda o: o.tolist() if hasattr(o, "tolist") else str(o),
    )
    assert prof.fingerprint == hashlib.sha256(text.encode()).hexdigest()[:16]


@pytest.mark.parametrize(
    ("block", "field", "words"),
    [
        ({"weights": ["school"], "covariance": [[0.1, 0.0]]}, "uncertainty.covariance", "1 x 1"),
        ({"weights": ["nowhere"], "covariance": [[0.1]]}, "uncertainty.weights", "unknown"),
        (
            {"weights": ["school", "park"], "covariance": [[0.1, 0.2], [0.0, 0.1]]},
            "uncertainty.covariance",
            "symmetric",
        ),
        (
            {"weights": ["school", "park"], "covariance": [[0.1, 0.5], [0.5, 0.1]]},
            "uncertainty.covariance",
            "semi-definite",
        ),
        (
            {"weights": ["school", "school"], "covariance": [[1, 0], [0, 1]]},
            "uncertainty.weights",
            "twice",
        ),
        ({"weights": ["school"]}, "uncertainty.covariance", "missing"),
    ],
)
def test_uncertainty_block_is_validated(block, field, words):
    from routerisk.errors import ProfileError

    doc = yaml.safe_load(Path(load_profile().source).read_text())
    doc["uncertainty"] = block
    with pytest.raises(ProfileError) as exc:
        parse_profile(doc, path="p.yaml")
    assert exc.value.field == field and words in exc.value.message


def _bad(tmp_path, rows_or_text):
    path = tmp_path / "bad.csv"
    if isinstance(rows_or_text, str):
        path.write_text(rows_or_text, encoding="utf-8")
    else:
        _write(path, rows_or_text)
    return path


def _sample_rows():
    return _rows(datasets.get_path("counts"))


def _bad_text():
    rows = _edit(3, count="-4")
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(counts_io.COLUMNS), lineterminator="\n")
    w.writeheader()
    w.writerows(rows)
    return buf.getvalue()


def _edit(i, **kw):
    rows = _sample_rows()
    rows[i] = {**rows[i], **kw}
    return rows


@pytest.mark.parametrize(
    ("make", "words"),
    [
        (lambda: _edit(3, count="-4"), "row 5: count: must not be negative"),
        (lambda: _edit(3, count="4.5"), "row 5: count: must be a whole number"),
        (lambda: _edit(0, end="2027-03-11T13:00"), "row 2: end: end 2027-03-11T13:00 is not after"),
        (lambda: _edit(0, end="2027-03-19T14:00"), "row 2: end: a counting period of"),
        (
            lambda: _edit(0, site="Z1", lat="38.6", lon="-38.2"),
            "row 2: lat/lon: site 'Z1' is off the network",
        ),
        (lambda: "site,lat,lon,start,end,count\n", "has no counting periods"),
        (lambda: [{**r, "count": "0"} for r in _sample_rows()], "count: every count is zero"),
        (lambda: "# a comment line\n" + _bad_text(), "row 6: count: must not be negative"),
        (
            lambda: [r for r in _sample_rows() if r["site"] in ("C04", "C07")],
            "2 sites were placed on the network but fitting the scale, 3 weights (school, "
            "campus, park) needs at least 4 sites",
        ),
    ],
)
def test_bad_counts_one_line_exit_2_nothing_written(make, words, town_dir, tmp_path, capsys):
    path = _bad(tmp_path, make())
    out, rep = tmp_path / "o.yaml", tmp_path / "o.html"
    code = main(
        [
            "calibrate",
            str(path),
            "--network",
            str(town_dir),
            "--out",
            str(out),
            "--report",
            str(rep),
        ]
    )
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and str(path) in err and words in err, err
    assert not out.exists() and not rep.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv"]


def test_fewer_sites_says_how_many_are_needed(town_net, tmp_path):
    rows = [r for r in _sample_rows() if r["site"] in ("C04", "C07")]
    with pytest.raises(counts_io.CountsError, match=r"needs at least \d+ sites"):
        cb.calibrate(town_net, _bad(tmp_path, rows))


def test_singular_design_names_the_categories(tmp_path, capsys):
    """Two categories that are never apart (same sources, radius and hours) are named."""
    from routerisk.network.folder import build_network, save_network

    doc = yaml.safe_load(Path(load_profile().source).read_text())
    doc["categories"]["greens"] = {**doc["categories"]["park"], "label": "Greens"}
    (tmp_path / "p.yaml").write_text(yaml.safe_dump(doc), encoding="utf-8")
    net = build_network(
        datasets.get_path("town"), profile=load_profile(tmp_path / "p.yaml"), timezone="Etc/GMT+3"
    )
    save_network(net, tmp_path / "net")
    out = tmp_path / "o.yaml"
    code = main(
        [
            "calibrate",
            str(datasets.get_path("counts")),
            "--network",
            str(tmp_path / "net"),
            "--out",
            str(out),
        ]
    )
    err = capsys.readouterr().err
    assert code == 2 and "'greens' and 'park' are never apart" in err, err
    assert "categories" in err and not out.exists()


def test_geojson_counts_read_like_csv(town_net, tmp_path):
    import json

    rows = _sample_rows()
    feats = [
        {
            "type": "Feature",
            "geometry": {"type": "Point", "coordinates": [float(r["lon"]), float(r["lat"])]},
            "properties": {k: r[k] for k in ("site", "start", "end", "count")},
        }
        for r in rows
    ]
    path = tmp_path / "c.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    a = counts_io.read_counts(path, town_net.timezone)
    b = counts_io.read_counts(datasets.get_path("counts"), town_net.timezone)
    assert (
        a[["site", "count", "hours"]].to_numpy() == b[["site", "count", "hours"]].to_numpy()
    ).all()
    assert a["where"].iloc[3] == "features[3]"


def test_period_multipliers_are_the_profile_minute_means(town_net):
    prof = town_net.profile
    start = np.array([7 * 60 + 30, 10079])  # Mon 07:30, and Sun 23:59 running into Monday
    mins = np.array([120, 61])
    got = cb.period_multipliers(prof, start, mins)
    for i in range(2):
        ref = prof.multipliers((start[i] + np.arange(mins[i])) % 10080).mean(axis=0)
        np.testing.assert_allclose(got[i], ref, rtol=1e-12)


def test_sample_count_programme_regenerates_byte_identical(tmp_path):
    import importlib.util

    script = Path(__file__).resolve().parents[1] / "sample_area" / "make_counts.py"
    spec = importlib.util.spec_from_file_location("make_counts", script)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    mod.main(tmp_path)
    assert (tmp_path / "counts.csv").read_bytes() == datasets.get_path("counts").read_bytes()
    rows = _rows(tmp_path / "counts.csv")
    assert len({r["site"] for r in rows}) == mod.N_SITES + 1  # and the one left out
    assert {r["end"][11:] for r in rows} and all(r["end"][:10] == r["start"][:10] for r in rows)


def test_fit_baseline_holds_one_road_class_and_fits_the_others(town_net, tmp_path):
    base = cb.calibrate(town_net, datasets.get_path("counts"))
    cal = cb.calibrate(town_net, datasets.get_path("counts"), fit_baseline=True)
    d = cal.design
    assert d.fixed_class == "residential" and "tertiary" in d.classes
    assert d.Z.shape[1] == base.design.Z.shape[1] + len(d.classes)
    # the split columns add up to the one baseline column
    np.testing.assert_allclose(d.Z[:, : 1 + len(d.classes)].sum(axis=1), base.design.Z[:, 0])
    recs = {b["road_class"]: b for b in cal.baselines()}
    assert recs["residential"]["fitted"] is False
    t = recs["tertiary"]
    assert t["low"] <= t["baseline"] <= t["high"]
    assert cal.fit.loglik >= base.fit.loglik - 1e-9  # a larger model fits at least as well
    doc = cb.calibrated_document(cal, out_path=tmp_path / "p.yaml", counts_sha256="x")
    assert doc["baseline"]["by_road_class"]["tertiary"] == pytest.approx(t["baseline"])
    assert doc["baseline"]["by_road_class"]["residential"] == 0.35
    assert doc["uncertainty"]["weights"] == list(town_net.profile.category_names)
    parse_profile(doc)


def test_bound_fit_meets_the_optimality_conditions(design, town_net):
    """With a true weight of zero some fits hold it at the bound; the KKT conditions hold."""
    theta = _true_theta(town_net.profile)
    j = 1 + design.categories.index("park")
    theta[j] = 0.0
    mu = design.Z @ theta
    held = 0
    for seed in range(12):
        y = np.random.default_rng(seed).poisson(mu).astype(float)
        f = cb.fit_fixed(design.Z, y)
        grad = design.Z.T @ ((y - f.mu) / f.mu)
        assert (f.theta >= 0).all()
        free = ~f.at_bound
        np.testing.assert_allclose(
            grad[free], 0.0, atol=1e-6 * np.abs(design.Z.T @ (y / f.mu)).max()
        )
        assert (grad[f.at_bound] <= 1e-9).all()
        held += bool(f.at_bound[j])
        # reference: scipy.optimize.minimize, L-BFGS-B under the same bounds, from our
        # optimum's neighbourhood and from a plain start; ours is at least as good
        from scipy.optimize import minimize
        from scipy.special import gammaln

        def neg(t, y=y):
            m = np.maximum(design.Z @ t, 1e-12)
            return -float(np.sum(y * np.log(m) - m))

        for x0 in (f.theta * 1.1 + 1.0, np.full(len(theta), y.mean() / design.Z.sum(1).mean())):
            ref = minimize(
                neg,
                x0,
                method="L-BFGS-B",
                bounds=[(0, None)] * len(theta),
                options={"maxiter": 5000, "ftol": 1e-15, "gtol": 1e-10},
            )
            const = float(gammaln(y + 1).sum())  # the term neg() leaves out
            assert -ref.fun - const <= f.loglik + 1e-9 * abs(f.loglik)
        # no feasible move along the free parameters raises the likelihood
        for k in np.flatnonzero(free):
            for step in (1e-4, -1e-4):
                t2 = f.theta.copy()
                t2[k] *= 1 + step
                assert cb.loglik(y, design.Z @ t2) <= f.loglik + 1e-9
    assert held >= 2  # about half the fits put it at zero

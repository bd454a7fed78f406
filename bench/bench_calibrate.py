"""Benchmark ``calibrate`` (500 sites x 3 periods) and ``--uncertainty 10000`` (1,000 routes).

Run by hand:  python bench/bench_calibrate.py [--edges 100000 --sites 500 --routes 1000]

On a generated city (seed 1): count sites at edge midpoints (stratified over the categories,
then at random), three two-hour periods each, counts drawn from a profile with changed weights
and negative binomial noise (alpha 0.1). Times, in one run: the whole calibration (reading the
CSV, placing the sites, the design, Poisson and NB fits, the dispersion test and the
leave-one-site-out refits); plain scoring of 1,000 routes of ~5 km; the uncertainty summary of
those routes with 10,000 weight draws (on top of plain scoring). Writes
bench/results/calibrate_<edges>.json (wall-clock and CPU seconds: on a shared machine the
CPU figure is the one to compare with the targets). Also the coverage of the 95 % intervals over --seeds
simulated programmes on the sample town (the longer run of the test's 200).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))


def _counts_csv(net, n_sites: int, path: Path, rng) -> None:
    import numpy as np
    import pyproj
    import shapely

    from routerisk.analysis import calibration
    from routerisk.io import counts as counts_io

    e = net.edges
    chosen: list[int] = []
    for c in net.profile.category_names:
        rows = np.flatnonzero(e[f"exp_{c}"].to_numpy() > 0.2)
        if len(rows):
            chosen += list(rng.choice(rows, size=min(20, len(rows)), replace=False))
    rest = np.setdiff1d(np.arange(len(e)), chosen)
    chosen += list(rng.choice(rest, size=n_sites - len(chosen), replace=False))
    mids = shapely.line_interpolate_point(e.geometry.to_numpy()[chosen], 0.5, normalized=True)
    lon, lat = pyproj.Transformer.from_crs(e.crs, "EPSG:4326", always_xy=True).transform(
        shapely.get_x(mids), shapely.get_y(mids)
    )
    lines = [",".join(counts_io.COLUMNS)]
    for i in range(n_sites):
        for _ in range(3):
            day = dt.date(2027, 3, 8 + int(rng.integers(0, 6)))
            start = dt.datetime.combine(day, dt.time(int(rng.integers(6, 20)), 0))
            end = start + dt.timedelta(hours=2)
            lines.append(f"S{i},{lat[i]:.7f},{lon[i]:.7f},{start.isoformat()},{end.isoformat()},0")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    counts = counts_io.read_counts(path, net.timezone)
    design = calibration.build_design(net, counts, calibration.place_sites(net, counts))
    w = np.array(
        [1.0, *(c.weight * (1.5 if j % 2 else 0.7) for j, c in enumerate(net.profile.categories))]
    )
    mu = 30.0 * design.full @ w
    y = rng.poisson(rng.gamma(10.0, mu / 10.0))
    out = [lines[0]] + [
        ln.rsplit(",", 1)[0] + f",{int(v)}" for ln, v in zip(lines[1:], y, strict=True)
    ]
    path.write_text("\n".join(out) + "\n", encoding="utf-8")


def _coverage(seeds: int) -> dict[str, float]:
    import numpy as np
    from scipy.stats import norm

    from routerisk import datasets
    from routerisk.analysis import calibration as cb
    from routerisk.io import counts as counts_io
    from routerisk.network.folder import build_network

    net = build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    counts = counts_io.read_counts(datasets.get_path("counts"), net.timezone)
    d = cb.build_design(net, counts, cb.place_sites(net, counts))
    theta = 40.0 * np.r_[1.0, [c.weight for c in net.profile.categories]]
    truth = np.r_[theta[0], theta[1:] / theta[0]]
    mu = d.Z @ theta
    hits = np.zeros(len(theta))
    for seed in range(seeds):
        rng = np.random.default_rng(10_000 + seed)
        f = cb.fit_nb(d.Z, rng.poisson(rng.gamma(1 / 0.08, 0.08 * mu)).astype(float))
        est, cov = cb.weights_from(f.theta, f.cov)
        hits += np.abs(est - truth) <= norm.ppf(0.975) * np.sqrt(np.diag(cov))
    return dict(zip(["scale", *net.profile.category_names], (hits / seeds).tolist(), strict=True))


def main() -> None:
    """Run the benchmark and write its JSON record."""
    import numpy as np

    from routerisk.analysis import calibration, scoring, uncertainty
    from routerisk.io.routes import PlannedRoute
    from routerisk.network.folder import build_network
    from routerisk.testing.synthetic import write_city

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=100_000)
    ap.add_argument("--sites", type=int, default=500)
    ap.add_argument("--routes", type=int, default=1000)
    ap.add_argument("--draws", type=int, default=10_000)
    ap.add_argument("--seeds", type=int, default=1000)
    args = ap.parse_args()
    rng = np.random.default_rng(3)
    res: dict[str, float | int | dict[str, float]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        pbf = Path(tmp) / "city.osm.pbf"
        write_city(pbf, edges=args.edges, seed=1)
        net = build_network(pbf)
        csv_path = Path(tmp) / "counts.csv"
        _counts_csv(net, args.sites, csv_path, rng)
        t0, c0 = time.perf_counter(), time.process_time()
        cal = calibration.calibrate(net, csv_path)
        res["seconds_calibrate"] = time.perf_counter() - t0
        res["cpu_seconds_calibrate"] = time.process_time() - c0
        res["model"] = cal.fit.family
        res["periods"] = len(cal.design.y)
    res["edges"] = len(net.edges)
    G = net.graph
    nodes = np.array(sorted(G.nodes))
    xy = np.array([[G.nodes[n]["x"], G.nodes[n]["y"]] for n in nodes])
    routes = []
    while len(routes) < args.routes:
        pick = [int(rng.integers(len(nodes)))]
        for _ in range(4):
            d = np.hypot(*(xy - xy[pick[-1]]).T)
            near = np.flatnonzero((d > 900) & (d < 1500))
            if len(near) == 0:
                break
            pick.append(int(rng.choice(near)))
        if len(pick) == 5:
            ll = np.array([[G.nodes[nodes[i]]["lon"], G.nodes[nodes[i]]["lat"]] for i in pick])
            routes.append(PlannedRoute(f"r{len(routes)}", ll))
    depart = dt.datetime(2027, 3, 9, 8, 0, tzinfo=net.timezone)
    t0, c0 = time.perf_counter(), time.process_time()
    scores = scoring.score_routes(net, routes, [depart])
    res["seconds_score_plain"] = time.perf_counter() - t0
    res["cpu_seconds_score_plain"] = time.process_time() - c0
    ranged = net.retag(_with_ranges(net.profile))
    t0, c0 = time.perf_counter(), time.process_time()
    uncertainty.summarise(ranged, scores, args.draws, 1)
    res["seconds_uncertainty_on_top"] = time.perf_counter() - t0
    res["cpu_seconds_uncertainty_on_top"] = time.process_time() - c0
    res["routes"] = len(scores)
    res["draws"] = args.draws
    res["coverage_seeds"] = args.seeds
    res["coverage_95"] = _coverage(args.seeds)
    for k, v in res.items():
        print(f"{k:32s} {v}")
    out = HERE / "results" / f"calibrate_{args.edges}.json"
    out.write_text(json.dumps(res, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def _with_ranges(profile):
    import dataclasses

    cats = tuple(
        dataclasses.replace(c, weight_range=(0.5 * c.weight, 1.5 * c.weight, "uniform"))
        for c in profile.categories
    )
    return dataclasses.replace(profile, categories=cats)


if __name__ == "__main__":
    main()

"""Write an invented pedestrian count programme for the sample town (``counts.csv``).

Deterministic (fixed seed): ``python sample_area/make_counts.py`` writes ``counts.csv``
beside this file. 60 sites on Corvane's streets, spread over the profile's categories
(every category with sources has sites within its influence, some have none of any),
each counted 1 to 3 times for two hours on weekdays and a Saturday of March 2027 at
several hours. The counts are drawn from a hidden "true" profile that differs from the
default in a few weights (:data:`TRUE_WEIGHTS`) at :data:`TRUE_SCALE` pedestrians per hour
per unit of presence, with negative binomial (NB2) noise of dispersion :data:`TRUE_ALPHA`.
One extra site stands in a park 45 m from any street, so the placing limit has something
to leave out. All of it is invented demo data (CC0).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import sys
import tempfile
from pathlib import Path

import numpy as np
import pyproj
import shapely

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from routerisk import datasets  # noqa: E402
from routerisk.analysis import calibration  # noqa: E402
from routerisk.io import counts as counts_io  # noqa: E402
from routerisk.network.folder import build_network  # noqa: E402

SEED = 20270315
N_SITES = 60
#: The hidden profile: the default's weights except these.
TRUE_WEIGHTS = {"school": 4.5, "retail": 2.2, "park": 0.3, "transit": 1.6}
TRUE_SCALE = 40.0
TRUE_ALPHA = 0.08
DAYS = [dt.date(2027, 3, d) for d in (8, 9, 10, 11, 12, 13)]  # Mon 8 to Sat 13 March 2027
HOURS = (7, 8, 10, 12, 14, 15, 16, 17, 19)
OFFSET_M = 6.0  # sites stand on the sidewalk, a few metres from the centre line


def _sites(net, rng: np.random.Generator) -> list[tuple[str, float, float]]:
    """Pick edges stratified by category (then at random), one site near each midpoint."""
    e = net.edges
    cats = list(net.profile.category_names)
    chosen: list[int] = []
    per_cat = 6
    for c in cats:
        rows = np.flatnonzero(e[f"exp_{c}"].to_numpy() > 0.2)
        rows = [r for r in rows if r not in chosen]
        if rows:
            chosen += list(rng.choice(rows, size=min(per_cat, len(rows)), replace=False))
    rest = [r for r in range(len(e)) if r not in chosen]
    chosen += list(rng.choice(rest, size=N_SITES - len(chosen), replace=False))
    to_ll = pyproj.Transformer.from_crs(e.crs, "EPSG:4326", always_xy=True)
    out = []
    for i, r in enumerate(chosen):
        g = e.geometry.iloc[int(r)]
        a = shapely.line_interpolate_point(g, 0.45, normalized=True)
        b = shapely.line_interpolate_point(g, 0.55, normalized=True)
        dx, dy = b.x - a.x, b.y - a.y
        n = max(np.hypot(dx, dy), 1e-9)
        mid = shapely.line_interpolate_point(g, 0.5, normalized=True)
        lon, lat = to_ll.transform(mid.x - dy / n * OFFSET_M, mid.y + dx / n * OFFSET_M)
        out.append((f"C{i + 1:02d}", round(lat, 7), round(lon, 7)))
    return out


def _far_site(net) -> tuple[str, float, float]:
    """Return a site 45 m from the nearest street, inside the town (to be left out)."""
    e = net.edges
    geoms = e.geometry.to_numpy()
    tree = shapely.STRtree(geoms)
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    to_ll = pyproj.Transformer.from_crs(e.crs, "EPSG:4326", always_xy=True)
    for x in np.linspace(x0, x1, 80):
        for y in np.linspace(y0, y1, 80):
            _, d = tree.query_nearest(shapely.points(x, y), return_distance=True)
            if 44.0 < d[0] < 47.0:
                lon, lat = to_ll.transform(x, y)
                return "C99", round(lat, 7), round(lon, 7)
    raise RuntimeError("no point 45 m from a street")


def rows(net, rng: np.random.Generator) -> list[dict[str, object]]:
    """Return the count periods (counts still 0) of every site."""
    out = []
    for site, lat, lon in [*_sites(net, rng), _far_site(net)]:
        n = int(rng.integers(1, 4))
        picks = rng.choice(len(DAYS) * len(HOURS), size=n, replace=False)
        for p in sorted(picks):
            day, hour = DAYS[p // len(HOURS)], HOURS[p % len(HOURS)]
            start = dt.datetime.combine(day, dt.time(hour, 0))
            out.append(
                {
                    "site": site,
                    "lat": f"{lat:.7f}",
                    "lon": f"{lon:.7f}",
                    "start": start.isoformat(timespec="minutes"),
                    "end": (start + dt.timedelta(hours=2)).isoformat(timespec="minutes"),
                    "count": 0,
                }
            )
    return out


def _csv(records: list[dict[str, object]]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(counts_io.COLUMNS), lineterminator="\n")
    w.writeheader()
    w.writerows(records)
    return buf.getvalue()


def main(out: Path = HERE) -> None:
    """Write ``counts.csv`` into ``out``."""
    rng = np.random.default_rng(SEED)
    net = build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    recs = rows(net, rng)
    with tempfile.TemporaryDirectory() as tmp:
        draft = Path(tmp) / "draft.csv"
        draft.write_text(_csv(recs), encoding="utf-8")
        counts = counts_io.read_counts(draft, net.timezone)
        placement = calibration.place_sites(net, counts)
        design = calibration.build_design(net, counts, placement)
    w = np.array([1.0, *(TRUE_WEIGHTS.get(c.name, c.weight) for c in net.profile.categories)])
    mu = TRUE_SCALE * design.full @ w
    # NB2 as a gamma-Poisson mixture: mean mu, variance mu + alpha mu^2
    lam = rng.gamma(1.0 / TRUE_ALPHA, TRUE_ALPHA * mu)
    drawn = dict(zip(design.periods["where"], rng.poisson(lam), strict=True))
    for i, r in enumerate(recs):
        r["count"] = int(drawn.get(f"row {i + 2}", rng.poisson(5)))
    (out / "counts.csv").write_text(_csv(recs), encoding="utf-8")
    print(
        f"wrote {out / 'counts.csv'}: {len(recs)} periods at {len({r['site'] for r in recs})} sites"
    )


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE)

"""Write invented recorded drives (GPX) and a safety-event log for the sample town.

Deterministic (fixed seed): ``python sample_area/make_drives.py`` writes ``drives/*.gpx`` and
``events.csv`` beside this file. The drives walk fastest paths between fixed street corners of
Corvane at 2 s sampling with Gaussian GPS noise (sigma 4 m). The events are a Poisson process
along the driven kilometres whose rate does **not** follow the tool's exposure weights exactly,
so the early-warning demo cannot merely confirm its own model:

- the rate rises as each street's modelled exposure (relative to the town's mean) to the
  power ``EXPOSURE_POWER`` = 0.75, not in proportion to it;
- every street block (both directions of an edge pair and the run between intersections, as
  ``routerisk watch --unit block`` merges them) carries its own gamma-distributed factor
  (mean 1, shape ``BLOCK_SHAPE``), shared by both directions: unexplained differences between
  blocks, i.e. over-dispersion;
- one planted hot spot, the block of Tillerman Avenue between its corners ``HOT_BLOCK``, has
  ``HOT_FACTOR`` times the rate (and no random factor), and every other drive passes it,
  alternating direction.

``tests/test_watch.py`` checks that the default ``watch`` (block units, negative binomial
p-values chosen by the over-dispersion test) flags the planted block and at most one other.
All of it is invented demo data (CC0).
"""

from __future__ import annotations

import datetime as dt
import sys
from pathlib import Path

import networkx as nx
import numpy as np
import pyproj
from shapely import line_interpolate_point

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from routerisk import datasets  # noqa: E402
from routerisk.analysis.watch import discovery_units  # noqa: E402
from routerisk.network.folder import build_network  # noqa: E402

SEED = 20270309
N_DRIVES = 40
SIGMA_M = 4.0
SAMPLE_S = 2.0
BASE_RATE_PER_KM = 1.5
EXPOSURE_POWER = 0.75
BLOCK_SHAPE = 6.0
HOT_FACTOR = 4.0
HOT_STREET = "Tillerman Avenue"
HOT_BLOCK = "2-3"
TZ = dt.timezone(dt.timedelta(hours=-3))


def main(out: Path = HERE) -> None:
    rng = np.random.default_rng(SEED)
    net = build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    G = net.graph
    to_ll = pyproj.Transformer.from_crs(net.crs, "EPSG:4326", always_xy=True)
    nodes = sorted(G.nodes)
    edges = net.edges
    blocks = discovery_units(edges, "block")
    block_of = dict(zip(edges.index, blocks["unit"], strict=True))
    names = sorted(set(blocks["unit"]))
    factor = dict(zip(names, rng.gamma(BLOCK_SHAPE, 1.0 / BLOCK_SHAPE, len(names)), strict=True))
    factor[HOT_BLOCK] = HOT_FACTOR
    hot_edges = sorted(e for e, b in block_of.items() if b == HOT_BLOCK)
    assert hot_edges and all(edges.at[e, "name"] == HOT_STREET for e in hot_edges)
    mean_exposure = float((edges["exposure_km"] * edges["length"]).sum() / edges["length"].sum())
    drives_dir = out / "drives"
    drives_dir.mkdir(exist_ok=True)
    events = []
    start = dt.datetime(2027, 3, 1, 8, 0, tzinfo=TZ)
    for d in range(N_DRIVES):
        while True:
            a, b = (nodes[i] for i in rng.choice(len(nodes), 2, replace=False))
            path = nx.shortest_path(G, a, b, weight="travel_time")
            if len(path) > 12:
                break
        # route through a hot edge on every other drive so the hot spot is driven enough
        if d % 2 == 0:
            hu, hv, _ = hot_edges[(d // 2) % len(hot_edges)]
            path = nx.shortest_path(G, a, hu, weight="travel_time")[:-1] + nx.shortest_path(
                G, hu, b, weight="travel_time"
            )
            if hv not in path:
                path = (
                    nx.shortest_path(G, a, hu, weight="travel_time")[:-1]
                    + [hu]
                    + nx.shortest_path(G, hv, b, weight="travel_time")
                )
        t0 = start + dt.timedelta(days=d // 4, hours=2 * (d % 4), minutes=int(rng.integers(60)))
        pts, times = [], []
        t = t0
        for u, v in zip(path[:-1], path[1:], strict=True):
            k = min(G[u][v], key=lambda kk: G[u][v][kk]["travel_time"])
            e = G[u][v][k]
            n = max(1, int(round(e["travel_time"] / SAMPLE_S)))
            frac = (np.arange(n) + rng.uniform(0, 1)) / n
            xy = line_interpolate_point(e["geometry"], np.clip(frac, 0, 1), normalized=True)
            for j, p in enumerate(xy):
                pts.append((p.x + rng.normal(0, SIGMA_M), p.y + rng.normal(0, SIGMA_M)))
                times.append(t + dt.timedelta(seconds=j * e["travel_time"] / n))
            # events on this edge: Poisson in its km at a rate that follows a power (0.75)
            # of the modelled exposure, times the block's own factor (HOT_FACTOR on the hot spot)
            rel = edges.at[(u, v, k), "exposure_km"] / mean_exposure
            rate = BASE_RATE_PER_KM * rel**EXPOSURE_POWER * factor[block_of[(u, v, k)]]
            for _ in range(rng.poisson(rate * e["length"] / 1000.0)):
                f = rng.uniform(0.05, 0.95)
                p = e["geometry"].interpolate(f, normalized=True)
                lon, lat = to_ll.transform(p.x, p.y)
                when = t + dt.timedelta(seconds=f * e["travel_time"])
                kind = rng.choice(["intervention", "hard_brake", "near_miss"], p=[0.4, 0.4, 0.2])
                events.append((when, lat, lon, kind, f"veh-{1 + d % 3}"))
            t += dt.timedelta(seconds=e["travel_time"])
        lon, lat = to_ll.transform(*np.array(pts).T)
        _write_gpx(drives_dir / f"drive-{d + 1:02d}.gpx", f"drive-{d + 1:02d}", lon, lat, times)
    events.sort()
    lines = ["time,lat,lon,type,vehicle"]
    lines += [
        f"{w.isoformat(timespec='seconds')},{la:.7f},{lo:.7f},{k},{v}" for w, la, lo, k, v in events
    ]
    (out / "events.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {N_DRIVES} drives and {len(events)} events")


def _write_gpx(path: Path, name: str, lon, lat, times) -> None:
    rows = "".join(
        f'<trkpt lat="{la:.7f}" lon="{lo:.7f}"><time>'
        f"{t.astimezone(dt.UTC).strftime('%Y-%m-%dT%H:%M:%SZ')}</time></trkpt>\n"
        for lo, la, t in zip(lon, lat, times, strict=True)
    )
    path.write_text(
        '<?xml version="1.0" encoding="UTF-8"?>\n<gpx version="1.1" '
        'creator="routerisk sample_area/make_drives.py" '
        'xmlns="http://www.topografix.com/GPX/1/1">\n'
        f"<trk><name>{name}</name><trkseg>\n{rows}</trkseg></trk>\n</gpx>\n",
        encoding="utf-8",
    )


if __name__ == "__main__":
    main()

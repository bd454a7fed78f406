"""Benchmark ``routerisk serve`` on a generated city: score and alternatives requests, first paint.

Run by hand:  python bench/bench_serve.py [--edges 100000 --requests 30]

In one run: a seeded city (``routerisk.testing.synthetic.write_city``) is built, the planning page is
served by uvicorn on a loopback port, and real HTTP requests (httpx) time ``/api/score`` and
``/api/alternatives`` for seeded ~5 km waypoint routes (start, two vias, end); then headless
chromium (tests/_live_browser.py) times the page from navigation until the network layer of
the visible area is drawn. Prints medians and writes bench/results/serve_<edges>.json.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))


def _routes(net, n: int, seed: int = 2) -> list[list[list[float]]]:
    import numpy as np

    g = net.graph
    rng = np.random.default_rng(seed)
    nodes = np.array(sorted(g.nodes))
    xy = np.array([[g.nodes[k]["x"], g.nodes[k]["y"]] for k in nodes])
    out = []
    while len(out) < n:
        pick = [int(rng.integers(len(nodes)))]
        for _ in range(3):  # legs of ~1.7 km
            d = np.hypot(*(xy - xy[pick[-1]]).T)
            near = np.flatnonzero((d > 1400) & (d < 2000))
            if len(near) == 0:
                break
            pick.append(int(rng.choice(near)))
        if len(pick) == 4:
            out.append(
                [[float(g.nodes[nodes[i]]["lon"]), float(g.nodes[nodes[i]]["lat"])] for i in pick]
            )
    return out


def main() -> None:
    """Build the city, serve it, time the requests and the page, write the results."""
    import httpx

    from routerisk.network.folder import build_network
    from routerisk.serve.app import create_app
    from routerisk.testing.synthetic import write_city
    from tests._browser import CHROMIUM
    from tests._live_browser import LiveServer, Session

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=100000)
    ap.add_argument("--requests", type=int, default=30)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        pbf = Path(tmp) / "city.osm.pbf"
        write_city(pbf, edges=args.edges, seed=1)
        net = build_network(pbf)
    t0 = time.perf_counter()
    app = create_app(net)
    start_s = time.perf_counter() - t0
    routes = _routes(net, args.requests)
    depart = "2027-03-09T08:10"
    res: dict[str, object] = {"edges": int(len(net.edges)), "app_start_s": round(start_s, 3)}
    with LiveServer(app) as server, httpx.Client(base_url=server.url, timeout=120) as c:
        c.post("api/score", json={"route": {"waypoints": routes[0]}, "departs": [depart]})
        times = {"score": [], "alternatives": []}
        for kind in times:
            for pts in routes[: args.requests if kind == "score" else max(5, args.requests // 3)]:
                t = time.perf_counter()
                r = c.post(f"api/{kind}", json={"route": {"waypoints": pts}, "departs": [depart]})
                times[kind].append(time.perf_counter() - t)
                assert r.status_code == 200, r.text
        for kind, ts in times.items():
            res[f"{kind}_median_s"] = round(statistics.median(ts), 4)
            res[f"{kind}_max_s"] = round(max(ts), 4)
            res[f"{kind}_n"] = len(ts)
        if CHROMIUM:
            with tempfile.TemporaryDirectory() as dl, Session(downloads=Path(dl)) as s:
                paints = []
                for i in range(3):
                    t = time.perf_counter()
                    s.goto(f"{server.url}?visit={i}")  # a new document each time
                    s.wait(
                        f"location.search === '?visit={i}' && typeof S !== 'undefined' "
                        "&& S.networkShown > 0 && new Promise(r => "
                        "requestAnimationFrame(() => r(true)))",
                        timeout=60,
                    )
                    paints.append(time.perf_counter() - t)
                res["first_paint_median_s"] = round(statistics.median(paints), 3)
                res["first_paint_segments"] = s.js("S.networkShown")
    print(json.dumps(res, indent=2))
    out = HERE / "results" / f"serve_{args.edges}.json"
    out.write_text(json.dumps(res, indent=2, sort_keys=True) + "\n")


if __name__ == "__main__":
    main()

"""Benchmark scoring 1,000 routes of ~5 km on a generated 10,000-edge city.

Run by hand:  python bench/bench_score.py [--edges 10000 --routes 1000]

In one run: routes are seeded waypoint lists (start, end and three vias at street corners
about 5 km apart in total); routerisk joins them on the network and scores each (matching +
time-aware scoring); the baseline does the same joins with networkx.shortest_path and sums the
edge risk with pandas. Prints a table with the ratio and writes bench/results/score_<edges>.json.
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


def main() -> None:
    import networkx as nx
    import numpy as np

    from routerisk.analysis import scoring
    from routerisk.io.routes import PlannedRoute
    from routerisk.network.folder import build_network
    from routerisk.testing.synthetic import write_city

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=10000)
    ap.add_argument("--routes", type=int, default=1000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        pbf = Path(tmp) / "city.osm.pbf"
        write_city(pbf, edges=args.edges, seed=1)
        net = build_network(pbf)
    G = net.graph
    rng = np.random.default_rng(2)
    nodes = np.array(sorted(G.nodes))
    xy = np.array([[G.nodes[n]["x"], G.nodes[n]["y"]] for n in nodes])
    routes, node_lists = [], []
    while len(routes) < args.routes:
        pick = [int(rng.integers(len(nodes)))]
        for _ in range(4):  # legs of ~1.2 km
            d = np.hypot(*(xy - xy[pick[-1]]).T)
            near = np.flatnonzero((d > 900) & (d < 1500))
            if len(near) == 0:
                break
            pick.append(int(rng.choice(near)))
        if len(pick) < 5:
            continue
        ll = np.array([[G.nodes[nodes[i]]["lon"], G.nodes[nodes[i]]["lat"]] for i in pick])
        routes.append(PlannedRoute(f"r{len(routes)}", ll))
        node_lists.append([nodes[i] for i in pick])
    depart = dt.datetime(2027, 3, 9, 8, 0, tzinfo=net.timezone)
    t0 = time.perf_counter()
    scores = scoring.score_routes(net, routes, [depart])
    t_ours = time.perf_counter() - t0
    t0 = time.perf_counter()
    from routerisk.analysis.scoring import edge_risk_parts, minute_of_week

    m = minute_of_week(depart)
    for nl in node_lists:
        keys = []
        for a, b in zip(nl[:-1], nl[1:], strict=True):
            p = nx.shortest_path(G, a, b, weight="travel_time")
            keys += [
                (u, v, min(G[u][v], key=lambda k: G[u][v][k]["travel_time"]))
                for u, v in zip(p[:-1], p[1:], strict=True)
            ]
        edge_risk_parts(net.edges.loc[keys], net.profile, m)["total"].sum()
    t_base = time.perf_counter() - t0
    km = float(np.mean([s.length_km for s in scores]))
    res = {
        "edges": len(net.edges),
        "routes": len(scores),
        "mean_km": km,
        "seconds_routerisk": t_ours,
        "seconds_networkx_baseline": t_base,
        "ratio": t_ours / t_base,
    }
    print(f"{'stage':40s} {'seconds':>8s}")
    print(f"{'routerisk join + score':40s} {t_ours:8.2f}")
    print(f"{'networkx paths + pandas (baseline)':40s} {t_base:8.2f}")
    print(
        f"{len(scores)} routes, mean {km:.1f} km, {len(net.edges)} edges, ratio "
        f"{t_ours / t_base:.2f}"
    )
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / f"score_{args.edges}.json").write_text(
        json.dumps(res, indent=2, sort_keys=True)
    )


if __name__ == "__main__":
    main()

"""Benchmark ``routerisk plan``: 40 runs, 2 vehicles, a 12-hour day at 15-minute steps.

Run by hand:  python bench/bench_plan.py [--runs 40]

Runs are seeded random start/end street corners of the sample town, each with the whole
06:00-18:00 window. Times, in one run: the network load, scoring every candidate (with
alternatives where a plan breaks a rule), and the exact solve; the baseline is scoring the same
candidates with networkx (shortest path per run + summing edge risk in Python per start).
Writes bench/results/plan_<runs>.json.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))


def main() -> None:
    import networkx as nx
    import numpy as np

    from routerisk import datasets
    from routerisk.analysis import dayplan, planning
    from routerisk.analysis.scoring import edge_risk_parts, minute_of_week
    from routerisk.network.folder import build_network

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=40)
    ap.add_argument("--seed", type=int, default=5)
    args = ap.parse_args()
    net = build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    G = net.graph
    rng = np.random.default_rng(args.seed)
    nodes = sorted(G.nodes)
    runs = []
    pairs = []
    for i in range(args.runs):
        a, b = (nodes[j] for j in rng.choice(len(nodes), 2, replace=False))
        pairs.append((a, b))
        runs.append(
            planning.RunSpec(
                name=f"run-{i + 1:02d}",
                earliest=6 * 60,
                latest=18 * 60,
                start=(G.nodes[a]["lat"], G.nodes[a]["lon"]),
                end=(G.nodes[b]["lat"], G.nodes[b]["lon"]),
            )
        )
    date = dt.date(2027, 3, 9)
    t0 = time.perf_counter()
    plan = dayplan.plan_day(net, runs, date, vehicles=2, step_min=15)
    t_plan = time.perf_counter() - t0
    # baseline: networkx shortest path per run, edge risk summed per start with pandas
    t0 = time.perf_counter()
    tz = net.timezone
    for a, b in pairs:
        path = nx.shortest_path(G, a, b, weight="travel_time")
        keys = [
            (u, v, min(G[u][v], key=lambda k: G[u][v][k]["travel_time"]))
            for u, v in zip(path[:-1], path[1:], strict=True)
        ]
        rows = net.edges.loc[keys]
        for t in range(6 * 60, 18 * 60, 15):
            when = dt.datetime.combine(date, dt.time(0), tzinfo=tz) + dt.timedelta(minutes=t)
            edge_risk_parts(rows, net.profile, minute_of_week(when)).total.sum()
    t_base = time.perf_counter() - t0
    d = plan.to_dict()
    result = {
        "runs": args.runs,
        "vehicles": 2,
        "step_min": 15,
        "status": d["status"],
        "placed": len(d["runs"]),
        "seconds_plan": t_plan,
        "seconds_baseline_scoring_only": t_base,
        "ratio": t_plan / t_base,
    }
    print(f"{'stage':44s} {'seconds':>8s}")
    print(f"{'routerisk plan (score + alternatives + solve)':44s} {t_plan:8.2f}")
    print(f"{'baseline: networkx paths + pandas scoring':44s} {t_base:8.2f}")
    print(
        f"status {d['status']}, {len(d['runs'])} of {args.runs} runs placed, ratio "
        f"{t_plan / t_base:.2f}"
    )
    out = HERE / "results"
    out.mkdir(exist_ok=True)
    (out / f"plan_{args.runs}.json").write_text(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

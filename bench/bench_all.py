"""Benchmark every routerisk stage on generated cities, each against a baseline, in one run.

Run by hand (not part of the tests)::

    python bench/bench_all.py                      # 10k and 100k edges
    python bench/bench_all.py --sizes 1000000      # 1M (minutes; about 3 GiB)

For each size a seeded invented city (routerisk.testing.synthetic.write_city) is written as PBF and
XML, then every stage runs in a fresh interpreter, so its wall time and peak memory are its own
(``VmHWM`` of ``/proc/self/status``: the high-water mark of this process's own memory; Linux's
``ru_maxrss`` would carry over the parent's size at the fork before the exec):

=====================  ===========================================================  ==========================================
stage                  routerisk                                                    baseline in the same run
=====================  ===========================================================  ==========================================
load                   read_osm + the array graph build (loader.frames_from_raw)    osmnx.graph_from_xml(XML), simplify=True
build                  build_network + save_network (load, sources, tag, save)      osmnx.graph_from_xml(XML) (bare load)
tag                    tagging.tag_edges                                            geopandas buffer of the sources by radius
                                                                                    + sjoin with the edges (flags only)
load_network           network.load_network (graph stays lazy)                      -
graph                  Network.graph (the networkx graph, on first use)             osmnx.convert.graph_from_gdfs
paths                  100 two-point routes joined, matching.join_waypoints         networkx.shortest_path, same pairs
                       (snapping + bounded csgraph Dijkstra; index built untimed)
score                  1,000 routes of about 5 km, scoring.Scorer.score             -
suggest                20 routes, alternatives.Suggester.suggest (per route)        -
suggest_long           the same for 20 routes of about 15 km (a wider search)       -
review                 review.review_areas on a quarter of the city                 -
tag_dask               partition.tag_partitioned on a local cluster (2 workers)     tagging.tag_edges
=====================  ===========================================================  ==========================================

Seconds are the timed work inside the child (imports excluded) except for ``load``,
``build`` and their osmnx baseline, which count the whole child from the interpreter's start
(imports included, about 2-3 s here), as a user running ``routerisk build`` would wait. It prints a table, writes
``bench/results/all_<edges>.json`` and the markdown table of every result file into
``bench/RESULTS.md`` between the ``bench_all`` markers.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
RESULTS = HERE / "results"
MARK_BEGIN = "<!-- bench_all:begin -->"
MARK_END = "<!-- bench_all:end -->"
DEPART = "2027-03-09T08:05"
ROUTE_KM = 5.0
LONG_ROUTE_KM = 15.0

# --------------------------------------------------------------------------------- children


def peak_mib() -> float:
    """Return this process's peak resident memory in MiB (VmHWM; ru_maxrss elsewhere)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _net(folder: str) -> Any:
    from routerisk.network.folder import load_network

    return load_network(folder)


def child_osmnx_load(a: dict[str, Any]) -> dict[str, Any]:
    import osmnx as ox

    G = ox.graph_from_xml(a["xml"], simplify=True, retain_all=False)
    return {"edges": G.number_of_edges(), "nodes": G.number_of_nodes()}


def child_load(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk.network import loader
    from routerisk.network.osm import read_osm

    t = time.perf_counter()
    raw = read_osm(a["pbf"])
    t_read = time.perf_counter() - t
    fr = loader.frames_from_raw(raw)
    return {"edges": len(fr.edges), "nodes": len(fr.nodes), "read_osm_s": t_read}


def child_graph_from_file(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk.network import loader

    G = loader.graph_from_file(a["pbf"])
    return {"edges": G.number_of_edges()}


def child_build(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk.network.folder import build_network, save_network

    net = build_network(a["pbf"])
    save_network(net, a["net"], force=True)
    return {"edges": len(net.edges)}


def _tag_inputs(a: dict[str, Any]) -> tuple[Any, ...]:
    from routerisk.network.folder import EDGE_KEEP

    net = _net(a["net"])
    base = net.edges[[c for c in net.edges.columns if c in EDGE_KEEP]]
    return net, base


def child_tag(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk.network import tagging

    net, base = _tag_inputs(a)
    t = time.perf_counter()
    out = tagging.tag_edges(base, net.sources, net.crossings, net.profile)
    secs = time.perf_counter() - t
    return {
        "edges": len(out),
        "timed": secs,
        "edges_in_influence": {
            c.name: int((out[f"infl_{c.name}"] > 0).sum()) for c in net.profile.categories
        },
    }


def child_tag_sjoin(a: dict[str, Any]) -> dict[str, Any]:
    import geopandas as gpd

    net, base = _tag_inputs(a)
    edges = base[["geometry"]].reset_index(drop=True)
    t = time.perf_counter()
    hits = {}
    for c in net.profile.categories:
        src = net.sources[net.sources["category"] == c.name]
        if len(src) == 0:
            hits[c.name] = 0
            continue
        buf = gpd.GeoDataFrame(geometry=src.geometry.buffer(c.radius_m), crs=src.crs)
        j = gpd.sjoin(edges, buf, predicate="intersects", how="inner")
        hits[c.name] = int(j.index.nunique())
    secs = time.perf_counter() - t
    return {"edges": len(edges), "timed": secs, "edges_within_radius": hits}


def child_tag_dask(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk import parallel as partition
    from routerisk.network import tagging

    net, base = _tag_inputs(a)
    with partition.cluster(workers=2) as client:
        t = time.perf_counter()
        out = partition.tag_partitioned(
            base, net.sources, net.crossings, net.profile, client=client
        )
        secs = time.perf_counter() - t
        workers = client.run(peak_mib)
    # the peak of the partitioned run itself, before the single-machine check below
    peak = peak_mib()
    single = tagging.tag_edges(base, net.sources, net.crossings, net.profile)
    cols = [
        c for c in single.columns if c.startswith(("exp_", "infl_", "rule_")) or c == "crossings"
    ]
    same = all(
        __import__("numpy").array_equal(single[c].to_numpy(), out[c].to_numpy()) for c in cols
    )
    return {
        "edges": len(out),
        "timed": secs,
        "tiles": partition.last_tile_count(),
        "identical_to_single_machine": bool(same),
        "peak_mib": peak,
        "worker_peak_mib": [v for _, v in sorted(workers.items())],
    }


def child_load_network(a: dict[str, Any]) -> dict[str, Any]:
    t = time.perf_counter()
    from routerisk.network.folder import load_network

    t_imp = time.perf_counter() - t
    t = time.perf_counter()
    net = load_network(a["net"])
    return {"edges": len(net.edges), "timed": time.perf_counter() - t, "import_s": t_imp}


def child_graph(a: dict[str, Any]) -> dict[str, Any]:
    net = _net(a["net"])
    t = time.perf_counter()
    G = net.graph
    return {"edges": G.number_of_edges(), "timed": time.perf_counter() - t}


def child_graph_osmnx(a: dict[str, Any]) -> dict[str, Any]:
    import osmnx as ox

    net = _net(a["net"])
    t = time.perf_counter()
    G = ox.convert.graph_from_gdfs(
        net.nodes, net.edges, graph_attrs={"crs": net.edges.crs.to_string()}
    )
    return {"edges": G.number_of_edges(), "timed": time.perf_counter() - t}


def child_routes(a: dict[str, Any]) -> dict[str, Any]:
    """Pick ``routes`` routes of about ``route_km``: shortest-length paths between node pairs."""
    import numpy as np
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import dijkstra

    net = _net(a["net"])
    e = net.edges
    u = e.index.get_level_values(0).to_numpy()
    v = e.index.get_level_values(1).to_numpy()
    k = e.index.get_level_values(2).to_numpy()
    ids = np.unique(np.concatenate([u, v]))
    s, d = np.searchsorted(ids, u), np.searchsorted(ids, v)
    w = e["length"].to_numpy(dtype=float)
    order = np.lexsort((w, d, s))
    first = np.ones(len(order), dtype=bool)
    first[1:] = (s[order][1:] != s[order][:-1]) | (d[order][1:] != d[order][:-1])
    keep = order[first]
    mat = csr_matrix((np.maximum(w[keep], 1e-9), (s[keep], d[keep])), shape=(len(ids),) * 2)
    row = {(int(a_), int(b_)): int(r) for a_, b_, r in zip(s[keep], d[keep], keep, strict=True)}
    rng = np.random.default_rng(7)
    routes: list[dict[str, Any]] = []
    want = int(a["routes"])
    route_m = float(a.get("route_km", ROUTE_KM)) * 1000
    tries = 0
    while len(routes) < want and tries < 400:
        tries += 1
        o = int(rng.integers(len(ids)))
        dist, pred = dijkstra(mat, indices=o, return_predecessors=True)
        near = np.flatnonzero((dist > 0.9 * route_m) & (dist < 1.1 * route_m))
        if len(near) == 0:
            continue
        for t_ in rng.choice(near, size=min(25, len(near)), replace=False).tolist():
            path = [t_]
            while path[-1] != o:
                path.append(int(pred[path[-1]]))
            path.reverse()
            rows = [row[(p, q)] for p, q in zip(path[:-1], path[1:], strict=True)]
            routes.append(
                {
                    "origin": int(ids[o]),
                    "target": int(ids[t_]),
                    "edges": [[int(u[r]), int(v[r]), int(k[r])] for r in rows],
                }
            )
            if len(routes) == want:
                break
    Path(a["routes_file"]).write_text(json.dumps(routes))
    km = [
        sum(
            float(w[row[(int(np.searchsorted(ids, x[0])), int(np.searchsorted(ids, x[1])))]])
            for x in r["edges"]
        )
        / 1000
        for r in routes[:50]
    ]
    return {"routes": len(routes), "mean_km_first50": float(np.mean(km)) if km else None}


def child_routes_long(a: dict[str, Any]) -> dict[str, Any]:
    """Pick the long routes for ``suggest_long`` (about three times the usual length)."""
    return child_routes(
        {
            **a,
            "routes": a["suggest"],
            "route_km": LONG_ROUTE_KM,
            "routes_file": a["long_routes_file"],
        }
    )


def _routes(a: dict[str, Any]) -> list[dict[str, Any]]:
    return json.loads(Path(a["routes_file"]).read_text())


def child_score(a: dict[str, Any]) -> dict[str, Any]:
    from routerisk.analysis.scoring import Scorer, parse_depart

    net = _net(a["net"])
    routes = _routes(a)
    t = time.perf_counter()
    sc = Scorer(net)
    t_init = time.perf_counter() - t
    depart = parse_depart(DEPART, net.timezone)
    t = time.perf_counter()
    total = 0.0
    for i, r in enumerate(routes):
        total += sc.score(f"r{i}", [tuple(x) for x in r["edges"]], depart).risk
    t_score = time.perf_counter() - t
    return {
        "routes": len(routes),
        "timed": t_init + t_score,
        "scorer_init_s": t_init,
        "score_s": t_score,
        "per_route_ms": 1000 * t_score / max(len(routes), 1),
        "risk_sum": total,
    }


def child_suggest(a: dict[str, Any]) -> dict[str, Any]:
    import numpy as np

    from routerisk.analysis.alternatives import Suggester
    from routerisk.analysis.scoring import Scorer, parse_depart

    net = _net(a["net"])
    routes = _routes(a)[: int(a["suggest"])]
    t = time.perf_counter()
    sug = Suggester(Scorer(net))
    t_init = time.perf_counter() - t
    depart = parse_depart(DEPART, net.timezone)
    per = []
    found = 0
    for i, r in enumerate(routes):
        t = time.perf_counter()
        s = sug.suggest(f"r{i}", [tuple(x) for x in r["edges"]], depart)
        per.append(time.perf_counter() - t)
        found += len(s.alternatives)
    if not per:
        raise SystemExit("no route of the wanted length in this city")
    return {
        "routes": len(routes),
        "timed": t_init + sum(per),
        "init_s": t_init,
        "per_route_mean_s": float(np.mean(per)),
        "per_route_max_s": float(np.max(per)),
        "alternatives": found,
    }


def child_suggest_long(a: dict[str, Any]) -> dict[str, Any]:
    """Suggest for the long routes (about 15 km), where the searched ellipse is widest."""
    res = child_suggest({**a, "routes_file": a["long_routes_file"]})
    long = json.loads(Path(a["long_routes_file"]).read_text())
    res["route_km_target"] = LONG_ROUTE_KM
    res["routes_found"] = len(long)
    return res


def _pairs_lonlat(net: Any, pairs: list[tuple[int, int]]) -> list[Any]:
    """Return each pair's two node positions as (lon, lat) arrays."""
    import numpy as np
    import pyproj

    to_wgs = pyproj.Transformer.from_crs(net.crs, "EPSG:4326", always_xy=True)
    nodes = net.nodes
    out = []
    for o, d in pairs:
        x = np.array([nodes.at[o, "x"], nodes.at[d, "x"]], dtype=float)
        y = np.array([nodes.at[o, "y"], nodes.at[d, "y"]], dtype=float)
        lon, lat = to_wgs.transform(x, y)
        out.append(np.column_stack([lon, lat]))
    return out


def child_paths(a: dict[str, Any]) -> dict[str, Any]:
    """Join each pair as a two-point route: the fastest-path join every command uses."""
    from routerisk.io.routes import PlannedRoute
    from routerisk.matching import RoadIndex, join_waypoints

    net = _net(a["net"])
    pairs = [(r["origin"], r["target"]) for r in _routes(a)[: int(a["pairs"])]]
    t = time.perf_counter()
    idx = RoadIndex(net.graph)
    t_index = time.perf_counter() - t
    routes = [PlannedRoute(f"p{i}", ll) for i, ll in enumerate(_pairs_lonlat(net, pairs))]
    t = time.perf_counter()
    costs = [float(join_waypoints(idx, r).time_s) for r in routes]
    secs = time.perf_counter() - t
    Path(a["paths_file"]).write_text(json.dumps(costs))
    return {
        "pairs": len(pairs),
        "timed": secs,
        "per_pair_ms": 1000 * secs / len(pairs),
        "index_s": t_index,
    }


def child_paths_nx(a: dict[str, Any]) -> dict[str, Any]:
    import networkx as nx

    net = _net(a["net"])
    pairs = [(r["origin"], r["target"]) for r in _routes(a)[: int(a["pairs"])]]
    G = net.graph
    t = time.perf_counter()
    costs = []
    for o, d in pairs:
        path = nx.shortest_path(G, o, d, weight="travel_time")
        costs.append(
            sum(
                min(x["travel_time"] for x in G[p][q].values())
                for p, q in zip(path[:-1], path[1:], strict=True)
            )
        )
    secs = time.perf_counter() - t
    ours = json.loads(Path(a["paths_file"]).read_text())
    worst = max(abs(x - y) / max(y, 1e-9) for x, y in zip(ours, costs, strict=True))
    return {
        "pairs": len(pairs),
        "timed": secs,
        "per_pair_ms": 1000 * secs / len(pairs),
        "max_rel_cost_difference": worst,
    }


def child_review(a: dict[str, Any]) -> dict[str, Any]:
    from shapely import box

    from routerisk.analysis.review import Area, review_areas

    net = _net(a["net"])
    x0, y0, x1, y1 = net.edges.total_bounds
    cx, cy, hx, hy = (x0 + x1) / 2, (y0 + y1) / 2, (x1 - x0) / 4, (y1 - y0) / 4
    area = Area(
        "centre quarter",
        0,
        box(cx - hx, cy - hy, cx + hx, cy + hy),
        "bench",
        "features[0].geometry",
    )
    t = time.perf_counter()
    rev = review_areas(net, [area])
    secs = time.perf_counter() - t
    return {"timed": secs, "network_km": rev.areas[0]["network_km"]}


CHILDREN = {name[6:]: fn for name, fn in dict(globals()).items() if name.startswith("child_")}

# ----------------------------------------------------------------------------------- parent


def _run(stage: str, args: dict[str, Any], *, timeout: float = 3600) -> dict[str, Any]:
    """Run one stage in a fresh interpreter; return its record with wall time and peak RSS."""
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    t = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--child", stage, json.dumps(args)],
        capture_output=True,
        text=True,
        env=env,
        timeout=timeout,
        check=False,
    )
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        tail = (proc.stderr or proc.stdout).strip().splitlines()[-5:]
        return {"stage": stage, "error": " | ".join(tail), "wall_s": wall}
    rec = json.loads(proc.stdout.strip().splitlines()[-1])
    rec["wall_s"] = wall
    return rec


def _child_main(stage: str, args_json: str) -> None:
    t0 = time.perf_counter()
    res = CHILDREN[stage](json.loads(args_json))
    res["child_s"] = time.perf_counter() - t0
    res.setdefault("peak_mib", peak_mib())
    res.setdefault("timed", res["child_s"])
    print(json.dumps(res))


#: (row name, routerisk stage, baseline stage, target text, target check)
ROWS = [
    ("load (graph)", "load", "osmnx_load", "", None),
    (
        "full build (load+tag+save)",
        "build",
        "osmnx_load",
        "<= osmnx bare load; < 6 GiB at 1M",
        "build",
    ),
    ("tagging", "tag", "tag_sjoin", "", None),
    ("tagging on dask (2 workers)", "tag_dask", "tag", "identical to single machine", "dask"),
    ("load saved network", "load_network", None, "< 3 s at 100k", "load_network"),
    ("networkx graph (lazy)", "graph", "graph_osmnx", "", None),
    ("fastest-path joins (100 pairs)", "paths", "paths_nx", "", None),
    ("score 1,000 routes", "score", None, "< 5 s", "score"),
    ("suggest 20 routes", "suggest", None, "< 2 s per route at 100k", "suggest"),
    (
        "suggest 20 long routes",
        "suggest_long",
        None,
        "< 2 s per route at 100k; < 10 s at 1M",
        "suggest",
    ),
    ("area review (1/4 of the city)", "review", None, "", None),
]


def _seconds(rec: dict[str, Any] | None, stage: str) -> float | None:
    if not rec or "error" in rec:
        return None
    if stage in ("build", "load", "osmnx_load"):
        return float(rec["child_s"])  # imports included: what a user waits
    return float(rec["timed"])


def bench_size(edges: int, seed: int, *, skip: set[str], keep: Path | None) -> dict[str, Any]:
    """Run every stage for one city size; return the record."""
    tmp_ctx = tempfile.TemporaryDirectory(prefix=f"bench{edges}-")
    tmp = Path(tmp_ctx.name) if keep is None else keep
    tmp.mkdir(parents=True, exist_ok=True)
    from routerisk.testing.synthetic import write_city

    pbf, xml = tmp / "city.osm.pbf", tmp / "city.osm"
    t = time.perf_counter()
    summary = write_city(pbf, edges=edges, seed=seed)
    write_city(xml, edges=edges, seed=seed)
    gen_s = time.perf_counter() - t
    a = {
        "pbf": str(pbf),
        "xml": str(xml),
        "net": str(tmp / "net"),
        "routes": 1000,
        "suggest": 20,
        "pairs": 100,
        "routes_file": str(tmp / "routes.json"),
        "paths_file": str(tmp / "paths.json"),
        "long_routes_file": str(tmp / "long_routes.json"),
    }
    stages: dict[str, Any] = {}
    order = [
        "build",
        "load",
        "osmnx_load",
        "tag",
        "tag_sjoin",
        "tag_dask",
        "load_network",
        "graph",
        "graph_osmnx",
        "routes",
        "paths",
        "paths_nx",
        "score",
        "suggest",
        "routes_long",
        "suggest_long",
        "review",
    ]
    for st in order:
        if st in skip:
            continue
        print(f"  {edges:>8d} {st} ...", flush=True)
        stages[st] = _run(st, a)
        if "error" in stages[st]:
            print(f"    error: {stages[st]['error']}", flush=True)
    if keep is None:
        tmp_ctx.cleanup()
    return {
        "edges_requested": edges,
        "drive_edges": summary["drive_edges"],
        "seed": seed,
        "generate_s": gen_s,
        "osm_bytes": summary["bytes"],
        "python": platform.python_version(),
        "machine": platform.machine(),
        "cpus": os.cpu_count(),
        "stages": stages,
    }


def _table(records: list[dict[str, Any]]) -> list[dict[str, Any]]:
    rows = []
    for rec in records:
        st = rec["stages"]
        for name, ours, base, target, _ in ROWS:
            r = st.get(ours)
            s = _seconds(r, ours)
            if s is None and not r:
                continue
            b = st.get(base) if base else None
            bs = _seconds(b, base) if base else None
            extra = ""
            if ours == "suggest_long" and r and "error" not in r:
                extra = (
                    f"{r['routes']} routes of ~{r['route_km_target']:g} km: mean "
                    f"{r['per_route_mean_s']:.2f} s, max {r['per_route_max_s']:.2f} s"
                )
            elif ours == "suggest" and r and "error" not in r:
                extra = f"mean {r['per_route_mean_s']:.2f} s, max {r['per_route_max_s']:.2f} s"
            elif ours == "score" and r and "error" not in r:
                extra = f"{r['per_route_ms']:.2f} ms per route"
            elif ours == "paths" and r and "error" not in r:
                extra = f"{r['per_pair_ms']:.1f} ms per pair"
            elif ours == "tag_dask" and r and "error" not in r:
                extra = (
                    f"{r['tiles']} tiles, identical: "
                    f"{'yes' if r['identical_to_single_machine'] else 'NO'}"
                )
                if r.get("worker_peak_mib"):
                    extra += "; workers' peak MiB " + " / ".join(
                        f"{w:.0f}" for w in r["worker_peak_mib"]
                    )
            elif ours == "load_network" and r and "error" not in r:
                extra = f"+ {r['import_s']:.2f} s imports"
            elif ours == "load" and r and "error" not in r:
                extra = f"read_osm {r['read_osm_s']:.2f} s"
            rows.append(
                {
                    "edges": rec["drive_edges"],
                    "stage": name,
                    "seconds": s,
                    "peak_mib": r.get("peak_mib") if r else None,
                    "error": r.get("error") if r else None,
                    "baseline": base or "",
                    "baseline_s": bs,
                    "baseline_peak_mib": b.get("peak_mib") if b and "error" not in b else None,
                    "ratio": (s / bs) if (s is not None and bs) else None,
                    "target": target,
                    "note": extra,
                }
            )
    return rows


BASELINE_NAMES = {
    "osmnx_load": "osmnx graph_from_xml",
    "tag_sjoin": "buffer + sjoin",
    "tag": "single-machine tag_edges",
    "graph_osmnx": "osmnx graph_from_gdfs",
    "paths_nx": "networkx shortest_path",
}


def _fmt(x: float | None, nd: int = 2) -> str:
    return "-" if x is None else f"{x:.{nd}f}"


def markdown(rows: list[dict[str, Any]]) -> str:
    """Return the markdown table of the benchmark rows."""
    out = [
        "| edges | stage | seconds | peak MiB | baseline | baseline s | baseline MiB | "
        "ratio | target | note |",
        "| ---: | --- | ---: | ---: | --- | ---: | ---: | ---: | --- | --- |",
    ]
    for r in rows:
        sec = "error" if r["error"] else _fmt(r["seconds"])
        out.append(
            f"| {r['edges']:,} | {r['stage']} | {sec} | {_fmt(r['peak_mib'], 0)} | "
            f"{BASELINE_NAMES.get(r['baseline'], r['baseline']) or '-'} | "
            f"{_fmt(r['baseline_s'])} | {_fmt(r['baseline_peak_mib'], 0)} | "
            f"{_fmt(r['ratio'])} | {r['target'] or '-'} | {r['note'] or '-'} |"
        )
    return "\n".join(out)


def memory_growth(records: list[dict[str, Any]]) -> str:
    """Return a markdown table of each stage's peak memory against the edge count.

    Growth is compared with the edges: a stage grows no faster than linearly when its peak
    grows by a smaller factor than the edges between two sizes (the import floor of a fresh
    interpreter, about 200 MiB, makes small sizes look cheap).
    """
    recs = sorted((r for r in records if r.get("stages")), key=lambda r: r["drive_edges"])
    if len(recs) < 2:
        return ""
    head = " / ".join(f"{r['drive_edges']:,}" for r in recs)
    pairs = list(zip(recs[:-1], recs[1:], strict=True))
    grow = " / ".join(f"{b['drive_edges'] / a['drive_edges']:.1f}x" for a, b in pairs)
    out = [
        f"| stage | peak MiB ({head} edges) | peak growth (edges {grow}) | no faster than linear |",
        "| --- | --- | --- | --- |",
    ]
    for name, ours, *_ in ROWS:
        peaks = [r["stages"].get(ours, {}).get("peak_mib") for r in recs]
        if any(p is None for p in peaks):
            continue
        ratios = [b / a for a, b in zip(peaks[:-1], peaks[1:], strict=True)]
        edges = [b["drive_edges"] / a["drive_edges"] for a, b in pairs]
        ok = all(x <= e for x, e in zip(ratios, edges, strict=True))
        out.append(
            f"| {name} | {' / '.join(f'{p:.0f}' for p in peaks)} | "
            f"{' / '.join(f'{x:.2f}x' for x in ratios)} | {'yes' if ok else 'NO'} |"
        )
    return "\n".join(out)


def _write_results_md(table: str) -> None:
    md = HERE / "RESULTS.md"
    text = md.read_text(encoding="utf-8") if md.exists() else ""
    block = (
        f"{MARK_BEGIN}\n<!-- written by bench/bench_all.py from bench/results/all_*.json; "
        f"do not edit by hand -->\n\n{table}\n\n{MARK_END}"
    )
    if MARK_BEGIN in text and MARK_END in text:
        head, rest = text.split(MARK_BEGIN, 1)
        _, tail = rest.split(MARK_END, 1)
        text = head + block + tail
    else:
        text = text.rstrip() + "\n\n## Measured (bench/bench_all.py)\n\n" + block + "\n"
    md.write_text(text, encoding="utf-8")


def main() -> None:
    """Parse the options, run the sizes, print and record the table."""
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        _child_main(sys.argv[2], sys.argv[3])
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--sizes", default="10000,100000", help="comma-separated edge counts (default 10000,100000)"
    )
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--skip", default="", help="comma-separated stages to leave out")
    ap.add_argument("--keep", type=Path, help="keep the generated files in this folder")
    ap.add_argument(
        "--report-only",
        action="store_true",
        help="rewrite RESULTS.md from the recorded results without running",
    )
    args = ap.parse_args()
    sys.path.insert(0, str(ROOT))
    skip = {s for s in args.skip.split(",") if s}
    RESULTS.mkdir(exist_ok=True)
    sizes = [] if args.report_only else [int(s) for s in args.sizes.split(",") if s]
    for size in sizes:
        keep = args.keep / str(size) if args.keep else None
        rec = bench_size(size, args.seed, skip=skip, keep=keep)
        (RESULTS / f"all_{size}.json").write_text(
            json.dumps(rec, indent=2, sort_keys=True) + "\n", encoding="utf-8"
        )
        print(markdown(_table([rec])), flush=True)
    records = [
        json.loads(p.read_text())
        for p in sorted(RESULTS.glob("all_*.json"), key=lambda p: int(p.stem.split("_")[1]))
    ]
    growth = memory_growth(records)
    _write_results_md(
        markdown(_table(records))
        + (f"\n\nPeak memory against edges:\n\n{growth}" if growth else "")
    )


if __name__ == "__main__":
    main()

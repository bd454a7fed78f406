"""Benchmark ``routerisk build`` on a generated city against osmnx's bare XML load.

Run by hand (not part of the tests):  python bench/bench_build.py --edges 10000

Generates a seeded synthetic city (routerisk.testing.synthetic) as PBF and XML, then times in one run:
  baseline  osmnx.graph_from_xml(XML, simplify=True, retain_all=False)  (load only, no tagging)
  build     routerisk build (read PBF, drive filter, simplify, speeds, UTM, sources, tagging, save)
and prints a table with the ratio build / baseline, and writes bench/results/build_<edges>.json.
"""

from __future__ import annotations

import argparse
import json
import platform
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent


def _child(code: str) -> dict:
    """Run ``code`` in a fresh interpreter; return its JSON result with wall time and peak RSS."""
    wrapper = (
        "import json, resource, time\nt0 = time.perf_counter()\n"
        + code
        + "\nprint(json.dumps({'seconds': time.perf_counter() - t0, 'peak_mib': "
        "resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, **RESULT}))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", wrapper], check=True, capture_output=True, text=True
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=10000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--skip-baseline", action="store_true")
    args = ap.parse_args()
    sys.path.insert(0, str(HERE.parent))
    from routerisk.testing.synthetic import write_city

    with tempfile.TemporaryDirectory() as tmp:
        pbf = Path(tmp) / "city.osm.pbf"
        xml = Path(tmp) / "city.osm"
        write_city(pbf, edges=args.edges, seed=args.seed)
        write_city(xml, edges=args.edges, seed=args.seed)
        rows = {}
        if not args.skip_baseline:
            rows["osmnx graph_from_xml (baseline)"] = _child(
                "import osmnx as ox\n"
                f"G = ox.graph_from_xml({str(xml)!r}, simplify=True, retain_all=False)\n"
                "RESULT = {'edges': G.number_of_edges()}"
            )
        rows["routerisk build"] = _child(
            f"import sys; sys.path.insert(0, {str(HERE.parent)!r})\n"
            "from routerisk.network.folder import build_network, save_network\n"
            f"net = build_network({str(pbf)!r})\n"
            f"save_network(net, {str(Path(tmp) / 'net')!r})\n"
            "RESULT = {'edges': len(net.edges)}"
        )
    base = rows.get("osmnx graph_from_xml (baseline)")
    print(f"{'stage':36s} {'edges':>8s} {'seconds':>9s} {'peak MiB':>9s} {'ratio':>7s}")
    for name, r in rows.items():
        ratio = r["seconds"] / base["seconds"] if base else float("nan")
        r["ratio_to_baseline"] = ratio
        print(f"{name:36s} {r['edges']:8d} {r['seconds']:9.2f} {r['peak_mib']:9.0f} {ratio:7.2f}")
    res = HERE / "results"
    res.mkdir(exist_ok=True)
    record = {
        "edges_requested": args.edges,
        "seed": args.seed,
        "python": platform.python_version(),
        "machine": platform.machine(),
        "cpus": __import__("os").cpu_count(),
        "rows": rows,
    }
    (res / f"build_{args.edges}.json").write_text(json.dumps(record, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

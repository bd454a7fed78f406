"""Whole-process build at about a million directed edges, with each process's peak memory.

Usage::

    python bench/bench_1m.py --work DIR [--repeat 3]

Inputs (made in DIR when missing): the plain grid of 500 x 500 intersections (998,000
directed edges, bench/make_grid.py) as .osm, and the generated city of 1,001,110 drive edges
(bench/make_city.py, seed 1) as .osm and .osm.pbf. Each round runs, interleaved,
``python -m routerisk build`` on each input and a ``python -c`` process running osmnx's
``graph_from_xml`` on the same data as .osm (the city's .osm baseline serves both city
inputs: osmnx reads only XML). Wall seconds and the peak resident memory of each process
(``ru_maxrss`` from ``os.wait4``, so one child's peak, not the largest of all children) are
recorded; the medians over ``--repeat`` rounds and their ratios go to bench/results/1m.json.
The machine may be shared: only ratios within one run are comparable.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
OSMNX = "import osmnx as ox, sys; G = ox.graph_from_xml(sys.argv[1]); print(len(G.edges))"


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def run(cmd: list[str]) -> tuple[float, float]:
    """Run ``cmd``; return (wall seconds, peak resident MiB of that process)."""
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - start
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"failed ({proc.returncode}): {' '.join(cmd)}\n{err[-3000:]}")
    return wall, usage.ru_maxrss / 1024.0  # KiB on Linux


def prepare(work: Path) -> dict[str, Path]:
    work.mkdir(parents=True, exist_ok=True)
    py = sys.executable
    files = {
        "grid": work / "grid500.osm",
        "city-osm": work / "city1m.osm",
        "city-pbf": work / "city1m.osm.pbf",
    }
    if not files["grid"].exists():
        subprocess.run(
            [py, str(HERE / "make_grid.py"), "--size", "500", "--out", str(files["grid"])],
            check=True,
            env=_env(),
        )
    for key in ("city-osm", "city-pbf"):
        if not files[key].exists():
            subprocess.run(
                [
                    py,
                    str(HERE / "make_city.py"),
                    "--edges",
                    "1000000",
                    "--seed",
                    "1",
                    "--out",
                    str(files[key]),
                ],
                check=True,
                env=_env(),
                stdout=subprocess.DEVNULL,
            )
    return files


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", type=Path, required=True)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--out", type=Path, default=HERE / "results" / "1m.json")
    a = ap.parse_args()
    files = prepare(a.work)
    py = sys.executable
    jobs = {
        "build grid": [
            py,
            "-m",
            "routerisk",
            "build",
            str(files["grid"]),
            "--out",
            str(a.work / "net_grid"),
            "--force",
        ],
        "osmnx grid": [py, "-c", OSMNX, str(files["grid"])],
        "build city-osm": [
            py,
            "-m",
            "routerisk",
            "build",
            str(files["city-osm"]),
            "--out",
            str(a.work / "net_city_osm"),
            "--force",
        ],
        "build city-pbf": [
            py,
            "-m",
            "routerisk",
            "build",
            str(files["city-pbf"]),
            "--out",
            str(a.work / "net_city_pbf"),
            "--force",
        ],
        "osmnx city": [py, "-c", OSMNX, str(files["city-osm"])],
    }
    got: dict[str, list[tuple[float, float]]] = {k: [] for k in jobs}
    for r in range(a.repeat):
        for name, cmd in jobs.items():
            wall, mib = run(cmd)
            got[name].append((wall, mib))
            print(f"round {r + 1} {name}: {wall:.1f} s, peak {mib:.0f} MiB", flush=True)
    med = {
        k: {
            "wall_s": round(statistics.median(w for w, _ in v), 2),
            "peak_mib": round(max(m for _, m in v), 1),
            "runs": [[round(w, 2), round(m, 1)] for w, m in v],
        }
        for k, v in got.items()
    }
    rows = []
    for inp, base in (
        ("grid", "osmnx grid"),
        ("city-osm", "osmnx city"),
        ("city-pbf", "osmnx city"),
    ):
        ours = med[f"build {inp}"]
        rows.append(
            {
                "input": inp,
                "build_s": ours["wall_s"],
                "build_peak_mib": ours["peak_mib"],
                "osmnx_s": med[base]["wall_s"],
                "osmnx_peak_mib": med[base]["peak_mib"],
                "ratio": round(ours["wall_s"] / med[base]["wall_s"], 3),
            }
        )
    record = {
        "machine": f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}",
        "repeat": a.repeat,
        "jobs": med,
        "rows": rows,
    }
    a.out.parent.mkdir(parents=True, exist_ok=True)
    a.out.write_text(json.dumps(record, indent=2) + "\n", encoding="utf-8")
    print("| input | routerisk build, s | peak MiB | osmnx process, s | peak MiB | ratio |")
    print("| --- | --- | --- | --- | --- | --- |")
    for row in rows:
        print(
            f"| {row['input']} | {row['build_s']} | {row['build_peak_mib']:.0f} | "
            f"{row['osmnx_s']} | {row['osmnx_peak_mib']:.0f} | {row['ratio']} |"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

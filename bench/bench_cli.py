"""Time commands as users run them: whole processes, start-up and imports included.

Usage::

    python bench/bench_cli.py --repeat 3 [--work DIR]
        [--inputs grid,city-osm,city-pbf,city-copies,real]

For each input, ``routerisk build`` (as a process: ``python -m routerisk build IN --out DIR``)
is timed against a ``python -c`` process running osmnx's ``graph_from_xml`` on the same data
(given as .osm, since osmnx reads only XML), the two interleaved round by round; the median
wall and CPU (user + system, of the child) seconds of ``--repeat`` rounds are recorded, with
their ratio. Also timed: ``routerisk --help``, ``routerisk --version``, a score of one route
on the sample town (a saved network), the import of the libraries that score needs (the
floor no change inside routerisk can go under) and, with ``--baseline TREE``, the same score
and the same builds from another source tree (say, a checkout before a change), interleaved. ``--inputs ''``
times these alone. Inputs:

* ``grid``: a plain 160 x 160 street grid (bench/make_grid.py), .osm;
* ``city-osm`` / ``city-pbf``: the generated 100k-edge city (bench/make_city.py, seed 1);
* ``city-copies``: the same city with 1,000 roads copied over their own nodes
  (``make_city.py --copies 1000``), .osm: shape nodes with several ways in and out, which the
  build walks one by one as osmnx does (before issue 20 they sent it to osmnx's own pipeline);
* ``real``: the real extract pyogrio carries (``tests/fixtures/sample.osm.pbf``, ODbL
  OpenStreetMap data; osmnx gets it converted to .osm by pyosmium).

Byte-code caches are allowed (``PYTHONDONTWRITEBYTECODE`` is removed from the children's
environment) and every command runs once before the timed rounds, as on a user's machine
after the first run. Results go to bench/results/cli.json; ``--markdown`` prints the table.
The machine may be shared: only ratios within one run are comparable.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import statistics
import subprocess
import sys
import time
from importlib import resources
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
RESULTS = HERE / "results"
INPUTS = ("grid", "city-osm", "city-pbf", "city-copies", "real")
OSMNX = "import osmnx as ox, sys; G = ox.graph_from_xml(sys.argv[1]); print(len(G.edges))"


#: The libraries a score cannot do without (frames, spatial index, Dijkstra, projection).
FLOOR = "import pandas, geopandas, pyogrio, pyproj, shapely, scipy.sparse.csgraph, yaml"


def _env(root: Path = ROOT) -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    rest = [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
    env["PYTHONPATH"] = os.pathsep.join([str(root), *rest])
    return env


def _timed(cmd: list[str], cwd: Path, root: Path = ROOT) -> tuple[float, float]:
    """Run ``cmd`` with ``root`` first on PYTHONPATH; return (wall s, CPU s of the child)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    proc = subprocess.run(cmd, cwd=cwd, env=_env(root), capture_output=True, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr[-3000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def _prepare(work: Path, names: list[str]) -> dict[str, tuple[Path, Path]]:
    """Return input name -> (file routerisk reads, .osm file osmnx reads), made if missing."""
    work.mkdir(parents=True, exist_ok=True)
    py = sys.executable
    out: dict[str, tuple[Path, Path]] = {}
    if "grid" in names:
        grid = work / "grid160.osm"
        if not grid.exists():
            subprocess.run(
                [py, str(HERE / "make_grid.py"), "--size", "160", "--out", str(grid)],
                check=True,
                env=_env(),
            )
        out["grid"] = (grid, grid)
    if {"city-osm", "city-pbf"} & set(names):
        for suffix in (".osm", ".osm.pbf"):
            f = work / f"city100k{suffix}"
            if not f.exists():
                subprocess.run(
                    [
                        py,
                        str(HERE / "make_city.py"),
                        "--edges",
                        "100000",
                        "--seed",
                        "1",
                        "--out",
                        str(f),
                    ],
                    check=True,
                    env=_env(),
                    stdout=subprocess.DEVNULL,
                )
        out["city-osm"] = (work / "city100k.osm", work / "city100k.osm")
        out["city-pbf"] = (work / "city100k.osm.pbf", work / "city100k.osm")
    if "city-copies" in names:
        f = work / "city100k_copies.osm"
        if not f.exists():
            subprocess.run(
                [py, str(HERE / "make_city.py"), "--edges", "100000", "--seed", "1"]
                + ["--copies", "1000", "--out", str(f)],
                check=True,
                env=_env(),
                stdout=subprocess.DEVNULL,
            )
        out["city-copies"] = (f, f)
    if "real" in names:
        pbf = Path(str(resources.files("pyogrio") / "tests" / "fixtures" / "sample.osm.pbf"))
        xml = work / "real_sample.osm"
        if not xml.exists():
            import osmium

            with osmium.SimpleWriter(str(xml), overwrite=True) as w:
                for obj in osmium.FileProcessor(str(pbf)):
                    w.add(obj)
        out["real"] = (pbf, xml)
    return {k: out[k] for k in names}


def _median(xs: list[float]) -> float:
    return round(statistics.median(xs), 3)


def bench(
    work: Path,
    names: list[str],
    repeat: int,
    *,
    warm: bool = True,
    out: Path | None = None,
    baseline: Path | None = None,
) -> dict[str, Any]:
    """Run the interleaved rounds; return the record (also written to ``out`` each round)."""
    py = sys.executable
    files = _prepare(work, names)
    net_dir = work / "net"
    jobs: dict[str, list[str]] = {}
    for name, (ours, theirs) in files.items():
        jobs[f"build {name}"] = [
            py,
            "-m",
            "routerisk",
            "build",
            str(ours),
            "--out",
            str(net_dir / name),
            "--force",
        ]
        jobs[f"osmnx {name}"] = [py, "-c", OSMNX, str(theirs)]
    town = work / "net" / "town"
    one_route = work / "one_route.geojson"
    doc = json.loads((ROOT / "sample_area" / "routes.geojson").read_text(encoding="utf-8"))
    doc["features"] = doc["features"][:1]
    one_route.write_text(json.dumps(doc), encoding="utf-8")
    jobs["build town"] = [
        py,
        "-m",
        "routerisk",
        "build",
        str(ROOT / "sample_area" / "corvane.osm"),
        "--out",
        str(town),
        "--force",
        "--timezone",
        "Etc/GMT+3",
    ]
    jobs["score one route"] = [
        py,
        "-m",
        "routerisk",
        "score",
        str(one_route),
        "--network",
        str(town),
    ]
    jobs["--help"] = [py, "-m", "routerisk", "--help"]
    jobs["--version"] = [py, "-m", "routerisk", "--version"]
    jobs["import floor"] = [py, "-c", FLOOR]
    roots = {k: ROOT for k in jobs}
    light = ["score one route", "import floor", "--help", "--version"]
    if baseline is not None:  # the same commands from another tree (say, before a change)
        jobs["score one route, baseline"] = jobs["score one route"]
        roots["score one route, baseline"] = baseline
        light.insert(1, "score one route, baseline")
        for name in files:
            key = f"build {name}, baseline"
            jobs[key] = jobs[f"build {name}"][:-2] + [str(net_dir / f"{name}-baseline"), "--force"]
            roots[key] = baseline
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in jobs}
    for key, cmd in jobs.items():  # warm-up: byte-code caches, the town network
        if warm or not key.startswith(("build ", "osmnx ")) or key == "build town":
            _timed(cmd, work, roots[key])
            print(f"warm: {key}", file=sys.stderr, flush=True)
    del times["build town"]  # only made the network that score reads
    rec: dict[str, Any] = {}
    for r in range(repeat):
        for name in files:  # interleaved: ours, then theirs, then the other order
            pair = [f"build {name}", f"osmnx {name}"]
            if f"build {name}, baseline" in jobs:
                pair.append(f"build {name}, baseline")
            for key in pair if r % 2 == 0 else pair[::-1]:
                times[key].append(_timed(jobs[key], work, roots[key]))
        for key in light if r % 2 == 0 else light[::-1]:
            times[key].append(_timed(jobs[key], work, roots[key]))
        print(f"round {r + 1} of {repeat} done", file=sys.stderr, flush=True)
        rec = _record(times, list(files), r + 1)
        if out is not None:  # after every round, so a stopped run keeps what it measured
            out.write_text(json.dumps(rec, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    shutil.rmtree(net_dir, ignore_errors=True)
    return rec


def _record(
    times: dict[str, list[tuple[float, float]]], names: list[str], rounds: int
) -> dict[str, Any]:
    rec: dict[str, Any] = {
        "machine": {
            "cpus": os.cpu_count(),
            "python": platform.python_version(),
            "platform": platform.platform(),
            "load_average_at_end": [round(x, 2) for x in os.getloadavg()],
        },
        "repeat": rounds,
        "median_wall_s": {k: _median([w for w, _ in v]) for k, v in times.items()},
        "median_cpu_s": {k: _median([c for _, c in v]) for k, v in times.items()},
        "runs": {k: [[round(w, 3), round(c, 3)] for w, c in v] for k, v in times.items()},
    }
    rec["ratios"] = {
        name: {
            "wall": round(
                rec["median_wall_s"][f"build {name}"] / rec["median_wall_s"][f"osmnx {name}"], 3
            ),
            "cpu": round(
                rec["median_cpu_s"][f"build {name}"] / rec["median_cpu_s"][f"osmnx {name}"], 3
            ),
        }
        for name in names
    }
    return rec


def markdown(rec: dict[str, Any]) -> str:
    """Return the table of one run."""
    label = {
        "grid": "plain street grid 160 x 160, .osm",
        "city-osm": "generated city 100k, .osm",
        "city-pbf": "generated city 100k, .osm.pbf (osmnx: the same data as .osm)",
        "city-copies": "generated city 100k with 1,000 copied roads, .osm",
        "real": "real extract (pyogrio sample.osm.pbf, ODbL; osmnx: as .osm)",
    }
    w, c = rec["median_wall_s"], rec["median_cpu_s"]
    rows = [
        "| input | routerisk build, s (wall / CPU) | osmnx process, s (wall / CPU) | "
        "ratio wall | ratio CPU |",
        "| --- | ---: | ---: | ---: | ---: |",
    ]
    for name in [n for n in INPUTS if n in rec["ratios"]]:
        r = rec["ratios"][name]
        rows.append(
            f"| {label[name]} | {w[f'build {name}']:.2f} / {c[f'build {name}']:.2f} | "
            f"{w[f'osmnx {name}']:.2f} / {c[f'osmnx {name}']:.2f} | {r['wall']:.2f} | "
            f"{r['cpu']:.2f} |"
        )
    if any(f"build {n}, baseline" in w for n in rec["ratios"]):
        rows += [
            "",
            "| input | routerisk build, s (wall / CPU) | the same build, baseline tree "
            "(--baseline) | ratio wall | ratio CPU |",
            "| --- | ---: | ---: | ---: | ---: |",
        ]
        for name in [n for n in INPUTS if f"build {n}, baseline" in w]:
            ours, base = f"build {name}", f"build {name}, baseline"
            rows.append(
                f"| {label[name]} | {w[ours]:.2f} / {c[ours]:.2f} | "
                f"{w[base]:.2f} / {c[base]:.2f} | {w[ours] / w[base]:.2f} | "
                f"{c[ours] / c[base]:.2f} |"
            )
    rows += ["", "| command (whole process) | wall, s | CPU, s |", "| --- | ---: | ---: |"]
    label = {
        "score one route": "score of one route, sample town",
        "score one route, baseline": "the same score, baseline tree (--baseline)",
        "import floor": f'`python -c "{FLOOR}"` (the libraries score needs)',
    }
    for key in ("--help", "--version", "score one route", "score one route, baseline"):
        if key in w:
            rows.append(f"| {label.get(key, f'routerisk {key}')} | {w[key]:.2f} | {c[key]:.2f} |")
    if "import floor" in w:
        key = "import floor"
        rows.append(f"| {label[key]} | {w[key]:.2f} | {c[key]:.2f} |")
    return "\n".join(rows)


def main() -> None:
    """Parse the options, run, record and print."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3, help="timed rounds (default 3)")
    ap.add_argument(
        "--work",
        type=Path,
        default=Path("bench_cli_work"),
        help="folder for the generated inputs (kept for the next run)",
    )
    ap.add_argument("--inputs", default=",".join(INPUTS), help="comma-separated inputs")
    ap.add_argument("--markdown", action="store_true", help="print the recorded table only")
    ap.add_argument(
        "--baseline",
        type=Path,
        metavar="TREE",
        help="also time the score and the builds with this source tree first on PYTHONPATH, "
        "interleaved",
    )
    ap.add_argument(
        "--no-warm-builds",
        action="store_true",
        help="skip the untimed first run of the builds (caches already warm)",
    )
    args = ap.parse_args()
    names = [n for n in args.inputs.split(",") if n]
    # the commands alone (``--inputs ''``) go to their own record, keeping the builds' one
    out = RESULTS / ("cli.json" if names else "cli_commands.json")
    if not args.markdown:
        bad = sorted(set(names) - set(INPUTS))
        if bad:
            raise SystemExit(f"unknown inputs {bad}; known: {', '.join(INPUTS)}")
        RESULTS.mkdir(exist_ok=True)
        bench(
            args.work.resolve(),
            names,
            args.repeat,
            warm=not args.no_warm_builds,
            out=out,
            baseline=args.baseline.resolve() if args.baseline else None,
        )
    print(markdown(json.loads(out.read_text(encoding="utf-8"))))


if __name__ == "__main__":
    main()

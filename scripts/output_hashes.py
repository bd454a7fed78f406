"""Run every command on the sample town and list a SHA-256 of each output and each stdout.

Used to prove that a change of layout changed no output: run it before and after at the same
folder and compare the two lists (``diff``). Outputs that name the folder they were written to
are compared as written, so both runs must use the same ``--work`` path.

    python scripts/output_hashes.py --work /tmp/rr_hashes > before.txt
    ... change ...
    python scripts/output_hashes.py --work /tmp/rr_hashes > after.txt
    diff before.txt after.txt

The GeoPackage is listed by its layers' rows (read back with pyogrio), not its bytes: its
driver stamps each layer with the time of writing.
"""

from __future__ import annotations

import argparse
import hashlib
import shutil
import subprocess
import sys
from pathlib import Path

SAMPLE = Path(__file__).resolve().parents[1] / "sample_area"
DEPART = "2027-03-09T07:30"


def _commands(w: Path) -> list[tuple[str, list[str]]]:
    net = str(w / "net")
    s = str(SAMPLE)
    return [
        ("build", ["build", f"{s}/corvane.osm", "--out", net, "--json"]),
        (
            "score",
            [
                "score",
                f"{s}/routes.geojson",
                "--network",
                net,
                "--depart",
                DEPART,
                "--out",
                str(w / "score"),
                "--json",
            ],
        ),
        ("score-text", ["score", f"{s}/routes.geojson", "--network", net, "--depart", DEPART]),
        (
            "suggest",
            [
                "suggest",
                f"{s}/routes.geojson",
                "--network",
                net,
                "--depart",
                DEPART,
                "--map",
                str(w / "suggest.html"),
                "--json",
            ],
        ),
        ("suggest-text", ["suggest", f"{s}/routes.geojson", "--network", net, "--depart", DEPART]),
        (
            "review",
            [
                "review",
                f"{s}/area.geojson",
                "--network",
                net,
                "--report",
                str(w / "review.html"),
                "--out",
                str(w / "review"),
                "--json",
            ],
        ),
        (
            "plan",
            [
                "plan",
                f"{s}/runs.yaml",
                "--network",
                net,
                "--date",
                "2027-03-09",
                "--out",
                str(w / "plan"),
                "--json",
            ],
        ),
        (
            "evidence",
            [
                "evidence",
                "--benchmark",
                "1",
                "--per",
                "1000000",
                "--chart",
                str(w / "evidence.png"),
                "--json",
            ],
        ),
        (
            "evidence-drives",
            [
                "evidence",
                "--benchmark",
                "1",
                "--per",
                "1000000",
                "--drives",
                f"{s}/drives",
                "--network",
                net,
            ],
        ),
        (
            "watch",
            [
                "watch",
                f"{s}/events.csv",
                "--drives",
                f"{s}/drives",
                "--network",
                net,
                "--out",
                str(w / "watch"),
                "--json",
            ],
        ),
        (
            "calibrate",
            [
                "calibrate",
                f"{s}/counts.csv",
                "--network",
                net,
                "--out",
                str(w / "fitted.yaml"),
                "--report",
                str(w / "calibrate.html"),
                "--json",
            ],
        ),
        (
            "score-draws",
            [
                "score",
                f"{s}/routes.geojson",
                "--network",
                net,
                "--depart",
                DEPART,
                "--profile",
                str(w / "fitted.yaml"),
                "--uncertainty",
                "200",
                "--seed",
                "3",
                "--out",
                str(w / "score_u"),
            ],
        ),
        ("demo", ["demo", "--out", str(w / "demo")]),
    ]


def _gpkg_rows(path: Path) -> str:
    import pyogrio

    h = hashlib.sha256()
    for name, _ in pyogrio.list_layers(path):
        df = pyogrio.read_dataframe(path, layer=name)
        h.update(name.encode())
        h.update(df.to_csv(index=False).encode())
    return h.hexdigest()


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--work", type=Path, required=True, help="folder for the outputs (emptied)")
    p.add_argument(
        "--only",
        default="",
        help="comma-separated labels to run (build always runs; score-draws needs calibrate)",
    )
    a = p.parse_args()
    only = {x for x in a.only.split(",") if x}
    w = a.work
    shutil.rmtree(w, ignore_errors=True)
    w.mkdir(parents=True)
    for label, argv in _commands(w):
        if only and label != "build" and label not in only:
            continue
        r = subprocess.run(
            [sys.executable, "-m", "routerisk", *argv], capture_output=True, check=False
        )
        print(f"{label}: exit {r.returncode} stdout {hashlib.sha256(r.stdout).hexdigest()[:16]}")
        if r.returncode != 0:
            print(r.stderr.decode(errors="replace").strip().splitlines()[-1:], file=sys.stderr)
    for f in sorted(p for p in w.rglob("*") if p.is_file()):
        rel = f.relative_to(w).as_posix()
        if f.suffix == ".gpkg":
            digest = "rows " + _gpkg_rows(f)[:16]
        elif f.name == "meta.json":
            digest = "skipped (records the GeoPackage's write time)"
        else:
            digest = hashlib.sha256(f.read_bytes()).hexdigest()[:16]
        print(f"{rel}: {digest}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

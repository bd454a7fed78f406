"""Reproducibility: the same inputs, profile and options give the same bytes, and say so.

``routerisk demo --out`` runs twice in-process, each into its own folder, and every file is
compared byte for byte (the demo writes JSON, CSV, GeoJSON, HTML, YAML, text and PNG). No
output needs a timestamp, so no line is stripped. Every output also records the tool
version, the profile fingerprint and the checksums of its inputs. Two known defects of
modules this file may not change are pinned as strict expected failures: the GeoPackage's
own write timestamps, and merged-edge attributes that follow Python's string hash order
(which differs between processes).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from routerisk import __version__, datasets
from routerisk.cli import main
from routerisk.io.atomic import file_record

ROOT = Path(__file__).resolve().parents[1]
#: Written from the GeoPackage, whose driver stamps each layer with the time of writing.
GPKG_STAMPED = {"network/network.gpkg", "network/meta.json"}


def _files(d: Path) -> dict[str, bytes]:
    return {
        p.relative_to(d).as_posix(): p.read_bytes() for p in sorted(d.rglob("*")) if p.is_file()
    }


@pytest.fixture(scope="module")
def two_demos(tmp_path_factory) -> tuple[Path, Path]:
    a = tmp_path_factory.mktemp("demo_a") / "out"
    b = tmp_path_factory.mktemp("demo_b") / "out"
    for d in (a, b):
        assert main(["demo", "--out", str(d)]) == 0
    return a, b


def test_demo_twice_gives_identical_bytes(two_demos, capsys):
    capsys.readouterr()
    a, b = (_files(d) for d in two_demos)
    assert sorted(a) == sorted(b)
    kinds = {Path(n).suffix for n in a}
    assert {".json", ".csv", ".geojson", ".html", ".png"} <= kinds
    differ = sorted(n for n in a if a[n] != b[n] and n not in GPKG_STAMPED)
    assert not differ, f"files that differ between two identical runs: {differ}"


def test_network_folder_is_byte_identical_too(two_demos):
    a, b = (_files(d) for d in two_demos)
    differ = sorted(n for n in GPKG_STAMPED if a[n] != b[n])
    assert not differ, differ


def _records_version(text: str) -> bool:
    return f"routerisk {__version__}" in text or (
        "routerisk_version" in text and __version__ in text
    )


#: Inputs whose checksum each demo output records besides the network source (sample town).
EXTRA_INPUTS = {
    "scores/routes.csv": ("routes",),
    "scores/segments.geojson": ("routes",),
    "scores/map.html": ("routes",),
    "alternatives_map.html": ("routes",),
    "review/areas.json": ("area",),
    "review/report.html": ("area",),
    "review/areas.csv": ("area",),
    "warnings/overlay.yaml": ("events", "drives"),
    "warnings/segments.csv": ("events", "drives"),
    "warnings/map.html": ("events", "drives"),
    "warnings/charts.csv": ("events", "drives"),
    "warnings/report.html": ("events", "drives"),
    "evidence.txt": ("drives",),
    "evidence_chart.png": ("drives",),
    "summary.json": ("routes", "area", "events", "drives", "counts"),
    "calibration/profile.yaml": ("counts",),
    "calibration/report.html": ("counts",),
    "calibration/uncertainty.json": ("counts", "routes"),
}


def _missing_provenance(d: Path, names: list[str]) -> dict[str, list[str]]:
    meta = json.loads((d / "network" / "meta.json").read_text())
    need_all = {
        "version": None,
        "profile": meta["profile"],
        "network source": meta["source_sha256"],
    }
    out = {}
    for name in names:
        text = (d / name).read_bytes().decode("utf-8", errors="replace")
        missing = [
            k
            for k, v in need_all.items()
            if not (_records_version(text) if v is None else v in text)
        ]
        for role in EXTRA_INPUTS.get(name, ()):
            if file_record(datasets.get_path(role))["sha256"] not in text:
                missing.append(role)
        if missing:
            out[name] = missing
    return out


def _outputs(d: Path, *, day_plan: bool) -> list[str]:
    names = [n for n in _files(d) if not n.startswith("network/") or n == "network/meta.json"]
    return [n for n in names if n.startswith("day_plan/") == day_plan]


def test_every_demo_output_records_version_profile_and_inputs(two_demos):
    d = two_demos[0]
    names = _outputs(d, day_plan=False)
    assert len(names) >= 15
    missing = _missing_provenance(d, names)
    assert not missing, missing


def test_day_plan_outputs_record_provenance(two_demos):
    d = two_demos[0]
    missing = _missing_provenance(d, _outputs(d, day_plan=True))
    assert not missing, missing


# Two two-way ways that simplification merges into one edge with two names, two sidewalk
# values and two speed limits (invented, CC0).
MERGE_OSM = """<?xml version="1.0" encoding="UTF-8"?>
<osm version="0.6" generator="routerisk-tests">
<node id="1" lat="38.5000000" lon="-38.0000000"/><node id="2" lat="38.5000000" lon="-37.9990000"/>
<node id="3" lat="38.5000000" lon="-37.9980000"/><node id="4" lat="38.5000000" lon="-37.9970000"/>
<node id="5" lat="38.5000000" lon="-37.9960000"/>
<way id="10"><nd ref="1"/><nd ref="2"/><nd ref="3"/><tag k="highway" v="residential"/>
<tag k="name" v="Alder Road"/><tag k="sidewalk" v="both"/><tag k="maxspeed" v="25 mph"/></way>
<way id="11"><nd ref="3"/><nd ref="4"/><nd ref="5"/><tag k="highway" v="residential"/>
<tag k="name" v="Birch Road"/><tag k="sidewalk" v="no"/><tag k="maxspeed" v="30 mph"/></way>
</osm>
"""
_PRINT_EDGES = (
    "import json, sys\n"
    "from routerisk.network.folder import build_network\n"
    "e = build_network(sys.argv[1]).edges\n"
    "cols = [c for c in ('name', 'sidewalk', 'maxspeed_raw', 'baseline') if c in e]\n"
    "print(json.dumps(e[cols].astype(str).values.tolist()))\n"
)


def test_merged_edges_do_not_depend_on_the_hash_seed(tmp_path):
    src = tmp_path / "merge.osm"
    src.write_text(MERGE_OSM, encoding="utf-8")
    procs = []
    for seed in ("0", "4"):  # two seeds that order {"Alder Road", "Birch Road"} differently
        env = {**os.environ, "PYTHONHASHSEED": seed, "PYTHONPATH": str(ROOT)}
        procs.append(
            subprocess.Popen(
                [sys.executable, "-c", _PRINT_EDGES, str(src)],
                env=env,
                cwd=ROOT,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
            )
        )
    outs = []
    for p in procs:
        out, err = p.communicate(timeout=120)
        assert p.returncode == 0, err
        outs.append(json.loads(out))
    assert outs[0] == outs[1]

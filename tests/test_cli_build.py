"""``routerisk build`` end to end: JSON summary, errors with exit code 2 and no output left."""

from __future__ import annotations

import json

import pytest
import yaml

from routerisk import datasets
from routerisk.cli import main
from routerisk.network.folder import load_network
from routerisk.profile import DEFAULT_PROFILE

from . import _osm_snippets as osm


def _run(capsys, *argv):
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_build_json_summary(tmp_path, capsys):
    out = tmp_path / "net"
    code, stdout, _ = _run(
        capsys,
        "build",
        str(datasets.get_path("town")),
        "--out",
        str(out),
        "--timezone",
        "Etc/GMT+3",
        "--json",
    )
    assert code == 0
    summary = json.loads(stdout)
    assert set(summary) >= {"nodes", "edges", "length_km", "sources", "profile"}
    # counts of the invented town, as its generator reports them (sample_area/README.md)
    assert summary["nodes"] == 192 and summary["edges"] == 666
    assert summary["sources"]["school"] == 4 and summary["sources"]["campus"] == 2
    net = load_network(out)
    assert net.summary() == {**summary, "crossings": net.summary()["crossings"]}
    assert str(net.timezone) == "Etc/GMT+3"


def test_existing_output_needs_force(tmp_path, capsys):
    out = tmp_path / "net"
    assert _run(capsys, "build", str(datasets.get_path("town")), "--out", str(out))[0] == 0
    code, _, err = _run(capsys, "build", str(datasets.get_path("town")), "--out", str(out))
    assert code == 2 and "--force" in err
    assert (
        _run(capsys, "build", str(datasets.get_path("town")), "--out", str(out), "--force")[0] == 0
    )


def _bad_profile(tmp_path, edit):
    doc = yaml.safe_load(DEFAULT_PROFILE.read_text())
    edit(doc)
    p = tmp_path / "bad.yaml"
    p.write_text(yaml.safe_dump(doc))
    return p


def _set(path, value):
    def edit(doc):
        d = doc
        for k in path[:-1]:
            d = d[k]
        d[path[-1]] = value

    return edit


BAD = {
    "missing file": (lambda tmp: tmp / "none.osm.pbf", "none.osm.pbf"),
    "truncated pbf": (lambda tmp: _truncated(tmp), "cut.osm.pbf"),
    "not osm": (lambda tmp: _write(tmp / "notes.osm", "hello, not xml"), "notes.osm"),
    "wrong suffix": (lambda tmp: _write(tmp / "roads.txt", "x"), "roads.txt"),
    "no drivable": (
        lambda tmp: osm.write(
            tmp / "paths.osm",
            [
                osm.node(1, 38.5, -38.0),
                osm.node(2, 38.5, -38.001),
                osm.way(1, [1, 2], highway="footway"),
            ],
        ),
        "paths.osm",
    ),
    "empty file": (lambda tmp: _write(tmp / "empty.osm", ""), "empty.osm"),
}


def _write(p, text):
    p.write_text(text)
    return p


def _truncated(tmp):
    src = datasets.get_path("town").read_bytes()
    p = tmp / "cut.osm.pbf"
    p.write_bytes(src[: len(src) // 3])
    return p


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_source(case, tmp_path, capsys):
    make, name = BAD[case]
    out = tmp_path / "net"
    code, _, err = _run(capsys, "build", str(make(tmp_path)), "--out", str(out))
    assert code == 2
    assert err.count("\n") == 1 and name in err and "Traceback" not in err
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".net")]


PROFILE_BAD = {
    "negative weight": (["categories", "school", "weight"], -2, "categories.school.weight"),
    "zero radius": (["categories", "park", "radius_m"], 0, "categories.park.radius_m"),
    "unknown key": (["categories", "park", "radius"], 10, "categories.park.radius"),
    "unknown decay": (["categories", "park", "decay"], "cubic", "categories.park.decay"),
}


@pytest.mark.parametrize("case", sorted(PROFILE_BAD))
def test_bad_profile(case, tmp_path, capsys):
    path, value, key = PROFILE_BAD[case]
    prof = _bad_profile(tmp_path, _set(path, value))
    out = tmp_path / "net"
    code, _, err = _run(
        capsys, "build", str(datasets.get_path("town")), "--out", str(out), "--profile", str(prof)
    )
    assert code == 2 and "bad.yaml" in err and key in err and err.count("\n") == 1
    assert not out.exists()


def test_bad_timezone(tmp_path, capsys):
    code, _, err = _run(
        capsys,
        "build",
        str(datasets.get_path("town")),
        "--out",
        str(tmp_path / "n"),
        "--timezone",
        "Mars/Olympus",
    )
    assert code == 2 and "--timezone" in err


def test_debug_shows_traceback(tmp_path):
    with pytest.raises(Exception, match="not found"):
        main(["--debug", "build", str(tmp_path / "none.osm"), "--out", str(tmp_path / "n")])

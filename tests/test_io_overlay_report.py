"""Module tests of the small helpers: atomic outputs, overlays and the report blocks."""

from __future__ import annotations

import json

import numpy as np
import pytest

from routerisk.analysis.scoring import Scorer
from routerisk.errors import InputFileError, OutputError, OutputExistsError
from routerisk.io import atomic as _io
from routerisk.network import overlay
from routerisk.render import report

# ------------------------------------------------------------------------------ _io


def test_atomic_directory_leaves_nothing_when_the_block_fails(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(RuntimeError), _io.atomic_directory(out) as tmp:
        (tmp / "half.csv").write_text("a,b\n")
        raise RuntimeError("stopped half way")
    assert not out.exists()
    assert list(tmp_path.iterdir()) == []  # no .out.*.part left behind


def test_atomic_directory_swaps_a_folder_only_with_force(tmp_path):
    out = tmp_path / "out"
    with _io.atomic_directory(out) as tmp:
        (tmp / "a.txt").write_text("old")
    with pytest.raises(OutputExistsError, match="pass --force"), _io.atomic_directory(out):
        pass
    with _io.atomic_directory(out, force=True) as tmp:
        (tmp / "b.txt").write_text("new")
    assert sorted(p.name for p in out.iterdir()) == ["b.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_check_target_refuses_the_other_kind_and_a_file_in_the_way(tmp_path):
    f = tmp_path / "f.html"
    f.write_text("x")
    with pytest.raises(OutputExistsError, match="is a file"):
        _io.check_target(f, force=True, folder=True)
    with pytest.raises(OutputExistsError, match="is a folder"):
        _io.check_target(tmp_path, force=True, folder=False)
    with pytest.raises(OutputError, match="a file is in the way"):
        _io.check_target(f / "inside" / "out", force=False)


def test_write_text_atomic_keeps_the_old_file_without_force(tmp_path):
    p = tmp_path / "a.txt"
    _io.write_text_atomic(p, "one")
    with pytest.raises(OutputExistsError):
        _io.write_text_atomic(p, "two", force=False)
    assert p.read_text() == "one"
    _io.write_text_atomic(p, "two")
    assert p.read_text() == "two"


def test_dumps_json_is_deterministic_and_refuses_nan():
    assert _io.dumps_json({"b": 1, "a": "é"}) == '{\n  "a": "é",\n  "b": 1\n}'
    with pytest.raises(ValueError):
        _io.dumps_json({"x": float("nan")})


def test_provenance_records_checksums_of_inputs(tmp_path):
    # the checksum is sha256 of the bytes: the value for b"abc" is the FIPS 180-2 test vector
    p = tmp_path / "in.csv"
    p.write_bytes(b"abc")
    prov = _io.provenance(profile="f00", inputs={"routes": p})
    rec = json.loads(_io.dumps_json(prov))["inputs"]["routes"]
    assert rec["sha256"] == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert "f00" in _io.provenance_line(prov)


# --------------------------------------------------------------------------- overlay


def _rows(net, n=2, **extra):
    return [
        {"u": int(u), "v": int(v), "key": int(k), "street": "x", **extra}
        for (u, v, k) in list(net.edges.index[:n])
    ]


def test_overlay_weights_and_closes_edges(town_net, tmp_path):
    p = tmp_path / "o.yaml"
    rows = _rows(town_net, factor=2.5, closed=True, hours=["mon 08"])
    overlay.write_overlay(p, rows, profile=town_net.profile.fingerprint, source="test")
    net = overlay.apply_overlay(town_net, p)
    sev0 = town_net.edges["severity"].to_numpy()
    assert np.allclose(net.edges["severity"].to_numpy()[:2], sev0[:2] * 2.5)
    assert np.array_equal(net.edges["severity"].to_numpy()[2:], sev0[2:])
    assert net.profile.fingerprint != town_net.profile.fingerprint  # the overlay is hashed
    rule = net.profile.rules[-1]
    assert rule.by_minute[8 * 60] and not rule.by_minute[9 * 60]  # Monday 08:00-09:00 only
    # a score entering a closed edge on Monday 08:30 breaks the overlay's rule
    import datetime as dt

    edge = tuple(int(x) for x in net.edges.index[0])
    when = dt.datetime(2027, 3, 8, 8, 30, tzinfo=net.timezone)  # a Monday
    assert Scorer(net).score("x", [edge], when).rule_breaks
    assert not Scorer(town_net).score("x", [edge], when).rule_breaks


@pytest.mark.parametrize(
    ("doc", "field"),
    [
        ("kind: other\nversion: 1\n", "kind"),
        ("kind: routerisk-overlay\nversion: 1\nedges: {a: 1}\n", "edges"),
        ("kind: routerisk-overlay\nversion: 1\nedges: [{u: 1}]\n", "edges[0]"),
        ("kind: routerisk-overlay\nversion: 1\nedges: [{u: -5, v: -6, key: 0}]\n", "edges[0]"),
    ],
)
def test_bad_overlays_name_the_field(town_net, tmp_path, doc, field):
    p = tmp_path / "bad.yaml"
    p.write_text(doc)
    with pytest.raises(InputFileError) as err:
        overlay.apply_overlay(town_net, p)
    assert err.value.field == field and str(p) in err.value.one_line()


def test_overlay_factor_out_of_range(town_net, tmp_path):
    p = tmp_path / "o.yaml"
    overlay.write_overlay(p, _rows(town_net, 1, factor=0.5), profile="x", source="t")
    with pytest.raises(InputFileError, match="factor must be a number from 1"):
        overlay.apply_overlay(town_net, p)


# ---------------------------------------------------------------------------- report


def test_report_numbers_and_text():
    assert report.fmt(1234) == "1,234"
    assert report.fmt(0.12345, digits=2) == "0.12"
    assert report.fmt(True) == "yes" and report.fmt(None) == ""
    assert report.fmt(float("inf")) == ""
    assert report.anchor("Area: Corvane main!") == "area-corvane-main"
    assert report.plain("$5") == r"\$5"


def test_report_page_is_self_contained_and_escaped():
    page = report.page(
        "<t>", [report.section("S", report.paragraph("<img src=x onerror=alert(1)>"))]
    )
    assert "<img src=x" not in page and "&lt;img src=x" in page
    assert report.external_references(page) == []
    assert report.external_references('<img src="https://example.org/x.png">') == [
        "https://example.org/x.png"
    ]

"""The saved network folder: round trip, refusing incomplete or mismatched folders."""

from __future__ import annotations

import json
import shutil

import pytest

from routerisk.errors import NetworkFolderError
from routerisk.network.folder import load_network
from routerisk.profile import load_profile


def test_round_trip(town_net, town_dir):
    net = load_network(town_dir)
    assert net.summary() == town_net.summary()
    cols = ["length", "exposure_km", "severity", "crossings"]
    assert net.edges[cols].round(9).sort_index().equals(town_net.edges[cols].round(9).sort_index())
    G = net.graph
    assert G.number_of_edges() == len(net.edges)


def test_refuses_missing_meta(town_dir, tmp_path):
    d = tmp_path / "half"
    shutil.copytree(town_dir, d)
    (d / "meta.json").unlink()
    with pytest.raises(NetworkFolderError, match="incomplete"):
        load_network(d)


def test_refuses_other_version(town_dir, tmp_path):
    d = tmp_path / "old"
    shutil.copytree(town_dir, d)
    meta = json.loads((d / "meta.json").read_text())
    meta["format_version"] = 0
    (d / "meta.json").write_text(json.dumps(meta))
    with pytest.raises(NetworkFolderError, match="format_version"):
        load_network(d)


def test_refuses_changed_gpkg(town_dir, tmp_path):
    d = tmp_path / "changed"
    shutil.copytree(town_dir, d)
    with open(d / "network.gpkg", "ab") as fh:
        fh.write(b"\0")
    with pytest.raises(NetworkFolderError, match="checksum"):
        load_network(d)


def test_retag_with_other_weights(town_dir):
    strict = load_profile(
        __import__("pathlib").Path(__file__).parents[1] / "configs" / "community_strict.yaml"
    )
    net = load_network(town_dir, profile=strict)
    assert net.profile.fingerprint == strict.fingerprint
    assert len(net.profile.rules) == 3
    assert net.edges["rule_0"].sum() > load_network(town_dir).edges["rule_0"].sum()


def _folder_bytes(folder):
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_saving_through_arrow_gives_the_same_folder_every_run(town_net, tmp_path, monkeypatch):
    import pyogrio

    from routerisk.network import folder as network

    pytest.importorskip("pyarrow")
    assert network._write_arrow()  # pyogrio 0.13, GDAL 3.12 here
    calls = []
    real = pyogrio.write_dataframe

    def spy(*args, **kw):
        calls.append(kw.get("use_arrow"))
        return real(*args, **kw)

    monkeypatch.setattr(pyogrio, "write_dataframe", spy)
    network.save_network(town_net, tmp_path / "a")
    network.save_network(town_net, tmp_path / "b")
    assert calls and all(c is True for c in calls)
    assert _folder_bytes(tmp_path / "a") == _folder_bytes(tmp_path / "b")
    # without Arrow pyogrio writes the very same file
    monkeypatch.setattr(network, "_write_arrow", lambda: False)
    network.save_network(town_net, tmp_path / "c")
    assert calls[-1] is False
    assert _folder_bytes(tmp_path / "a") == _folder_bytes(tmp_path / "c")

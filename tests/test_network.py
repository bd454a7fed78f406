"""The saved network folder: round trip, refusing incomplete or mismatched folders."""

from __future__ import annotations

import json
import shutil

import pytest

from routerisk.errors import NetworkFolderError
from routerisk.network import load_network
from routerisk.profile import load_profile


def test_round_trip(town_net, town_dir):
    net = load_network(town_dir)
    assert net.summary() == town_net.summary()
    cols = ["length", "exposure_km", "severity", "crossings"]
    assert (net.edges[cols].round(9).sort_index().equals(
        town_net.edges[cols].round(9).sort_index()))
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
    strict = load_profile(__import__("pathlib").Path(__file__).parents[1] / "configs" /
                          "community_strict.yaml")
    net = load_network(town_dir, profile=strict)
    assert net.profile.fingerprint == strict.fingerprint
    assert len(net.profile.rules) == 3
    assert net.edges["rule_0"].sum() > load_network(town_dir).edges["rule_0"].sum()

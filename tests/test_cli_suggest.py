"""``routerisk suggest`` on the sample town, and its map in headless chromium."""

from __future__ import annotations

import hashlib
import html
import json
import re
from pathlib import Path

import pytest

from routerisk import __version__, datasets
from routerisk.analysis.alternatives import suggest_routes
from routerisk.analysis.scoring import Scorer
from routerisk.cli import main
from routerisk.io import routes
from routerisk.network.folder import load_network

from ._browser import inspect_page, needs_chromium


@pytest.fixture(scope="module")
def town_suggestions(town_net):
    planned = routes.read_routes(datasets.get_path("routes"), default_tz=town_net.timezone)
    return suggest_routes(town_net, planned)


def test_school_run_gets_a_much_lower_exposure_alternative(town_net, town_suggestions):
    s = next(x for x in town_suggestions if x.name == "school-run")
    assert s.planned.rule_breaks  # the plan passes the school at dismissal, inside the rule
    good = [a for a in s.alternatives if a.within_bounds and a.risk_change_pct <= -30.0]
    assert good, [(a.risk_change_pct, a.time_change_pct) for a in s.alternatives]
    for a in s.alternatives:
        assert a.time_change_pct <= 25.0 + 1e-9
        # re-scored independently: a fresh scorer on a freshly loaded network
        rescored = Scorer(town_net).score("check", a.edges, s.planned.depart)
        assert rescored.rule_breaks == []
        assert rescored.risk == pytest.approx(a.score.risk)


def test_alternatives_keep_start_end_and_required_points(town_suggestions):
    for s in town_suggestions:
        for a in s.alternatives:
            assert a.edges[0][0] == s.planned_edges[0][0]
            assert a.edges[-1][1] == s.planned_edges[-1][1]


def _page_provenance(page: Path) -> dict:
    """Return the provenance a map records in its ``routerisk-provenance`` meta element."""
    found = re.findall(
        r'<meta name="routerisk-provenance" content="([^"]*)">', page.read_text(encoding="utf-8")
    )
    assert len(found) == 1, found
    return json.loads(html.unescape(found[0]))


def test_json_output(town_dir, tmp_path, capsys):
    src = datasets.get_path("routes")
    page = tmp_path / "alternatives.html"
    code = main(["suggest", str(src), "--network", str(town_dir), "--json", "--map", str(page)])
    data = json.loads(capsys.readouterr().out)
    assert code == 0 and set(data) == {"routes", "profile", "made_from"}
    assert {"name", "planned", "alternatives"} <= set(data["routes"][0])
    alt = data["routes"][0]["alternatives"][0]
    assert set(alt) >= {
        "length_km",
        "duration_min",
        "risk",
        "risk_change_pct",
        "time_change_pct",
        "rule_breaks",
    }
    # provenance: tool version, profile fingerprint, checksums of the route file and of the
    # OSM file the network was built from (as recorded in the network folder)
    meta = json.loads((town_dir / "meta.json").read_text(encoding="utf-8"))
    made = data["made_from"]
    assert made["routerisk_version"] == __version__
    assert made["profile"] == data["profile"] == meta["profile"]
    assert made["inputs"]["routes"] == {
        "name": src.name,
        "sha256": hashlib.sha256(src.read_bytes()).hexdigest(),
    }
    assert made["inputs"]["network_source"] == {
        "name": meta["source_name"],
        "sha256": meta["source_sha256"],
    }
    # the same record as score's JSON and score's map, and the suggest map carries it too
    assert (
        main(
            [
                "score",
                str(src),
                "--network",
                str(town_dir),
                "--json",
                "--out",
                str(tmp_path / "scores"),
            ]
        )
        == 0
    )
    scored = json.loads(capsys.readouterr().out)
    assert made == scored["made_from"]
    assert _page_provenance(page) == made == _page_provenance(tmp_path / "scores" / "map.html")


def test_bad_options(town_dir, capsys):
    code = main(
        ["suggest", str(datasets.get_path("routes")), "--network", str(town_dir), "--count", "0"]
    )
    assert code == 2 and "--count" in capsys.readouterr().err


@needs_chromium
@pytest.mark.browser
def test_map_loads_offline_with_layers_and_side_panel(town_dir, tmp_path, capsys):
    page = tmp_path / "alternatives.html"
    assert (
        main(
            [
                "suggest",
                str(datasets.get_path("routes")),
                "--network",
                str(town_dir),
                "--map",
                str(page),
            ]
        )
        == 0
    )
    capsys.readouterr()
    res = inspect_page(
        page,
        screenshot=tmp_path / "alternatives.png",
        script=(
            "[document.querySelectorAll('.leaflet-control-layers-selector').length,"
            " !!document.getElementById('rr-side'), !!document.getElementById('rr-legend'),"
            " (document.getElementById('rr-side')||{}).textContent || '']"
        ),
    )
    assert res["errors"] == [] and res["requests"] == []
    n_layers, side, legend, side_text = res["value"]
    net = load_network(town_dir)
    # network + 7 source layers + rule zones + (plan + alternatives) per route
    assert n_layers >= 1 + 7 + len(net.profile.rules) + 4 * 2
    assert side and legend and "school-run" in side_text

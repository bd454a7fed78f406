"""``score`` and ``suggest`` give one number for one planned route (the sample town)."""

from __future__ import annotations

import json

import pytest

from routerisk import datasets
from routerisk.cli import main


def _json(capsys, args: list[str]) -> dict:
    assert main(args) == 0
    return json.loads(capsys.readouterr().out)


def test_score_and_suggest_agree_on_the_planned_route(town_dir, capsys):
    src = str(datasets.get_path("routes"))
    scored = _json(capsys, ["score", src, "--network", str(town_dir), "--json"])["routes"]
    suggested = _json(capsys, ["suggest", src, "--network", str(town_dir), "--json"])["routes"]
    assert len(scored) == len(suggested) >= 4
    for sc, sg in zip(scored, suggested, strict=True):
        p = sg["planned"]
        assert (sc["name"], sc["depart"]) == (sg["name"], p["depart"])
        for key in ("risk", "length_km", "duration_min", "crossings"):
            assert p[key] == pytest.approx(sc[key], rel=1e-9, abs=0.0), (sc["name"], key)
        for a in sg["alternatives"]:
            # every change is stated against that same planned figure
            assert a["risk_change_pct"] == pytest.approx(
                100.0 * (a["risk"] - p["risk"]) / p["risk"], abs=2e-3
            )
            assert a["length_change_pct"] == pytest.approx(
                100.0 * (a["length_km"] - p["length_km"]) / p["length_km"], abs=2e-3
            )


def test_library_figures_agree_unrounded(town_net):
    from routerisk.analysis.alternatives import suggest_routes
    from routerisk.analysis.scoring import score_routes
    from routerisk.io import routes

    planned = routes.read_routes(datasets.get_path("routes"), default_tz=town_net.timezone)
    scores = score_routes(town_net, planned)
    sugs = suggest_routes(town_net, planned)
    assert any(f < 1.0 for s in sugs for f in s.planned_fractions)  # partial ends are present
    for sc, sg in zip(scores, sugs, strict=True):
        for key in ("risk", "length_km", "duration_min"):
            assert getattr(sg.planned, key) == pytest.approx(getattr(sc, key), rel=1e-9, abs=0.0), (
                sc.name,
                key,
            )
        for a in sg.alternatives:
            # alternatives drive the plan's partial first and last edges the same way
            assert a.edges[0] == sg.planned_edges[0] or sg.planned_fractions[0] == 1.0
            assert a.edges[-1] == sg.planned_edges[-1] or sg.planned_fractions[-1] == 1.0
            assert a.fractions[0] == sg.planned_fractions[0] or sg.planned_fractions[0] == 1.0
            assert a.fractions[-1] == sg.planned_fractions[-1] or sg.planned_fractions[-1] == 1.0
            assert a.risk_change_pct == pytest.approx(
                100.0 * (a.score.risk - sg.planned.risk) / sg.planned.risk, rel=1e-12
            )


def test_score_and_suggest_agree_on_a_real_extract(real_pbf, tmp_path, capsys):
    """Real extract: pyogrio's sample.osm.pbf (OpenStreetMap data, ODbL 1.0)."""
    from routerisk.network.folder import build_network, save_network

    net = build_network(real_pbf)
    out = save_network(net, tmp_path / "net")
    edges = net.edges.to_crs(4326)
    lines = list(edges.geometry)
    feats = []
    for i, (a, b) in enumerate([(0, len(lines) // 2), (3, len(lines) - 4), (7, len(lines) // 3)]):
        p = lines[a].interpolate(0.3, normalized=True)
        q = lines[b].interpolate(0.7, normalized=True)
        feats.append(
            {
                "type": "Feature",
                "properties": {"name": f"real-{i}", "depart": "2026-07-07T08:30"},
                "geometry": {"type": "LineString", "coordinates": [[p.x, p.y], [q.x, q.y]]},
            }
        )
    src = tmp_path / "routes.geojson"
    src.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    scored = _json(capsys, ["score", str(src), "--network", str(out), "--json"])["routes"]
    suggested = _json(capsys, ["suggest", str(src), "--network", str(out), "--json"])["routes"]
    assert len(scored) == len(suggested) == 3
    for sc, sg in zip(scored, suggested, strict=True):
        assert sc["length_km"] > 0 and sc["risk"] > 0
        p = sg["planned"]
        for key in ("risk", "length_km", "duration_min", "crossings"):
            assert p[key] == pytest.approx(sc[key], rel=1e-9, abs=0.0), (sc["name"], key)
        # the plan is never offered as its own alternative; when none is found it says why
        assert all(a["shared_length_with_plan"] < 1.0 for a in sg["alternatives"])
        if not sg["alternatives"]:
            assert sg["reasons"]


def test_day_plan_scores_each_run_as_score_does(town_dir, tmp_path, capsys):
    # every run `plan --json` places on its planned route has the risk `score --json` gives
    # that route at that start (partial first and last edges included, as score drives them)
    import yaml

    runs_file = datasets.get_path("runs")
    plan = _json(
        capsys,
        ["plan", str(runs_file), "--network", str(town_dir), "--date", "2027-03-09", "--json"],
    )
    spec = {r["name"]: r for r in yaml.safe_load(runs_file.read_text())["runs"]}
    planned = [r for r in plan["runs"] if r["route"] == "planned"]
    assert planned
    src = str(runs_file.parent / "routes.geojson")
    for r in planned:
        want = spec[r["name"]].get("route_name", r["name"])
        scored = [
            s
            for s in _json(
                capsys, ["score", src, "--network", str(town_dir), "--depart", r["start"], "--json"]
            )["routes"]
            if s["name"] == want
        ]
        assert len(scored) == 1
        assert r["risk"] == pytest.approx(scored[0]["risk"], rel=1e-6, abs=1e-6), r["name"]

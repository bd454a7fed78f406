"""``routerisk serve``'s JSON API on the sample town: the same numbers and errors as the commands.

Each endpoint is called through Starlette's test client and compared with the command that does
the same job on the same file (``score``, ``suggest``, ``review``, ``plan``), run in the same
folder so the one-line errors name the same file.
"""

from __future__ import annotations

import asyncio
import json
import warnings
from pathlib import Path

import pytest

from routerisk import CAUTION, datasets
from routerisk.cli import main

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # starlette's note about a newer httpx client package
    from starlette.testclient import TestClient

from routerisk.serve import app as serve_app
from routerisk.serve import service as serve_service

DEPARTS = ["2027-03-09T08:10", "2027-03-09T15:05", "2027-03-14T11:00"]  # Tue school hours, Sun


@pytest.fixture(scope="module")
def app(town_net):
    return serve_app.create_app(town_net)


@pytest.fixture(scope="module")
def client(app):
    return TestClient(app, base_url="http://127.0.0.1", raise_server_exceptions=False)


def _cli(capsys, args: list[str]) -> dict:
    assert main(args) == 0, capsys.readouterr().err
    return json.loads(capsys.readouterr().out)


def _cli_error(capsys, args: list[str]) -> str:
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0, err
    return err.removeprefix("routerisk: error: ")


def _file(path: Path) -> dict:
    return {"name": path.name, "text": path.read_text(encoding="utf-8")}


def _ok(resp) -> dict:
    doc = resp.json()
    assert resp.status_code == 200, doc.get("error")
    assert doc["caution"] == CAUTION
    assert doc["made_from"]["profile"]
    return doc


def _waypoints() -> list[list[float]]:
    gj = json.loads(datasets.get_path("routes").read_text(encoding="utf-8"))
    pts = gj["features"][0]["geometry"]["coordinates"]  # school-run
    return [pts[0], pts[2], pts[-1]]


# --------------------------------------------------------------------------- same numbers


def test_score_matches_the_command(client, town_dir, capsys):
    src = datasets.get_path("routes")
    doc = _ok(client.post("/api/score", json={"route": {"file": _file(src)}, "departs": DEPARTS}))
    cli = _cli(
        capsys,
        [
            "score",
            str(src),
            "--network",
            str(town_dir),
            "--json",
            *[a for d in DEPARTS for a in ("--depart", d)],
        ],
    )
    assert doc["routes"] == cli["routes"]
    assert doc["made_from"]["inputs"]["routes"] == cli["made_from"]["inputs"]["routes"]
    assert len(doc["drawn"]) == len(doc["routes"]) == 4 * len(DEPARTS)
    d = doc["drawn"][0]
    risks = [f["properties"]["risk"] for f in d["segments"]["features"]]
    assert sum(risks) == pytest.approx(doc["routes"][0]["risk"], abs=1e-4)


def test_waypoints_score_as_a_route_file_of_the_same_points(client, town_dir, tmp_path, capsys):
    pts = _waypoints()
    doc = _ok(
        client.post(
            "/api/score",
            json={"route": {"waypoints": pts, "name": "clicked"}, "departs": DEPARTS[:1]},
        )
    )
    f = tmp_path / "clicked.geojson"
    f.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": "clicked"},
                        "geometry": {"type": "LineString", "coordinates": pts},
                    }
                ],
            }
        )
    )
    cli = _cli(
        capsys, ["score", str(f), "--network", str(town_dir), "--json", "--depart", DEPARTS[0]]
    )
    assert doc["routes"] == cli["routes"]
    assert doc["routes"][0]["rule_breaks"]  # school run at school arrival: the rule is broken


def test_week_hours_are_the_scores_at_those_hours(client):
    route = {"waypoints": _waypoints()}
    week = _ok(client.post("/api/week", json={"route": route, "date": "2027-03-10"}))
    hours = week["hours"]
    assert len(hours) == 168 and hours[0]["depart"] == "2027-03-08T00:00:00-03:00"
    for h in (0, 32, 39, 150):  # Mon 00:00, Tue 08:00, Tue 15:00, Sun 06:00
        one = _ok(client.post("/api/score", json={"route": route, "departs": [hours[h]["depart"]]}))
        s = one["routes"][0]
        assert hours[h]["risk"] == pytest.approx(s["risk"], abs=1e-6)
        assert hours[h]["rule_breaks"] == len(s["rule_breaks"])
    assert hours[32]["risk"] > hours[0]["risk"]  # school arrival weighs more than midnight


def test_alternatives_match_suggest(client, town_dir, capsys):
    src = datasets.get_path("routes")
    doc = _ok(
        client.post(
            "/api/alternatives",
            json={
                "route": {"file": _file(src)},
                "departs": ["2027-03-09T15:05"],
                "count": 2,
                "max_extra_time": 0.4,
            },
        )
    )
    cli = _cli(
        capsys,
        [
            "suggest",
            str(src),
            "--network",
            str(town_dir),
            "--json",
            "--depart",
            "2027-03-09T15:05",
            "--count",
            "2",
            "--max-extra-time",
            "0.4",
        ],
    )
    assert doc["routes"] == cli["routes"]
    assert any(r["alternatives"] for r in doc["routes"])
    for r, d in zip(doc["routes"], doc["drawn"], strict=True):
        assert len(d["alternatives"]) == len(r["alternatives"])


def test_review_matches_the_command(client, town_dir, tmp_path, capsys, monkeypatch):
    src = datasets.get_path("area")
    specs = [["rule:school surroundings at school hours=off"], ["weight:school=5"]]
    doc = _ok(
        client.post(
            "/api/review", json={"area": {"file": _file(src)}, "what_if": specs, "at": "tue 08:15"}
        )
    )
    args = ["review", str(src), "--network", str(town_dir), "--json", "--at", "tue 08:15"]
    for s in specs:
        args += ["--what-if", *s]
    cli = _cli(capsys, args)
    doc.pop("made_from")
    doc.pop("caution")
    cli.pop("caution")
    assert doc == cli
    assert doc["areas"][0]["km_by_band"]


def test_plan_matches_the_command(client, town_dir, capsys):
    runs, rts = datasets.get_path("runs"), datasets.get_path("routes")
    doc = _ok(
        client.post(
            "/api/plan",
            json={"runs": _file(runs), "routes": [_file(rts)], "date": "2027-03-09", "vehicles": 2},
        )
    )
    cli = _cli(
        capsys, ["plan", str(runs), "--network", str(town_dir), "--json", "--date", "2027-03-09"]
    )
    doc.pop("made_from")
    doc.pop("caution")
    assert doc == cli
    assert set(
        _ok(
            client.post(
                "/api/plan",
                json={"runs": _file(runs), "routes": [_file(rts)], "date": "2027-03-09"},
            )
        )["made_from"]["inputs"]
    ) >= {"runs", "routes.geojson"}


def test_exported_alternative_rescores_to_the_same_risk(client, town_dir, tmp_path, capsys):
    doc = _ok(
        client.post(
            "/api/alternatives",
            json={
                "route": {"waypoints": _waypoints(), "name": "clicked"},
                "departs": ["2027-03-09T15:05"],
                "max_extra_time": 0.5,
            },
        )
    )
    alt = doc["routes"][0]["alternatives"][0]
    line = doc["drawn"][0]["alternatives"][0]["line"]
    for fmt in ("geojson", "gpx"):
        r = client.post(
            "/api/export",
            json={"name": "picked", "depart": "2027-03-09T15:05", "line": line, "format": fmt},
        )
        assert r.status_code == 200
        f = tmp_path / f"picked.{fmt}"
        f.write_text(r.text)
        args = ["score", str(f), "--network", str(town_dir), "--json"]
        if fmt == "gpx":  # GPX has no place for the departure
            args += ["--depart", "2027-03-09T15:05"]
        again = _cli(capsys, args)["routes"][0]
        assert again["risk"] == pytest.approx(alt["risk"], rel=1e-6), fmt
        assert again["length_km"] == pytest.approx(alt["length_km"], rel=1e-6)


# --------------------------------------------------------------------------- bad requests


def test_malformed_request_body_is_a_400_json_error(client):
    for endpoint in ("score", "week", "alternatives", "review", "plan", "export"):
        for body in (b"{bad", b"[1, 2]", b"\xff\xfe", b""):
            r = client.post(f"/api/{endpoint}", content=body)
            assert r.status_code == 400, (endpoint, body)
            assert r.json()["error"].startswith("request body:")
            assert r.json()["caution"] == CAUTION


def test_odd_but_well_formed_requests_are_4xx_not_500(client):
    odd = [
        ("score", {}),
        ("score", {"route": {"waypoints": [[0, 0]]}}),
        ("score", {"route": {"waypoints": _waypoints()}, "departs": [8]}),
        ("score", {"route": {"file": {"name": "", "text": "x"}}}),
        ("week", {"route": {"waypoints": _waypoints()}, "date": "someday"}),
        ("alternatives", {"route": {"waypoints": _waypoints()}, "count": "3"}),
        ("alternatives", {"route": {"waypoints": _waypoints()}, "max_extra_time": 25}),
        ("review", {"area": {"type": "FeatureCollection", "features": []}}),
        (
            "review",
            {
                "area": json.loads(datasets.get_path("area").read_text()),
                "what_if": [["weight:nothing=2"]],
            },
        ),
        ("plan", {"runs": {"name": "runs.txt", "text": "x"}, "date": "2027-03-09"}),
        ("plan", {"runs": _file(datasets.get_path("runs")), "date": "2027-03-09"}),
        ("export", {"line": [[0, 0]]}),
    ]
    for endpoint, payload in odd:
        r = client.post(f"/api/{endpoint}", json=payload)
        assert 400 <= r.status_code < 500, (endpoint, payload, r.text)
        assert r.json()["error"] and "\n" not in r.json()["error"]
    raw = b'{"route": {"file": {"name": "x.geojson", "text": "\\ud800"}}}'  # a lone surrogate
    r = client.post("/api/score", content=raw)
    assert r.status_code == 400 and "surrogate" in r.json()["error"]


def _same_error(client, capsys, monkeypatch, tmp_path, endpoint, payload, args):
    monkeypatch.chdir(tmp_path)
    r = client.post(endpoint, json=payload)
    assert 400 <= r.status_code < 500, r.text
    assert r.json()["error"] == _cli_error(capsys, args)
    assert "routerisk-serve-" not in r.json()["error"]  # the private folder is not shown


def test_errors_are_the_commands_one_line(client, town_dir, tmp_path, capsys, monkeypatch):
    net = str(town_dir)
    bad = tmp_path / "broken.geojson"
    bad.write_text('{"type": "FeatureCollection", "features": [')
    _same_error(
        client,
        capsys,
        monkeypatch,
        tmp_path,
        "/api/score",
        {"route": {"file": _file(bad)}, "departs": DEPARTS[:1]},
        ["score", bad.name, "--network", net, "--depart", DEPARTS[0]],
    )
    far = tmp_path / "far.geojson"
    far.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": "far"},
                        "geometry": {
                            "type": "LineString",
                            "coordinates": [[-38.2, 38.5], [-38.0, 38.5]],
                        },
                    }
                ],
            }
        )
    )
    _same_error(
        client,
        capsys,
        monkeypatch,
        tmp_path,
        "/api/score",
        {"route": {"file": _file(far)}, "departs": DEPARTS[:1]},
        ["score", far.name, "--network", net, "--depart", DEPARTS[0]],
    )
    flat = tmp_path / "flat.geojson"
    flat.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": "flat"},
                        "geometry": {
                            "type": "Polygon",
                            "coordinates": [
                                [[-38.01, 38.50], [-38.00, 38.50], [-37.99, 38.50], [-38.01, 38.50]]
                            ],
                        },
                    }
                ],
            }
        )
    )
    _same_error(
        client,
        capsys,
        monkeypatch,
        tmp_path,
        "/api/review",
        {"area": {"file": _file(flat)}},
        ["review", flat.name, "--network", net],
    )
    src = datasets.get_path("routes")
    for depart in ("next tuesday", "2027-03-09", "2027-13-01T08:00"):
        _same_error(
            client,
            capsys,
            monkeypatch,
            tmp_path,
            "/api/score",
            {"route": {"file": _file(src)}, "departs": [depart]},
            ["score", str(src), "--network", net, "--depart", depart],
        )
    _same_error(
        client,
        capsys,
        monkeypatch,
        tmp_path,
        "/api/alternatives",
        {"route": {"file": _file(src)}, "count": 0},
        ["suggest", str(src), "--network", net, "--count", "0"],
    )


def test_points_off_the_network_clicked_on_the_page(client):
    r = client.post(
        "/api/score",
        json={"route": {"waypoints": [[-38.2, 38.5], [-38.0, 38.5]]}, "departs": DEPARTS[:1]},
    )
    assert r.status_code == 400
    assert "from the nearest drivable road" in r.json()["error"]


def test_oversize_upload_is_refused(town_net):
    small = TestClient(serve_app.create_app(town_net, max_upload=2000), base_url="http://127.0.0.1")
    src = datasets.get_path("routes")  # about 5 kB
    r = small.post("/api/score", json={"route": {"file": _file(src)}})
    assert r.status_code == 413
    assert "the limit is" in r.json()["error"]


def test_a_file_path_is_never_read(client, tmp_path):
    for payload, endpoint in (
        ({"route": {"file": "/etc/passwd"}}, "/api/score"),
        ({"route": {"geojson": str(datasets.get_path("routes"))}}, "/api/score"),
        ({"route": {"file": {"name": "../../etc/passwd", "text": "x"}}}, "/api/score"),
        ({"area": str(datasets.get_path("area"))}, "/api/review"),
    ):
        r = client.post(endpoint, json=payload)
        assert r.status_code == 400 and "reads no file by path" in r.json()["error"], payload
    runs = (
        "runs:\n  - {name: a, route: "
        + str(datasets.get_path("routes"))
        + ", earliest: '08:00', latest: '12:00'}\n"
    )
    r = client.post(
        "/api/plan", json={"runs": {"name": "runs.yaml", "text": runs}, "date": "2027-03-09"}
    )
    assert r.status_code == 400 and "reads no file by path" in r.json()["error"]


def test_unknown_endpoint_and_bad_bbox_are_json(client):
    assert client.get("/api/nothing").json()["status"] == 404
    r = client.get("/api/network", params={"bbox": "1,2,3", "zoom": 14})
    assert r.status_code == 400 and "bbox" in r.json()["error"]


# --------------------------------------------------------------------------- the server


def test_fifty_concurrent_score_requests_all_succeed(app):
    import httpx

    payload = {"route": {"waypoints": _waypoints()}, "departs": DEPARTS[:1]}

    async def many() -> list[httpx.Response]:
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://127.0.0.1") as c:
            return await asyncio.gather(*[c.post("/api/score", json=payload) for _ in range(50)])

    out = asyncio.run(many())
    assert [r.status_code for r in out] == [200] * 50
    assert len({r.json()["routes"][0]["risk"] for r in out}) == 1


def test_network_layer_is_simplified_by_zoom(client, monkeypatch):
    info = _ok(client.get("/api/info"))
    w, s, e, n = info["bounds"]
    bbox = f"{w},{s},{e},{n}"
    near = _ok(client.get("/api/network", params={"bbox": bbox, "zoom": 17}))
    far = _ok(client.get("/api/network", params={"bbox": bbox, "zoom": 12}))
    n_near, n_far = near["segments"], far["segments"]
    assert 0 < n_far < n_near < info["edges"]  # two directions sent once, short ones dropped
    assert n_near == len(near["edges"]["features"])
    # far away a band's segments travel together
    assert len(far["edges"]["features"]) == len(
        {f["properties"]["band"] for f in far["edges"]["features"]}
    )
    assert sum(f["properties"]["segments"] for f in far["edges"]["features"]) == n_far
    far_pts = sum(
        len(line) for f in far["edges"]["features"] for line in f["geometry"]["coordinates"]
    )
    assert far_pts < sum(len(f["geometry"]["coordinates"]) for f in near["edges"]["features"])
    assert {f["properties"]["band"] for f in near["edges"]["features"]} <= {
        b["name"] for b in info["bands"]
    }
    monkeypatch.setattr(serve_service, "MAX_FEATURES", 10)  # Service.network reads it
    capped = _ok(client.get("/api/network", params={"bbox": bbox, "zoom": 17}))
    assert len(capped["edges"]["features"]) == 10 and capped["truncated"]
    top = max(range(len(info["bands"])), key=lambda i: i)
    assert capped["edges"]["features"][0]["properties"]["band"] in {
        b["name"] for b in info["bands"][top - 1 :]
    }


def test_token_is_required_when_set(town_net):
    app = serve_app.create_app(town_net, token="s3cret-token", loopback=False)
    c = TestClient(app, base_url="http://10.0.0.5")
    r = c.get("/api/info")
    assert r.status_code == 403 and "token" in r.json()["error"]
    assert c.get("/api/info", headers={"X-Routerisk-Token": "s3cret-token"}).status_code == 200
    assert c.get("/?token=s3cret-token").status_code == 200  # sets the cookie ...
    assert c.get("/api/info").status_code == 200  # ... which later requests carry


def test_loopback_server_refuses_other_host_names(client):
    r = client.get("/api/info", headers={"host": "attacker.example"})
    assert r.status_code == 400


def test_non_loopback_host_needs_a_token(town_dir, capsys):
    err = _cli_error(capsys, ["serve", "--network", str(town_dir), "--host", "0.0.0.0"])
    assert "--token" in err and "loopback" in err


def test_kept_via_points_are_kept_as_suggest_keeps_required_points(
    client, town_dir, tmp_path, capsys
):
    pts = _waypoints()
    doc = _ok(
        client.post(
            "/api/alternatives",
            json={
                "route": {"waypoints": pts, "name": "clicked", "keep_vias": True},
                "departs": ["2027-03-09T15:05"],
                "max_extra_time": 0.5,
            },
        )
    )
    f = tmp_path / "clicked.geojson"
    f.write_text(
        json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {"name": "clicked", "required": [0, 1, 2]},
                        "geometry": {"type": "LineString", "coordinates": pts},
                    }
                ],
            }
        )
    )
    cli = _cli(
        capsys,
        [
            "suggest",
            str(f),
            "--network",
            str(town_dir),
            "--json",
            "--depart",
            "2027-03-09T15:05",
            "--max-extra-time",
            "0.5",
        ],
    )
    assert doc["routes"] == cli["routes"]
    loose = _ok(
        client.post(
            "/api/alternatives",
            json={
                "route": {"waypoints": pts, "name": "clicked"},
                "departs": ["2027-03-09T15:05"],
                "max_extra_time": 0.5,
            },
        )
    )
    assert loose["routes"] != doc["routes"]  # the via point constrains the search


def test_serve_command_loads_the_network_and_prints_the_address(town_dir, capsys, monkeypatch):
    import uvicorn

    started = {}
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: started.update(app=app, **kw))
    assert main(["serve", "--network", str(town_dir), "--port", "9876"]) == 0
    out = capsys.readouterr().out
    assert "http://127.0.0.1:9876/" in out and CAUTION in out
    assert started["host"] == "127.0.0.1" and started["port"] == 9876
    c = TestClient(started["app"], base_url="http://127.0.0.1")
    assert _ok(c.get("/api/info"))["edges"] > 0
    assert (
        main(
            [
                "serve",
                "--network",
                str(town_dir),
                "--host",
                "0.0.0.0",
                "--token",
                "long-enough-secret",
            ]
        )
        == 0
    )
    assert "?token=long-enough-secret" in capsys.readouterr().out
    err = _cli_error(capsys, ["serve", "--network", str(town_dir), "--demo"])
    assert "--network DIR or --demo" in err


def test_serve_demo_builds_the_sample_town(town_net, capsys, monkeypatch):
    import uvicorn

    started = {}
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: started.update(app=app, **kw))
    assert main(["serve", "--demo"]) == 0
    assert "http://127.0.0.1:8765/" in capsys.readouterr().out
    info = _ok(TestClient(started["app"], base_url="http://127.0.0.1").get("/api/info"))
    assert info["edges"] == len(town_net.edges) and info["source_name"] == "corvane.osm"

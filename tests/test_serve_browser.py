"""The planning page of ``routerisk serve`` in a real browser (Debian's chromium, DevTools).

On the sample town, with every street renamed to an HTML payload, the test clicks three
points, departs at school arrival, reads the score, asks for alternatives, picks one, exports
it as GeoJSON and re-scores the file, draws an area and reads its km, and downloads the
comparison CSV. Every figure the page shows is checked against the library function the
command uses; no console error, no dialog, no request leaving the loopback server, and the
payload shows as text.
"""

from __future__ import annotations

import dataclasses
import datetime as dt

import numpy as np
import pytest
from shapely.geometry import Polygon

from routerisk import CAUTION, datasets
from routerisk.analysis import dayplan, planning, review
from routerisk.analysis.scoring import parse_depart, score_routes
from routerisk.io import routes
from routerisk.serve.app import create_app

from ._browser import needs_chromium

PAYLOAD = "<img src=x onerror=alert(1)>"
POINTS = [(38.503153, -38.0143295), (38.5067564, -38.0103172), (38.5090085, -38.0022927)]
CORNERS = [(38.5010, -38.0160), (38.5010, -38.0040), (38.5085, -38.0040), (38.5085, -38.0160)]
DEPART = ("2027-03-09", "08:10")  # a Tuesday at school arrival: the school rule is in force


@pytest.fixture(scope="module")
def hostile_net(town_net):
    edges = town_net.edges.copy()
    edges["name"] = PAYLOAD
    sources = town_net.sources.copy()
    if "name" in sources.columns:
        sources["name"] = PAYLOAD
    return dataclasses.replace(town_net, edges=edges, sources=sources)


@pytest.mark.browser
@needs_chromium
def test_planning_page_end_to_end(hostile_net, tmp_path):
    from ._live_browser import LiveServer, Session, walk_through

    downloads = tmp_path / "downloads"
    downloads.mkdir()
    with LiveServer(create_app(hostile_net)) as server, Session(downloads=downloads) as s:
        seen = walk_through(
            s,
            server.url,
            points=POINTS,
            corners=CORNERS,
            depart=DEPART,
            plan_files=[datasets.get_path("runs"), datasets.get_path("routes")],
            plan_date=DEPART[0],
        )
        problems = s.seen()
    net, tz = hostile_net, hostile_net.timezone
    depart = parse_depart("T".join(DEPART), tz)

    # the score shown is the library's score of the three clicked points
    assert seen["placed"] == 3
    clicked = routes.PlannedRoute("check", np.array(seen["waypoints"]))
    planned = score_routes(net, [clicked], [depart])[0]
    assert seen["score"] == f"{planned.risk:.3f}"
    assert planned.rule_breaks  # school hours: the plan breaks the school rule

    # the chosen alternative, exported, re-scores to the number the page showed
    assert seen["picked_label"].startswith("alternative")
    exported = routes.read_routes(seen["export"], default_tz=tz)
    again = score_routes(net, exported)[0]
    assert again.depart == depart
    assert seen["picked"] == f"{again.risk:.3f}"
    assert again.risk < planned.risk

    # the area's km are review's figure for the drawn polygon
    ring = Polygon(seen["area_ring"])
    from geopandas import GeoSeries

    geom = GeoSeries([ring], crs="EPSG:4326").to_crs(net.crs).iloc[0]
    figures = review.review_areas(net, [review.Area("drawn area", 0, geom, "", "")])
    assert seen["area_km"] == f"{figures.areas[0]['network_km']:.3f}"
    assert float(seen["area_km"]) > 1.0

    # the day plan of the runs file opened on the page is the plan command's
    plan = dayplan.plan_day(
        net, planning.read_runs(datasets.get_path("runs")), dt.date.fromisoformat(DEPART[0])
    ).to_dict()
    assert f"total risk {plan['total_risk']:.3f}" in seen["plan_summary"]
    assert seen["plan_rows"] == len(plan["runs"])

    # the comparison holds the plan and the alternatives, downloadable with the caution
    assert seen["compare_rows"] >= 2
    csv = seen["csv"].read_text(encoding="utf-8")
    assert csv.startswith("# " + CAUTION) and csv.count("\n") >= 4
    assert seen["caution"] == CAUTION

    # nothing ran, nothing left loopback, the payload is text
    assert problems["errors"] == [] and problems["dialogs"] == []
    outside = [u for u in problems["requests"] if not u.startswith((server.url, "data:", "blob:"))]
    assert outside == []
    assert PAYLOAD in seen["body_text"]  # hot spots list the streets by name
    assert seen["tooltips"] and all(t.startswith(PAYLOAD + " · ") for t in seen["tooltips"])
    assert seen["img_x"] == 0

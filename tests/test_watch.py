"""Early warnings end to end on the sample town's invented drives and event log."""

from __future__ import annotations

import json

import pytest

from routerisk import datasets, watch
from routerisk.cli import main
from routerisk.overlay import apply_overlay
from routerisk.scoring import Scorer


@pytest.fixture(scope="module")
def result(town_net):
    return watch.watch(town_net, datasets.get_path("events"), datasets.get_path("drives"))


def test_planted_hot_spot_is_flagged(result):
    # sample_area/make_drives.py plants a 3x event rate on a stretch of Tillerman Avenue
    flagged = result.segments[result.segments["flagged"]]
    assert "Tillerman Avenue" in set(flagged["street"])
    top = result.segments.iloc[0]
    assert top["street"] == "Tillerman Avenue" and top["events"] > 2 * top["expected"]


def test_every_event_is_matched_or_reported(result):
    n = sum(1 for _ in open(datasets.get_path("events"))) - 1
    assert len(result.matched) + len(result.rejected) == n
    assert result.segments["events"].sum() == len(result.matched)


def test_bad_events_are_reported_not_matched(town_net, tmp_path):
    lines = open(datasets.get_path("events")).read().splitlines()
    header, first = lines[0], lines[1]
    t, lat, lon, kind, veh = first.split(",")
    bad = [header, first,
           f"{t},{float(lat) + 0.01:.7f},{lon},{kind},{veh}",  # ~1.1 km off the route
           f"2026-01-01T03:00:00-03:00,{lat},{lon},{kind},{veh}",  # no drive then
           f"{t},95.0,{lon},{kind},{veh}",  # latitude out of range
           f"not-a-time,{lat},{lon},{kind},{veh}"]
    path = tmp_path / "events.csv"
    path.write_text("\n".join(bad) + "\n")
    res = watch.watch(town_net, path, datasets.get_path("drives"))
    assert len(res.matched) == 1
    reasons = " | ".join(res.rejected["reason"])
    assert "off the route" in reasons and "outside the times" in reasons
    assert len(res.rejected) == 4


def test_overlay_feeds_back_into_scoring(town_dir, town_net, tmp_path, capsys):
    out = tmp_path / "w"
    code = main(["watch", str(datasets.get_path("events")), "--drives",
                 str(datasets.get_path("drives")), "--network", str(town_dir), "--out",
                 str(out), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0 and set(data) >= {"segments", "alerts", "fdr"}
    assert set(data["segments"][0]) >= {"edge", "street", "events", "km_driven", "expected",
                                        "eb_rate", "p_value", "flagged"}
    over = apply_overlay(town_net, out / "overlay.yaml")
    assert over.profile.fingerprint != town_net.profile.fingerprint
    flagged = [tuple(s["edge"]) for s in data["segments"] if s["flagged"]]
    e = flagged[0]
    import datetime as dt

    t = dt.datetime(2027, 3, 9, 11, 0, tzinfo=town_net.timezone)
    before = Scorer(town_net).score("x", [e], t).risk
    after = Scorer(over).score("x", [e], t).risk
    assert after > before

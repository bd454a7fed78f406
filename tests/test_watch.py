"""Early warnings end to end on the sample town's invented drives and event log.

The sample drives and events come from sample_area/make_drives.py: events follow the modelled
exposure only to the power 0.75, each street block has its own gamma factor (shape 6), and one
block of Tillerman Avenue (corners 2 and 3) carries 4 times the rate. Those are the generator's
settings (design targets of the demo data), not outside values.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import re
import shutil

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from routerisk import datasets
from routerisk.analysis import watch
from routerisk.analysis.scoring import Scorer
from routerisk.cli import main
from routerisk.errors import OptionError
from routerisk.network.overlay import apply_overlay

HOT_BLOCK = "2-3"  # sample_area/make_drives.py HOT_BLOCK
HOT_STREET = "Tillerman Avenue"


@pytest.fixture(scope="module")
def result(town_net):
    return watch.watch(town_net, datasets.get_path("events"), datasets.get_path("drives"))


def test_planted_hot_block_is_flagged_with_at_most_one_false_flag(result):
    # acceptance (issue 17): default watch = block units, auto test -> negative binomial
    assert result.unit == "block" and result.test_used == "negbin"
    assert result.dispersion["modelled"].significant
    flagged = result.segments[result.segments["flagged"]]
    assert HOT_BLOCK in set(flagged["unit"]), flagged[["unit", "street", "p_value"]]
    top = flagged[flagged["unit"] == HOT_BLOCK].iloc[0]
    assert top["street"] == HOT_STREET and top["events"] > 2 * top["expected"]
    assert len(flagged) <= 2, flagged[["unit", "street", "p_value"]]


def test_every_event_is_matched_or_reported(result):
    n = sum(1 for _ in open(datasets.get_path("events"))) - 1
    assert len(result.matched) + len(result.rejected) == n
    assert result.segments["events"].sum() == len(result.matched)


def test_block_is_one_discovery_with_counts_per_direction(town_net, result):
    seg = result.segments
    assert (seg["events_forward"] + seg["events_backward"] == seg["events"]).all()
    assert np.allclose(seg["km_forward"] + seg["km_backward"], seg["km"])
    hot = seg[seg["unit"] == HOT_BLOCK].iloc[0]
    assert hot["events_forward"] > 0 and hot["events_backward"] > 0  # driven both ways
    mem = result.members[result.members["unit"] == HOT_BLOCK]
    assert {(2, 3), (3, 2)} <= set(zip(mem["u"], mem["v"], strict=True))
    assert mem.loc[mem["forward"], "events"].sum() == hot["events_forward"]
    # no two units share an edge pair: both directions of a block are one unit
    units = watch.discovery_units(town_net.edges, "block")
    pair = [
        (min(a, b), max(a, b), k)
        for a, b, k in zip(units["u"], units["v"], units["key"], strict=True)
    ]
    assert pd.DataFrame({"p": pair, "u": units["unit"]}).groupby("p")["u"].nunique().max() == 1
    seg_units = watch.discovery_units(town_net.edges, "segment")
    assert seg_units["unit"].nunique() == len(town_net.edges)
    assert units["unit"].nunique() == len(set(pair)) < len(town_net.edges)


def test_block_merges_the_run_between_intersections():
    # 1-2-3 is one street through node 2, where nothing else meets (likewise 3-5-6 through
    # node 5); node 3 is an intersection; at node 6 the street name changes, so 5-6 and 6-7
    # stay apart.
    links = [
        (1, 2, "Alder"),
        (2, 3, "Alder"),
        (3, 4, "Birch"),
        (3, 5, "Birch"),
        (5, 6, "Birch"),
        (6, 7, "Cedar"),
    ]
    rows = [(a, b, n) for a, b, n in links] + [(b, a, n) for a, b, n in links[:3]]
    edges = pd.DataFrame(
        {"name": [n for *_, n in rows]},
        index=pd.MultiIndex.from_tuples([(a, b, 0) for a, b, _ in rows], names=["u", "v", "key"]),
    )
    units = watch.discovery_units(edges, "block").set_index(["u", "v"])
    assert units.loc[(1, 2), "unit"] == units.loc[(3, 2), "unit"] == "1-3"
    assert units.loc[(1, 2), "forward"] and not units.loc[(3, 2), "forward"]
    assert units.loc[(2, 3), "forward"] and not units.loc[(2, 1), "forward"]
    assert units.loc[(3, 4), "unit"] != units.loc[(3, 5), "unit"]
    assert units.loc[(3, 5), "unit"] == units.loc[(5, 6), "unit"] == "3-6"  # through node 5
    assert units.loc[(5, 6), "unit"] != units.loc[(6, 7), "unit"]
    assert units["unit"].nunique() == 4


def test_modelled_and_distance_expectations_are_both_computed(result):
    seg = result.segments
    assert (seg["disagree"] == (seg["flagged_modelled"] != seg["flagged_distance"])).all()
    # distance-only: one rate per km for every unit; modelled: one rate per weighted km
    r_dist = seg["expected_distance"] / seg["km"]
    assert r_dist.max() == pytest.approx(r_dist.min(), rel=1e-9)
    r_mod = seg["expected_modelled"] / (seg["km"] * seg["weight"])
    assert r_mod.max() == pytest.approx(r_mod.min(), rel=1e-9)
    # the hot block sits on a street the model rates as little exposed, so the modelled
    # expectation is lower and flags it; the distance-only one does not: marked as disagreeing
    hot = seg[seg["unit"] == HOT_BLOCK].iloc[0]
    assert hot["expected_modelled"] < hot["expected_distance"]
    assert hot["flagged_modelled"] and not hot["flagged_distance"] and hot["disagree"]


def test_chart_designs_reported_for_every_group(result):
    d = result.designs
    assert len(d) == result.periods["group"].nunique() == result.family["charts"]
    assert (d["h"] > 0).all() and (d["k"] > 0).all() and (d["mu0"] > 0).all()
    assert result.family["family_arl0"] < d["arl0"].min()  # many charts alarm sooner
    assert result.family["false_alarms_per_30_days"] > 0
    assert "leave-one-group-out" in result.baseline


def test_bad_events_are_reported_not_matched(town_net, tmp_path):
    lines = open(datasets.get_path("events")).read().splitlines()
    header, first = lines[0], lines[1]
    t, lat, lon, kind, veh = first.split(",")
    bad = [
        header,
        first,
        f"{t},{float(lat) + 0.01:.7f},{lon},{kind},{veh}",  # ~1.1 km off the route
        f"2026-01-01T03:00:00-03:00,{lat},{lon},{kind},{veh}",  # no drive then
        f"{t},95.0,{lon},{kind},{veh}",  # latitude out of range
        f"not-a-time,{lat},{lon},{kind},{veh}",
    ]
    path = tmp_path / "events.csv"
    path.write_text("\n".join(bad) + "\n")
    drives = tmp_path / "drives"
    drives.mkdir()
    shutil.copy(datasets.get_path("drives") / "drive-01.gpx", drives)
    res = watch.watch(town_net, path, drives)
    assert len(res.matched) == 1
    reasons = " | ".join(res.rejected["reason"])
    assert "off the route" in reasons and "outside the times" in reasons
    assert len(res.rejected) == 4


# ------------------------------------------------------------------ small scenarios
def _shifted(tmp_path, names, minutes):
    """Copy sample drives shifted by ``minutes``, with the sample events of their times."""
    drives = tmp_path / "drives"
    drives.mkdir()
    shift = dt.timedelta(minutes=minutes)
    spans = []
    for name in names:
        text = (datasets.get_path("drives") / name).read_text()
        times = re.findall(r"<time>([^<]+)</time>", text)
        spans.append((dt.datetime.fromisoformat(times[0]), dt.datetime.fromisoformat(times[-1])))

        def move(m):
            t = dt.datetime.fromisoformat(m.group(1)) + shift
            return f"<time>{t.strftime('%Y-%m-%dT%H:%M:%SZ')}</time>"

        (drives / name).write_text(re.sub(r"<time>([^<]+)</time>", move, text))
    lines = open(datasets.get_path("events")).read().splitlines()
    keep = [lines[0]]
    for line in lines[1:]:
        t = dt.datetime.fromisoformat(line.split(",")[0])
        if any(a <= t <= b for a, b in spans):
            keep.append(",".join([(t + shift).isoformat(), *line.split(",")[1:]]))
    (tmp_path / "events.csv").write_text("\n".join(keep) + "\n")
    return tmp_path / "events.csv", drives, len(keep) - 1


def test_hour_groups_split_a_drive_by_the_time_each_edge_is_driven(town_net, tmp_path):
    # issue 17 point 1: drive-01 moved to 08:57-09:01 local (Monday 2027-03-01); before the
    # fix all its km went to "mon 08" and "mon 09" had events but no expectation.
    ev, drives, n_ev = _shifted(tmp_path, ["drive-01.gpx"], 55)
    res = watch.watch(
        town_net, ev, drives, group="hour", baseline_rate=1.0, unit="segment", expected="distance"
    )
    per = res.periods.set_index("group")
    assert set(per.index) == {"mon 08", "mon 09"}, per
    assert per["events"].sum() == n_ev and per.loc["mon 09", "events"] > 0
    assert per.loc["mon 08", "expected"] > 0 and per.loc["mon 09", "expected"] > 0
    assert per["km"].sum() == pytest.approx(res.segments["km"].sum(), rel=1e-9)
    # independent check: share of the GPS track (fix to fix) driven before 09:00 local
    text = (drives / "drive-01.gpx").read_text()
    lat = np.array([float(x) for x in re.findall(r'lat="([^"]+)"', text)])
    lon = np.array([float(x) for x in re.findall(r'lon="([^"]+)"', text)])
    t = pd.to_datetime(re.findall(r"<time>([^<]+)</time>", text))
    step = np.hypot(np.diff(lat) * 111.2, np.diff(lon) * 111.2 * math.cos(math.radians(38.5)))
    nine = pd.Timestamp("2027-03-01T12:00:00Z")
    share_gps = step[t[1:] <= nine].sum() / step.sum()
    share = per.loc["mon 08", "km"] / per["km"].sum()
    assert share == pytest.approx(share_gps, abs=0.1), (share, share_gps)
    assert 0.5 < share < 0.9  # about 3 of its 4 minutes fall before nine


def test_split_by_hour_at_midnight():
    # a visit 23:58-00:03 local splits 2:3 across the two local days (derived here)
    tz = "Etc/GMT+3"
    t0 = pd.Timestamp("2027-03-02T02:58:00Z").value
    t1 = pd.Timestamp("2027-03-02T03:03:00Z").value
    vis, hb, km = watch.split_by_hour(np.array([t0]), np.array([t1]), np.array([5.0]), tz)
    assert vis.tolist() == [0, 0] and km.tolist() == pytest.approx([2.0, 3.0])
    assert watch._day_iso(hb).tolist() == ["2027-03-01", "2027-03-02"]
    assert watch._hour_of_week(hb).tolist() == ["mon 23", "tue 00"]


def test_baselines():
    p = pd.DataFrame(
        {
            "group": ["a", "a", "b", "b", "c"],
            "period": ["2027-03-01", "2027-03-02", "2027-03-01", "2027-03-03", "2027-03-02"],
            "events": [4, 6, 1, 0, 3],
            "km": 1.0,
            "wkm": [2.0, 2.0, 1.0, 3.0, 2.0],
        }
    )
    watched, rate, how = watch._baseline(p, None, None, "modelled")
    # leave one group out (derived here): a -> (1 + 0 + 3) / (1 + 3 + 2)
    assert rate["a"] == pytest.approx(4 / 6) and rate["b"] == pytest.approx(13 / 6)
    assert rate["c"] == pytest.approx(11 / 8) and len(watched) == 5
    assert "leave-one-group-out" in how
    watched, rate, how = watch._baseline(p, "2027-03-01", None, "modelled")
    assert set(watched["period"]) == {"2027-03-02", "2027-03-03"}
    assert rate["a"] == pytest.approx(5 / 3) and "calibration" in how
    watched, rate, how = watch._baseline(p, None, 0.25, "distance")
    assert set(rate.values()) == {0.25} and len(watched) == 5 and "given" in how
    with pytest.raises(OptionError, match="no events"):
        watch._baseline(p.assign(events=0), "2027-03-01", None, "modelled")
    with pytest.raises(OptionError, match="after"):
        watch._baseline(p, "2027-03-03", None, "modelled")


def test_cli_options_reach_the_analysis(town_dir, tmp_path, capsys):
    ev, drives, _ = _shifted(
        tmp_path, ["drive-01.gpx", "drive-02.gpx", "drive-05.gpx", "drive-06.gpx"], 0
    )
    code = main(
        [
            "watch",
            str(ev),
            "--drives",
            str(drives),
            "--network",
            str(town_dir),
            "--unit",
            "segment",
            "--test",
            "poisson",
            "--arl0-family",
            "200",
            "--baseline-until",
            "2027-03-01",
            "--json",
        ]
    )
    doc = json.loads(capsys.readouterr().out)
    assert code == 0
    assert doc["unit"] == "segment" and doc["test"] == {
        "asked": "poisson",
        "used": "poisson",
        "dispersion": doc["test"]["dispersion"],
    }
    assert all(re.fullmatch(r"\d+-\d+-\d+", s["unit"]) for s in doc["segments"])
    assert doc["baseline"].startswith("calibration period up to 2027-03-01")
    fam, charts = doc["cusum"]["family"], doc["cusum"]["charts"]
    assert fam["charts"] == len(charts) > 0 and fam["arl0_each"] == 200 * len(charts)
    assert all(c["arl0_target"] == 200 * len(charts) for c in charts)
    assert all(set(c) >= {"group", "mu0", "k", "h"} for c in charts)
    # poisson p-values are scipy's exact Poisson tail at the expected count (reference library)
    for s in doc["segments"]:
        assert s["p_value"] == pytest.approx(
            stats.poisson.sf(s["events"] - 1, s["expected"]), rel=1e-5
        )
    with pytest.raises(OptionError):
        watch.watch(None, ev, drives, baseline_until="2027-03-01", baseline_rate=1.0)


def test_outputs_say_what_was_used_and_overlay_feeds_back(town_dir, town_net, tmp_path, capsys):
    out = tmp_path / "w"
    code = main(
        [
            "watch",
            str(datasets.get_path("events")),
            "--drives",
            str(datasets.get_path("drives")),
            "--network",
            str(town_dir),
            "--out",
            str(out),
            "--json",
        ]
    )
    data = json.loads(capsys.readouterr().out)
    assert code == 0 and set(data) >= {"segments", "alerts", "fdr", "test", "cusum", "unit"}
    assert data["test"]["used"] == "negbin" and data["unit"] == "block"
    assert set(data["segments"][0]) >= {
        "unit",
        "street",
        "events",
        "events_forward",
        "events_backward",
        "km_driven",
        "expected",
        "eb_rate",
        "p_value",
        "flagged",
        "edges",
        "disagree",
    }
    for name in ("segments.csv", "charts.csv"):
        head = "".join(x for x in (out / name).read_text().splitlines(True) if x.startswith("#"))
        assert "test: negbin p-values" in head and "leave-one-group-out" in head, name
        assert "do not model" in head
    html = (out / "report.html").read_text()
    assert "negbin" in html and "disagree" in html and "leave-one-group-out" in html
    assert "negbin" in (out / "map.html").read_text()
    over = apply_overlay(town_net, out / "overlay.yaml")
    assert over.profile.fingerprint != town_net.profile.fingerprint
    hot = next(s for s in data["segments"] if s["unit"] == HOT_BLOCK)
    assert hot["flagged"] and len(hot["edges"]) >= 2  # both directions in the overlay
    t = dt.datetime(2027, 3, 9, 11, 0, tzinfo=town_net.timezone)
    for e in hot["edges"]:
        edge = tuple(e["edge"])
        assert Scorer(over).score("x", [edge], t).risk > Scorer(town_net).score("x", [edge], t).risk

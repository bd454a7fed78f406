"""Plain words: headings, p-values, local times, street blocks, the glossary on reports."""

from __future__ import annotations

import datetime as dt

import geopandas as gpd
import pandas as pd
from shapely.geometry import LineString

from routerisk.render import report, words


def test_p_values_read_as_people_write_them():
    # common practice, no source: p below 0.001 is written "< 0.001", not "0.000"
    assert words.p_text(0.0000004) == "< 0.001"
    assert words.p_text(0.001) == "0.001"
    assert words.p_text(0.04567) == "0.046"
    assert words.p_text(float("nan")) == ""


def test_local_times_read_as_people_read_them():
    assert words.when("2027-03-09T15:05:00-03:00") == "Tue 9 Mar 2027 15:05"
    assert words.when("2024-05-01T00:00:00Z") == "Wed 1 May 2024 00:00 UTC"
    assert words.when(dt.datetime(2027, 3, 13, 11, 30)) == "Sat 13 Mar 2027 11:30"
    assert words.when("not a time") == "not a time"
    assert words.is_iso_time("2027-03-09T07:15-03:00")
    assert not words.is_iso_time("Mon 07:00")


def test_headings_in_words():
    assert words.heading("rank") == "rank (1 = lowest total risk)"
    assert words.heading("km_quiet") == "km in the quiet band"
    assert words.heading("km_26to35mph") == "km at 26-35 mph"
    assert words.heading("share_in_school") == "share of length near school"
    assert words.heading("q_value") == "adjusted p-value (q)"
    assert words.heading("rule_0") == "covered by hard rule 0"
    assert words.heading("some_new_column") == "some new column"


def _edges():
    # a plus-shaped crossing of two named streets, in metres; hand-built
    lines = {
        (1, 2, 0): ("Hobbin Street", [(0, 0), (100, 0)]),
        (2, 3, 0): ("Hobbin Street", [(100, 0), (200, 0)]),
        (3, 2, 0): ("Hobbin Street", [(200, 0), (100, 0)]),
        (4, 2, 0): ("Bosky Lane", [(100, -100), (100, 0)]),
        (3, 5, 0): ("Quarry Lane", [(200, 0), (200, 100)]),
    }
    idx = pd.MultiIndex.from_tuples(list(lines), names=["u", "v", "key"])
    return gpd.GeoDataFrame(
        {"name": [n for n, _ in lines.values()]},
        index=idx,
        geometry=[LineString(c) for _, c in lines.values()],
        crs="EPSG:32624",
    )


def test_blocks_tell_one_street_apart_by_direction_and_cross_streets():
    b = words.Blocks(_edges())
    assert b.label(2, 3) == "Hobbin Street, eastbound, Bosky Lane to Quarry Lane"
    assert b.label(3, 2) == "Hobbin Street, westbound, Quarry Lane to Bosky Lane"
    assert b.label(1, 2) == "Hobbin Street, eastbound, to Bosky Lane"
    assert b.label(4, 2) == "Bosky Lane, northbound, to Hobbin Street"
    assert b.label(9, 9) == ""


def test_reports_carry_a_glossary_of_the_terms_they_use():
    df = pd.DataFrame(
        {
            "street": ["<b>x</b>"],
            "p_value": [0.0001],
            "q_value": [0.2],
            "depart": ["2027-03-09T07:15:00-03:00"],
        }
    )
    page = report.page("t", [report.section("Flagged", report.frame_html(df, index=False))])
    assert "Words used on this page" in page
    assert "<dt>p-value</dt>" in page and "<dt>adjusted p-value (q)</dt>" in page
    assert "&lt; 0.001" in page and "0.200" in page
    assert "Tue 9 Mar 2027 07:15" in page and "2027-03-09T07:15" not in page
    assert "&lt;b&gt;x&lt;/b&gt;" in page  # map data stays escaped
    assert "<dt>CUSUM</dt>" not in page  # only the terms the page uses

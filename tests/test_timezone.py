"""The area's time zone: looked up offline from the extract, shown as people read it.

Real extract: pyogrio's test fixture ``sample.osm.pbf`` (OpenStreetMap data, ODbL 1.0, carried
by the pyogrio wheel on PyPI), a small piece of an English town: Europe/London, UTC+01:00 in
summer. The zone boundaries come from timezonefinder's bundled data (a reference library).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pyogrio
import pytest

from routerisk.io.timezones import infer_timezone, zone_label

PBF = Path(pyogrio.__file__).parent / "tests" / "fixtures" / "sample.osm.pbf"

RULE_PROFILE = """\
version: 1
name: morning rule on residential streets
categories:
  school:
    select:
      - {amenity: [school]}
    weight: 1.0
    radius_m: 100
rules:
  - name: residential streets at 08:00-09:00
    road_classes: [residential, unclassified, tertiary, secondary, primary]
    windows:
      - {days: [mon, tue, wed, thu, fri], start: "08:00", end: "09:00"}
"""


def test_zone_label_reads_etc_names_the_right_way_round():
    # POSIX sign convention of the tz database: Etc/GMT+3 is UTC-3 (common practice, no source)
    assert zone_label("Etc/GMT+3") == "UTC-03:00"
    assert zone_label("Etc/GMT-10") == "UTC+10:00"
    assert zone_label("UTC") == "UTC+00:00"
    assert zone_label("Etc/GMT+0") == "UTC+00:00"
    assert zone_label("Europe/London") == "Europe/London"


def test_infer_timezone_offline():
    # timezonefinder's data: the sample town in open sea at 38 W is in the nautical zone GMT+3
    assert infer_timezone(-38.0, 38.5) == "Etc/GMT+3"
    assert infer_timezone(-0.229, 51.767) == "Europe/London"


@pytest.fixture(scope="module")
def real_net(tmp_path_factory):
    d = tmp_path_factory.mktemp("tz")
    prof = d / "rule.yaml"
    prof.write_text(RULE_PROFILE)
    out = d / "net"
    p = subprocess.run(
        [
            sys.executable,
            "-m",
            "routerisk",
            "build",
            str(PBF),
            "--out",
            str(out),
            "--profile",
            str(prof),
            "--all-parts",
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    return d, out, p.stdout


def test_build_looks_up_and_prints_the_zone(real_net):
    _, out, stdout = real_net
    meta = json.loads((out / "meta.json").read_text())
    assert meta["timezone"] == "Europe/London"
    assert "looked up" in meta["timezone_source"]
    assert "local time zone: Europe/London" in stdout


def _route(d: Path, out: Path) -> Path:
    import geopandas as gpd
    from shapely.geometry import LineString

    edges = gpd.read_file(out / "network.gpkg", layer="edges").to_crs(4326)
    res = edges[
        edges["highway"].isin(["residential", "unclassified", "tertiary", "secondary", "primary"])
    ]
    line = res.geometry.iloc[0]
    pts = list(line.coords)
    route = d / "route.geojson"
    gj = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"name": "real-1"},
                "geometry": LineString([pts[0], pts[-1]]).__geo_interface__,
            }
        ],
    }
    route.write_text(json.dumps(gj))
    return route


def test_rule_breaks_and_times_in_local_time(real_net):
    d, out, _ = real_net
    route = _route(d, out)

    def score(depart: str) -> dict:
        p = subprocess.run(
            [
                sys.executable,
                "-m",
                "routerisk",
                "score",
                str(route),
                "--network",
                str(out),
                "--depart",
                depart,
                "--json",
            ],
            capture_output=True,
            text=True,
            check=True,
        )
        data = json.loads(p.stdout)
        return (data["routes"] if isinstance(data, dict) else data)[0]

    # 07:30 UTC on a summer Monday is 08:30 in London (BST): the rule is in force.
    at = score("2026-07-06T07:30:00+00:00")
    assert at["depart"].startswith("2026-07-06T08:30") and at["depart"].endswith("+01:00")
    assert len(at["rule_breaks"]) >= 1
    # A time without an offset is local: 07:30 London time is before the window.
    before = score("2026-07-06T07:30")
    assert before["depart"].endswith("+01:00")
    assert len(before["rule_breaks"]) == 0


def test_one_copy_of_zones_and_years():
    # issue 19: the accepted years and the zone helpers live in routerisk.io.timezones only;
    # the old places re-export the same objects
    from routerisk.analysis import scoring, watch
    from routerisk.io import timezones
    from routerisk.io.routes import common
    from routerisk.network import folder

    assert scoring.YEARS is timezones.YEARS is common.YEARS is watch.YEARS
    assert folder.check_timezone is timezones.check_timezone  # imported, not redefined
    assert folder.infer_timezone is timezones.infer_timezone
    assert not hasattr(folder, "zone_label")


def test_resolve_zone_names_the_field_and_passes_tzinfo_through():
    import datetime as dt

    from routerisk.errors import OptionError
    from routerisk.io.timezones import resolve_zone

    utc = dt.UTC
    assert resolve_zone(None, field="tz") is None
    assert resolve_zone(utc, field="tz") is utc
    assert str(resolve_zone("Etc/GMT+3", field="tz")) == "Etc/GMT+3"
    with pytest.raises(OptionError) as err:
        resolve_zone("Nowhere/Atlantis", field="default_tz")
    assert err.value.field == "default_tz"
    assert "unknown time zone 'Nowhere/Atlantis'" in str(err.value)


def test_wall_clock_ns_is_local_time():
    import numpy as np

    from routerisk.io.timezones import wall_clock_ns

    # 2027-03-09 12:00 UTC is 09:00 at UTC-3 (Etc/GMT+3; POSIX sign, common practice, no source)
    t = np.array([np.datetime64("2027-03-09T12:00", "ns").astype(np.int64)])
    local = wall_clock_ns(t, "Etc/GMT+3")
    assert np.datetime64(int(local[0]), "ns") == np.datetime64("2027-03-09T09:00", "ns")
    assert wall_clock_ns(np.zeros(0, dtype=np.int64), "UTC").size == 0

"""Profile validation: every bad value names the file and the key."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
import yaml

from routerisk.errors import ProfileError
from routerisk.profile import DEFAULT_PROFILE, load_profile

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture()
def doc():
    return yaml.safe_load(DEFAULT_PROFILE.read_text())


def _write(tmp_path, data) -> Path:
    p = tmp_path / "p.yaml"
    p.write_text(yaml.safe_dump(data))
    return p


def test_bundled_default_equals_configs_copy():
    assert (ROOT / "configs" / "default.yaml").read_bytes() == DEFAULT_PROFILE.read_bytes()


@pytest.mark.parametrize("name", sorted(p.name for p in (ROOT / "configs").glob("*.yaml")))
def test_configs_load(name):
    prof = load_profile(ROOT / "configs" / name)
    assert len(prof.fingerprint) == 16


def test_fingerprint_stable_and_sensitive(tmp_path, doc):
    a = load_profile(_write(tmp_path, doc)).fingerprint
    assert load_profile(_write(tmp_path, copy.deepcopy(doc))).fingerprint == a
    doc["categories"]["school"]["weight"] = 3.5
    assert load_profile(_write(tmp_path, doc)).fingerprint != a


def _bad(tmp_path, doc, key):
    with pytest.raises(ProfileError) as err:
        load_profile(_write(tmp_path, doc))
    line = err.value.one_line()
    assert "p.yaml" in line and key in line and "\n" not in line
    return line


def test_negative_weight(tmp_path, doc):
    doc["categories"]["school"]["weight"] = -1
    _bad(tmp_path, doc, "categories.school.weight")


def test_zero_radius(tmp_path, doc):
    doc["categories"]["retail"]["radius_m"] = 0
    _bad(tmp_path, doc, "categories.retail.radius_m")


def test_unknown_key(tmp_path, doc):
    doc["categories"]["park"]["wieght"] = 1
    _bad(tmp_path, doc, "categories.park.wieght")


def test_unknown_top_key(tmp_path, doc):
    doc["colour"] = "red"
    _bad(tmp_path, doc, "colour")


def test_unknown_decay(tmp_path, doc):
    doc["categories"]["park"]["decay"] = "cubic"
    _bad(tmp_path, doc, "categories.park.decay")


def test_wrong_type(tmp_path, doc):
    doc["categories"]["park"]["weight"] = "heavy"
    _bad(tmp_path, doc, "categories.park.weight")


def test_overlapping_windows(tmp_path, doc):
    doc["time_profiles"]["school_days"]["windows"][1]["start"] = "08:30"
    _bad(tmp_path, doc, "time_profiles.school_days.windows[1]")


def test_unknown_category_in_rule(tmp_path, doc):
    doc["rules"][0]["category"] = "zoo"
    _bad(tmp_path, doc, "rules[0].category")


def test_bad_clock(tmp_path, doc):
    doc["rules"][0]["windows"][0]["start"] = "7am"
    _bad(tmp_path, doc, "rules[0].windows[0].start")


def test_unparsable_yaml(tmp_path):
    p = tmp_path / "p.yaml"
    p.write_text("categories: [unclosed\n")
    with pytest.raises(ProfileError, match="cannot parse"):
        load_profile(p)


def test_missing_file(tmp_path):
    with pytest.raises(ProfileError, match="not found"):
        load_profile(tmp_path / "none.yaml")


def test_toml_profile(tmp_path):
    p = tmp_path / "p.toml"
    p.write_text('version = 1\nname = "t"\n[categories.school]\nselect = [{amenity = '
                 '"school"}]\nweight = 1.0\nradius_m = 50\n')
    prof = load_profile(p)
    assert prof.category_names == ("school",)


def test_time_profile_multipliers():
    prof = load_profile()
    # Tuesday 08:10 is in the school arrival window (x3); Tuesday 11:00 is not (x1);
    # Saturday 08:10 is outside every window (the default 0.2).
    tue = 1 * 1440
    m = prof.multipliers(np.array([tue + 8 * 60 + 10, tue + 11 * 60, 5 * 1440 + 8 * 60 + 10]))
    j = prof.category_names.index("school")
    assert m[:, j].tolist() == [3.0, 1.0, 0.2]


def test_window_past_midnight(tmp_path, doc):
    from routerisk.profile import MINUTES_PER_WEEK, Window

    w = Window(("sun",), 23 * 60, 60)  # Sunday 23:00 to Monday 01:00
    mins = w.minutes().tolist()
    # exactly the two hours, wrapping from the end of the week to its start (Monday 00:00 = 0)
    assert sorted(mins) == [*range(60), *range(6 * 1440 + 23 * 60, MINUTES_PER_WEEK)]
    # the same window read from a profile file gives its multiplier in those minutes only
    doc["time_profiles"] = {**doc.get("time_profiles", {}), "late": {
        "default": 1.0, "windows": [{"days": ["sun"], "start": "23:00", "end": "01:00",
                                     "multiplier": 3.0}]}}
    prof = load_profile(_write(tmp_path, doc))
    by_minute = prof.time_profile("late").by_minute
    assert by_minute[6 * 1440 + 23 * 60] == 3.0 and by_minute[59] == 3.0
    assert by_minute[60] == 1.0 and by_minute[6 * 1440 + 23 * 60 - 1] == 1.0
    assert int((by_minute == 3.0).sum()) == 120

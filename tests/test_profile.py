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
    p.write_text(
        'version = 1\nname = "t"\n[categories.school]\nselect = [{amenity = '
        '"school"}]\nweight = 1.0\nradius_m = 50\n'
    )
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
    doc["time_profiles"] = {
        **doc.get("time_profiles", {}),
        "late": {
            "default": 1.0,
            "windows": [{"days": ["sun"], "start": "23:00", "end": "01:00", "multiplier": 3.0}],
        },
    }
    prof = load_profile(_write(tmp_path, doc))
    by_minute = prof.time_profile("late").by_minute
    assert by_minute[6 * 1440 + 23 * 60] == 3.0 and by_minute[59] == 3.0
    assert by_minute[60] == 1.0 and by_minute[6 * 1440 + 23 * 60 - 1] == 1.0
    assert int((by_minute == 3.0).sum()) == 120


# -- issue 17: time profiles on baseline and crossings, likelihood by speed, smooth gaussian --


def test_street_time_profiles_are_read_and_fingerprinted(tmp_path, doc):
    prof = load_profile(_write(tmp_path, doc))
    assert prof.baseline_time_profile == "street_presence"
    assert prof.crossing_time_profile == "street_presence"
    base, cross = prof.street_multipliers(np.array([2 * 60, 3 * 1440 + 11 * 60]))
    assert base.tolist() == [0.2, 1.0] and cross.tolist() == [0.2, 1.0]  # Mon 02:00, Thu 11:00
    a = prof.fingerprint
    doc["crossing_time_profile"] = "daytime"
    assert load_profile(_write(tmp_path, doc)).fingerprint != a
    doc.pop("crossing_time_profile")
    doc["baseline"].pop("time_profile")
    plain = load_profile(_write(tmp_path, doc))
    assert plain.baseline_time_profile is None and plain.fingerprint != a
    assert plain.street_multipliers(np.arange(10080))[0].tolist() == [1.0] * 10080


def test_unset_model_options_leave_the_fingerprint_as_it_was(tmp_path, doc):
    # A profile without the new keys hashes the same content as before they existed.
    doc["baseline"].pop("time_profile")
    doc.pop("crossing_time_profile")
    d = load_profile(_write(tmp_path, doc)).to_dict()
    assert not {"baseline_time_profile", "crossing_time_profile", "likelihood"} & set(d)


def test_unknown_baseline_time_profile(tmp_path, doc):
    doc["baseline"]["time_profile"] = "nights"
    _bad(tmp_path, doc, "baseline.time_profile")


def test_unknown_crossing_time_profile(tmp_path, doc):
    doc["crossing_time_profile"] = ["street_presence"]
    _bad(tmp_path, doc, "crossing_time_profile")


def test_likelihood_published_exponents(tmp_path, doc):
    # Nilsson's power model as re-estimated by Elvik (2009, TOI report 1034): crash counts
    # change with (v1 / v0) ** exponent, about 4.6 for fatal, 3.5 for serious injury and 2.0
    # for all injury crashes [memory, /work/shared/DOMAIN.md]. A 10 % rise in speed gives
    # 1.1 ** exponent times the crashes.
    for crashes, exponent in (("fatal", 4.6), ("serious_injury", 3.5), ("injury", 2.0)):
        doc["likelihood"] = {"model": "power", "crashes": crashes, "reference_mph": 30}
        like = load_profile(_write(tmp_path, doc)).likelihood
        assert like.exponent == exponent
        ref_kph = 30 * 1.609344
        assert float(like.factor(ref_kph)) == pytest.approx(1.0)
        assert float(like.factor(1.1 * ref_kph)) == pytest.approx(1.1**exponent)
    assert 1.1**4.6 == pytest.approx(1.55, abs=0.005)  # about 55 % more fatal crashes


def test_likelihood_is_off_by_default_and_fingerprinted(tmp_path, doc):
    prof = load_profile(_write(tmp_path, doc))
    assert prof.likelihood is None
    assert prof.likelihood_factor(np.array([20.0, 80.0])).tolist() == [1.0, 1.0]
    doc["likelihood"] = {"exponent": 2.5}
    on = load_profile(_write(tmp_path, doc))
    assert on.likelihood.crashes == "custom" and on.likelihood.reference_mph == 25.0
    assert on.fingerprint != prof.fingerprint


@pytest.mark.parametrize(
    ("value", "key"),
    [
        ({"crashes": "fatal", "exponent": 4.6}, "likelihood.exponent"),
        ({"crashes": "pedestrian"}, "likelihood.crashes"),
        ({"model": "exponential"}, "likelihood.model"),
        ({"exponent": -1}, "likelihood.exponent"),
        ({"reference_mph": 0}, "likelihood.reference_mph"),
        ({"speed": 3}, "likelihood.speed"),
        ("on", "likelihood"),
    ],
)
def test_bad_likelihood(tmp_path, doc, value, key):
    doc["likelihood"] = value
    _bad(tmp_path, doc, key)


def test_gaussian_smooth_is_continuous_at_the_radius(tmp_path, doc):
    doc["categories"]["retail"]["decay"] = "gaussian_smooth"
    prof = load_profile(_write(tmp_path, doc))
    cat = prof.category("retail")
    r = cat.radius_m
    eps = 1e-9 * r
    near = cat.nearness(np.array([0.0, r - eps, r, r + eps]))
    assert near[0] == 1.0
    assert abs(near[1] - near[3]) < 1e-8 and near[2] == 0.0  # no step at the radius
    d = np.linspace(0, r, 1001)
    assert (np.diff(cat.nearness(d)) <= 0).all()  # falls from 1 to 0
    # the shape: (exp(-d^2 / (2 sigma^2)) - exp(-2)) / (1 - exp(-2)), sigma = r / 2
    sigma = r / 2
    assert float(cat.nearness(np.array([sigma]))[0]) == pytest.approx(
        (np.exp(-0.5) - np.exp(-2)) / (1 - np.exp(-2))
    )
    # the plain gaussian keeps its documented step: exp(-2) = 0.135 just inside the radius
    plain = load_profile(
        _write(
            tmp_path,
            {
                **doc,
                "categories": {
                    **doc["categories"],
                    "retail": {**doc["categories"]["retail"], "decay": "gaussian"},
                },
            },
        )
    )
    step = plain.category("retail").nearness(np.array([r - eps, r + eps]))
    assert step[0] == pytest.approx(np.exp(-2.0)) and step[1] == 0.0
    assert plain.fingerprint != prof.fingerprint

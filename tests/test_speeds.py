"""maxspeed parsing against the value formats listed on the OSM wiki page Key:maxspeed."""

import pytest

from routerisk.network.speeds import MPH, NONE_KPH, WALK_KPH, parse_maxspeed

# Source: OSM wiki, Key:maxspeed (value formats: bare km/h numbers, "mph", "knots",
# "walk", "none", country zone codes such as DE:urban / DE:zone30, lists). The zone code speeds
# come from the wiki's table of implicit limits (from memory).
CASES = [
    ("50", 50.0),
    ("30 mph", 30 * MPH),
    ("25mph", 25 * MPH),
    ("60 km/h", 60.0),
    ("40 kmh", 40.0),
    ("12 knots", 12 * 1.852),
    ("7,5", 7.5),
    ("walk", WALK_KPH),
    ("none", NONE_KPH),
    ("DE:urban", 50.0),
    ("DE:rural", 100.0),
    ("FR:rural", 80.0),
    ("DE:zone30", 30.0),
    ("DE:zone:30", 30.0),
    ("GB:nsl_single", 60 * MPH),
    ("RU:urban", 60.0),
    ("DE:living_street", WALK_KPH),
    ("50|30", 50.0),  # per lane: the highest, as the cautious choice for severity
    ("50;30", 50.0),
    (["30 mph", "25 mph"], 30 * MPH),  # merged ways after simplification
]


@pytest.mark.parametrize(("value", "kph"), CASES)
def test_formats(value, kph):
    assert parse_maxspeed(value) == pytest.approx(kph)


@pytest.mark.parametrize(
    "value", ["signals", "variable", "XX:unknownzone", "", None, float("nan"), "fast", "-5"]
)
def test_no_number_means_impute(value):
    assert parse_maxspeed(value) is None

"""Severity curve against the published points of Tefft (2013)."""

import numpy as np
import pytest

from routerisk.network.severity import probability, severity_factor

# Tefft, B.C. (2013), "Impact speed and a pedestrian's risk of severe injury or death",
# Accident Analysis & Prevention 50:871-878 [published]: risk levels and impact speeds (mph).
DEATH = [(24.1, 0.10), (32.5, 0.25), (40.6, 0.50), (48.0, 0.75), (54.6, 0.90)]
SEVERE = [(17.1, 0.10), (24.9, 0.25), (33.0, 0.50), (40.8, 0.75), (48.1, 0.90)]


@pytest.mark.parametrize(("mph", "p"), DEATH)
def test_death_points(mph, p):
    assert probability(mph, outcome="death") == pytest.approx(p, abs=1e-9)


@pytest.mark.parametrize(("mph", "p"), SEVERE)
def test_severe_points(mph, p):
    assert probability(mph, outcome="severe_injury") == pytest.approx(p, abs=1e-9)


def test_monotone_and_bounded():
    v = np.linspace(0, 90, 901)
    for outcome in ("death", "severe_injury"):
        p = probability(v, outcome=outcome)
        assert np.all(np.diff(p) > 0)
        assert np.all((p > 0) & (p < 1))


def test_severe_injury_above_death():
    v = np.linspace(5, 70, 100)
    assert np.all(probability(v, outcome="severe_injury") > probability(v, outcome="death"))


def test_factor_is_one_at_reference():
    assert severity_factor(25 * 1.609344, reference_mph=25) == pytest.approx(1.0)

"""Exposure profile: categories, weights, radii, decay, time profiles, hard rules, bands.

A profile is read from YAML (safe loader) or TOML into a frozen, validated
:class:`Profile`. Every value is checked; an error names the file and the key path
(``categories.school.radius_m``). :attr:`Profile.fingerprint` is a stable hash of the
normalised content (and of any rule polygon files) that every output records.

The package: :mod:`~routerisk.profile.timing` (weekly windows and time profiles),
:mod:`~routerisk.profile.schema` (the frozen objects), :mod:`~routerisk.profile.fingerprint`,
:mod:`~routerisk.profile.reader` and :mod:`~routerisk.profile.parse` (validation) and
:mod:`~routerisk.profile.load` (reading a YAML or TOML file). Every name is re-exported here.
"""

from __future__ import annotations

from routerisk.profile.fingerprint import OPTIONAL_FIELDS, content_of, fingerprint_of
from routerisk.profile.load import DEFAULT_PROFILE, load_profile, safe_load_yaml
from routerisk.profile.parse import SPREADS, parse_profile
from routerisk.profile.schema import (
    DECAYS,
    GAUSS_AT_RADIUS,
    MAX_FACTOR,
    POWER_MODEL_EXPONENTS,
    Band,
    Category,
    Likelihood,
    Profile,
    Rule,
    Selector,
    Uncertainty,
)
from routerisk.profile.timing import DAYS, MINUTES_PER_WEEK, TimeProfile, Window

__all__ = [
    "DAYS",
    "DECAYS",
    "DEFAULT_PROFILE",
    "GAUSS_AT_RADIUS",
    "MAX_FACTOR",
    "MINUTES_PER_WEEK",
    "OPTIONAL_FIELDS",
    "POWER_MODEL_EXPONENTS",
    "SPREADS",
    "Band",
    "Category",
    "Likelihood",
    "Profile",
    "Rule",
    "Selector",
    "TimeProfile",
    "Uncertainty",
    "Window",
    "content_of",
    "fingerprint_of",
    "load_profile",
    "parse_profile",
    "safe_load_yaml",
]

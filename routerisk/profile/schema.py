"""The frozen profile objects: categories and their tag selectors, rules, bands, likelihood.

:class:`Profile` is built and validated by :func:`routerisk.profile.parse_profile`; every
object here is frozen. The fingerprint of a profile is computed in
:mod:`routerisk.profile.fingerprint`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from routerisk.network.severity import MPH_TO_KPH
from routerisk.profile.fingerprint import content_of, fingerprint_of
from routerisk.profile.timing import MINUTES_PER_WEEK, TimeProfile, Window

DECAYS = ("none", "linear", "gaussian", "gaussian_smooth")
#: Largest weight, multiplier or baseline a profile may set: far above any sensible value,
#: and small enough that every risk sum stays a finite number.
MAX_FACTOR = 1e6
#: The plain gaussian's nearness at the radius (sigma = radius / 2): exp(-2) = 0.135.
GAUSS_AT_RADIUS = math.exp(-2.0)
#: Exponents of the power model of speed and crash counts (Nilsson 2004, re-estimated by
#: Elvik 2009, TOI report 1034) **[memory]**: crashes change with (v1 / v0) ** exponent.
#: Nilsson's own powers were 4 / 3 / 2 (fatal / serious casualty / casualty crashes); the
#: model is less applicable on urban arterials, with smaller powers (Cameron and Elvik 2010,
#: Accident Analysis & Prevention 42(6):1908-1915, from its abstract).
POWER_MODEL_EXPONENTS = {"fatal": 4.6, "serious_injury": 3.5, "injury": 2.0}


@dataclass(frozen=True)
class Selector:
    """OSM tag selector: every key must match (``"*"`` means any value)."""

    tags: tuple[tuple[str, tuple[str, ...] | None], ...]

    def matches(self, tags: Mapping[str, str]) -> bool:
        """Return True when ``tags`` satisfy every key of the selector."""
        for key, values in self.tags:
            val = tags.get(key)
            if val is None or (values is not None and val not in values):
                return False
        return True


@dataclass(frozen=True)
class Category:
    """One exposure category (schools, retail, ...)."""

    name: str
    label: str
    selectors: tuple[Selector, ...]
    weight: float
    radius_m: float
    decay: str
    time_profile: str | None
    stack: bool = False
    #: (low, high, spread) when the weight is given as a range (``uncertainty`` draws)
    weight_range: tuple[float, float, str] | None = None

    def matches(self, tags: Mapping[str, str]) -> bool:
        """Return True when an OSM object with ``tags`` is a source of this category."""
        return any(s.matches(tags) for s in self.selectors)

    def nearness(self, distance: np.ndarray) -> np.ndarray:
        """Return decayed nearness in [0, 1] for distances (m) to a source."""
        d = np.asarray(distance, dtype=float)
        inside = d <= self.radius_m
        if self.decay == "none":
            val = np.ones_like(d)
        elif self.decay == "linear":
            val = 1.0 - d / self.radius_m
        else:  # gaussian, sigma = radius / 2, so nearness is exp(-2) at the radius
            sigma = self.radius_m / 2.0
            val = np.exp(-0.5 * (d / sigma) ** 2)
            if self.decay == "gaussian_smooth":  # shifted and rescaled: 1 at 0, 0 at radius
                val = (val - GAUSS_AT_RADIUS) / (1.0 - GAUSS_AT_RADIUS)
        return np.where(inside, np.clip(val, 0.0, 1.0), 0.0)


@dataclass(frozen=True)
class Rule:
    """A hard rule: no driving near a category (or inside polygons) during the windows."""

    name: str
    category: str | None
    within_m: float
    polygons_file: str | None
    road_classes: tuple[str, ...]
    windows: tuple[Window, ...]

    @cached_property
    def by_minute(self) -> np.ndarray:
        """Return a bool array of 10,080: True where the rule is in force."""
        if not self.windows:
            return np.ones(MINUTES_PER_WEEK, dtype=bool)
        arr = np.zeros(MINUTES_PER_WEEK, dtype=bool)
        for w in self.windows:
            arr[w.minutes()] = True
        return arr


@dataclass(frozen=True)
class Band:
    """An exposure band: exposure per km at or above ``lower``."""

    name: str
    lower: float


@dataclass(frozen=True)
class Likelihood:
    """Crash likelihood by speed: the power model, relative to a reference speed.

    ``crashes`` names the published exponent used (``custom`` when the profile sets one).
    """

    crashes: str
    exponent: float
    reference_mph: float

    def factor(self, speed_kph: np.ndarray | float) -> np.ndarray:
        """Return (speed / reference) ** exponent for speeds in km/h (1 at the reference)."""
        v = np.clip(np.asarray(speed_kph, dtype=float), 0.0, None)
        return (v / (self.reference_mph * MPH_TO_KPH)) ** self.exponent


@dataclass(frozen=True)
class Uncertainty:
    """How sure the weights are: a covariance of fitted weights (from ``routerisk calibrate``).

    Draws are centred on the categories' weights (see :mod:`routerisk.analysis.uncertainty`).
    """

    weights: tuple[str, ...]
    covariance: tuple[tuple[float, ...], ...]
    method: str = ""
    fitted_from: str = ""
    scale: float | None = None


@dataclass(frozen=True)
class Profile:
    """A validated, frozen exposure profile. Build it with :func:`load_profile`."""

    name: str
    description: str
    sample_spacing_m: float
    baseline_by_class: tuple[tuple[str, float], ...]
    baseline_default: float
    sidewalk: tuple[tuple[str, float], ...]
    time_profiles: tuple[TimeProfile, ...]
    categories: tuple[Category, ...]
    crossing_weight: float
    severity_outcome: str
    reference_mph: float
    bands: tuple[Band, ...]
    rules: tuple[Rule, ...]
    source: str = ""
    extra_hash: str = field(default="", repr=False)
    #: Optional time profiles of the street baseline and of crossings (None: multiplier 1).
    baseline_time_profile: str | None = None
    crossing_time_profile: str | None = None
    #: Optional crash likelihood by speed (None: off, crashes do not depend on speed).
    likelihood: Likelihood | None = None
    uncertainty: Uncertainty | None = None

    @property
    def category_names(self) -> tuple[str, ...]:
        """Return the category ids in profile order."""
        return tuple(c.name for c in self.categories)

    def category(self, name: str) -> Category:
        """Return the category called ``name``."""
        for c in self.categories:
            if c.name == name:
                return c
        raise KeyError(name)

    def time_profile(self, name: str | None) -> TimeProfile | None:
        """Return the time profile called ``name`` (None for a constant multiplier of 1)."""
        for t in self.time_profiles:
            if t.name == name:
                return t
        return None

    def multipliers(self, minute_of_week: np.ndarray) -> np.ndarray:
        """Return an (n, categories) array of time multipliers at the given minutes."""
        m = np.asarray(minute_of_week, dtype=int) % MINUTES_PER_WEEK
        cols = []
        for c in self.categories:
            tp = self.time_profile(c.time_profile)
            cols.append(np.ones(m.shape) if tp is None else tp.by_minute[m])
        return np.stack(cols, axis=-1) if cols else np.zeros((*m.shape, 0))

    def band_of(self, exposure_per_km: np.ndarray) -> np.ndarray:
        """Return the band name for each exposure-per-km value."""
        lowers = np.array([b.lower for b in self.bands])
        names = np.array([b.name for b in self.bands], dtype=object)
        idx = np.searchsorted(lowers, np.asarray(exposure_per_km, dtype=float), side="right") - 1
        return names[np.clip(idx, 0, len(names) - 1)]

    def to_dict(self) -> dict[str, Any]:
        """Return the normalised content (what the fingerprint hashes)."""
        return content_of(self)

    def street_multipliers(self, minute_of_week: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return the baseline's and the crossings' time multipliers at the given minutes."""
        m = np.asarray(minute_of_week, dtype=int) % MINUTES_PER_WEEK
        return (
            self.by_minute_of(self.baseline_time_profile)[m],
            self.by_minute_of(self.crossing_time_profile)[m],
        )

    def by_minute_of(self, name: str | None) -> np.ndarray:
        """Return the 10,080 multipliers of time profile ``name`` (ones for None)."""
        tp = self.time_profile(name)
        return np.ones(MINUTES_PER_WEEK) if tp is None else tp.by_minute

    def likelihood_factor(self, speed_kph: np.ndarray) -> np.ndarray:
        """Return each speed's crash likelihood factor (ones when the profile has none)."""
        v = np.asarray(speed_kph, dtype=float)
        return np.ones(v.shape) if self.likelihood is None else self.likelihood.factor(v)

    @cached_property
    def fingerprint(self) -> str:
        """Return a stable 16-hex-digit hash of the profile's normalised content."""
        return fingerprint_of(self.to_dict(), self.extra_hash)

"""Exposure profile: categories, weights, radii, decay, time profiles, hard rules, bands.

A profile is read from YAML (safe loader) or TOML into a frozen, validated
:class:`Profile`. Every value is checked; an error names the file and the key path
(``categories.school.radius_m``). :attr:`Profile.fingerprint` is a stable hash of the
normalised content (and of any rule polygon files) that every output records.
"""

from __future__ import annotations

import hashlib
import json
import math
import tomllib
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, replace
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from routerisk.errors import ProfileError
from routerisk.network.severity import MPH_TO_KPH

DAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
DECAYS = ("none", "linear", "gaussian", "gaussian_smooth")
MINUTES_PER_WEEK = 7 * 24 * 60
#: Largest weight, multiplier or baseline a profile may set: far above any sensible value,
#: and small enough that every risk sum stays a finite number.
MAX_FACTOR = 1e6
DEFAULT_PROFILE = Path(__file__).with_name("data") / "default.yaml"
#: The plain gaussian's nearness at the radius (sigma = radius / 2): exp(-2) = 0.135.
GAUSS_AT_RADIUS = math.exp(-2.0)
#: Exponents of the power model of speed and crash counts (Nilsson 2004, re-estimated by
#: Elvik 2009, TOI report 1034) **[memory]**: crashes change with (v1 / v0) ** exponent.
#: Nilsson's own powers were 4 / 3 / 2 (fatal / serious casualty / casualty crashes); the
#: model is less applicable on urban arterials, with smaller powers (Cameron and Elvik 2010,
#: Accident Analysis & Prevention 42(6):1908-1915, from its abstract).
POWER_MODEL_EXPONENTS = {"fatal": 4.6, "serious_injury": 3.5, "injury": 2.0}


@dataclass(frozen=True)
class Window:
    """A weekly time window: the given days, from ``start`` to ``end`` (minutes of day).

    An ``end`` at or before ``start`` runs past midnight into the next day.
    """

    days: tuple[str, ...]
    start: int
    end: int
    multiplier: float = 1.0

    def minutes(self) -> np.ndarray:
        """Return the minutes of the week (0 = Monday 00:00) this window covers."""
        out = []
        span = (self.end - self.start) % (24 * 60) or 24 * 60
        for day in self.days:
            first = DAYS.index(day) * 1440 + self.start
            out.append((first + np.arange(span)) % MINUTES_PER_WEEK)
        return np.concatenate(out) if out else np.zeros(0, dtype=int)


@dataclass(frozen=True)
class TimeProfile:
    """Multipliers by minute of the week: ``default`` outside every window."""

    name: str
    default: float
    windows: tuple[Window, ...]

    @cached_property
    def by_minute(self) -> np.ndarray:
        """Return a float array of 10,080 multipliers, one per minute of the week."""
        arr = np.full(MINUTES_PER_WEEK, self.default, dtype=float)
        for w in self.windows:
            arr[w.minutes()] = w.multiplier
        return arr


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
        d = asdict(self)
        d.pop("source")
        d.pop("extra_hash")
        for key in _OPTIONAL_FIELDS:  # unset: the same content (and fingerprint) as before
            if d.get(key) is None:
                d.pop(key, None)
        for c in d["categories"]:
            if c.get("weight_range") is None:  # likewise plain weights
                c.pop("weight_range", None)
        return d

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
        text = json.dumps(
            self.to_dict(),
            sort_keys=True,
            separators=(",", ":"),
            default=lambda o: o.tolist() if hasattr(o, "tolist") else str(o),
        )
        return hashlib.sha256((text + self.extra_hash).encode()).hexdigest()[:16]


# ----------------------------------------------------------------------------- parsing


class _Reader:
    """Walk a nested mapping, checking keys and types, with errors naming file and key."""

    def __init__(self, path: str) -> None:
        self.path = path

    def fail(self, key: str, message: str) -> ProfileError:
        return ProfileError(message, path=self.path, field=key)

    def mapping(self, value: Any, key: str, allowed: set[str], required: set[str] = frozenset()):
        if not isinstance(value, Mapping):
            raise self.fail(key or "(top level)", f"must be a mapping, got {type(value).__name__}")
        unknown = sorted(set(map(str, value)) - allowed)
        if unknown:
            raise self.fail(
                f"{key}.{unknown[0]}" if key else unknown[0],
                f"unknown key; allowed keys are {', '.join(sorted(allowed))}",
            )
        missing = sorted(required - set(value))
        if missing:
            raise self.fail(f"{key}.{missing[0]}" if key else missing[0], "required key missing")
        return value

    def number(
        self,
        value: Any,
        key: str,
        *,
        low: float = 0.0,
        strict: bool = False,
        high: float = math.inf,
    ) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            hint = ""
            if isinstance(value, str):
                try:
                    float(value)
                    hint = (
                        " (read as text: YAML needs a sign in the exponent, "
                        "e.g. 1.0e+3, or a plain number)"
                    )
                except ValueError:
                    pass
            raise self.fail(key, f"must be a number, got {value!r}{hint}")
        v = float(value)
        if not math.isfinite(v):
            raise self.fail(key, f"must be finite, got {value!r}")
        if v < low or (strict and v == low):
            raise self.fail(key, f"must be {'>' if strict else '>='} {low:g}, got {value!r}")
        if v > high:
            raise self.fail(key, f"must be <= {high:g}, got {value!r}")
        return v

    def text(self, value: Any, key: str) -> str:
        if not isinstance(value, str) or not value.strip():
            raise self.fail(key, f"must be a non-empty string, got {value!r}")
        return value

    def clock(self, value: Any, key: str) -> int:
        if not isinstance(value, str) or len(value.split(":")) != 2:
            raise self.fail(key, f"must be a time 'HH:MM', got {value!r}")
        hh, mm = value.split(":")
        if (
            not (hh.isdigit() and mm.isdigit())
            or int(mm) > 59
            or int(hh) > 24
            or (int(hh) == 24 and int(mm) != 0)
        ):
            raise self.fail(key, f"must be a time 'HH:MM' between 00:00 and 24:00, got {value!r}")
        return int(hh) * 60 + int(mm)

    def windows(self, value: Any, key: str, *, with_multiplier: bool) -> tuple[Window, ...]:
        if not isinstance(value, list):
            raise self.fail(key, "must be a list of windows")
        out = []
        allowed = {"days", "start", "end"} | ({"multiplier"} if with_multiplier else set())
        required = {"days", "start", "end"} | ({"multiplier"} if with_multiplier else set())
        for i, w in enumerate(value):
            k = f"{key}[{i}]"
            self.mapping(w, k, allowed, required)
            days = w["days"]
            if not isinstance(days, list) or not days or any(d not in DAYS for d in days):
                raise self.fail(f"{k}.days", f"must be a list of {', '.join(DAYS)}, got {days!r}")
            if len(set(days)) != len(days):
                raise self.fail(f"{k}.days", "lists a day twice")
            start = self.clock(w["start"], f"{k}.start")
            end = self.clock(w["end"], f"{k}.end")
            if start == end:
                raise self.fail(f"{k}.end", "window has zero length (start equals end)")
            mult = (
                self.number(w["multiplier"], f"{k}.multiplier", high=MAX_FACTOR)
                if with_multiplier
                else 1.0
            )
            out.append(Window(tuple(days), start, end % 1440 if end == 1440 else end, mult))
        if with_multiplier:
            seen = np.full(MINUTES_PER_WEEK, -1)
            for i, win in enumerate(out):
                mins = win.minutes()
                clash = seen[mins]
                if (clash >= 0).any():
                    j = int(clash[clash >= 0][0])
                    raise self.fail(f"{key}[{i}]", f"overlaps window {key}[{j}]")
                seen[mins] = i
        return tuple(out)


_TOP_KEYS = {
    "version",
    "name",
    "description",
    "sample_spacing_m",
    "baseline",
    "time_profiles",
    "categories",
    "crossing_weight",
    "severity",
    "bands",
    "rules",
    "uncertainty",
}
#: Optional parts of the risk model, read by :func:`_model_options` (unset: as before).
_MODEL_KEYS = {"crossing_time_profile", "likelihood"}
_TOP_KEYS = _TOP_KEYS | _MODEL_KEYS
_OPTIONAL_FIELDS = ("baseline_time_profile", "crossing_time_profile", "likelihood", "uncertainty")


def _categories(r: _Reader, cats_raw: Any, tp_names: set[str]) -> list[Category]:
    """Read and check the ``categories`` of a profile."""
    r.mapping(cats_raw, "categories", set(map(str, cats_raw or {})))
    if not cats_raw:
        raise r.fail("categories", "must define at least one category")
    cats = []
    for cname, c in cats_raw.items():
        k = f"categories.{cname}"
        r.mapping(
            c,
            k,
            {"label", "select", "weight", "radius_m", "decay", "time_profile", "stack"},
            {"select", "weight", "radius_m"},
        )
        sels = c["select"]
        if not isinstance(sels, list) or not sels:
            raise r.fail(f"{k}.select", "must be a non-empty list of tag selectors")
        selectors = _selectors(r, sels, k)
        decay = c.get("decay", "linear")
        if decay not in DECAYS:
            raise r.fail(f"{k}.decay", f"must be one of {', '.join(DECAYS)}, got {decay!r}")
        tp = c.get("time_profile")
        if tp is not None and tp not in tp_names:
            raise r.fail(f"{k}.time_profile", f"unknown time profile {tp!r}")
        stack = c.get("stack", False)
        if not isinstance(stack, bool):
            raise r.fail(f"{k}.stack", "must be true or false")
        cats.append(
            Category(
                name=str(cname),
                label=str(c.get("label", cname)),
                selectors=tuple(selectors),
                weight=_weight(r, c["weight"], f"{k}.weight")[0],
                weight_range=_weight(r, c["weight"], f"{k}.weight")[1],
                radius_m=r.number(c["radius_m"], f"{k}.radius_m", strict=True, high=5000),
                decay=decay,
                time_profile=tp,
                stack=stack,
            )
        )
    return cats


def _selectors(r: _Reader, sels: list[Any], k: str) -> list[Selector]:
    """Read the OSM tag selectors of one category (``k`` is its key in the profile)."""
    selectors = []
    for i, s in enumerate(sels):
        if not isinstance(s, Mapping) or not s:
            raise r.fail(f"{k}.select[{i}]", "must be a mapping of OSM key to values")
        tags = []
        for tk, tv in s.items():
            if tv == "*":
                tags.append((str(tk), None))
            elif isinstance(tv, list) and tv and all(isinstance(x, str) for x in tv):
                tags.append((str(tk), tuple(tv)))
            elif isinstance(tv, str):
                tags.append((str(tk), (tv,)))
            else:
                raise r.fail(f"{k}.select[{i}].{tk}", "must be '*', a value or a list")
        selectors.append(Selector(tuple(sorted(tags))))
    return selectors


def _bands(r: _Reader, bands_raw: Any) -> list[Band]:
    """Read and check the exposure ``bands`` of a profile."""
    if not isinstance(bands_raw, list) or not bands_raw:
        raise r.fail("bands", "must be a non-empty list of {name, from}")
    bands = []
    for i, b in enumerate(bands_raw):
        r.mapping(b, f"bands[{i}]", {"name", "from"}, {"name", "from"})
        bands.append(
            Band(r.text(b["name"], f"bands[{i}].name"), r.number(b["from"], f"bands[{i}].from"))
        )
    if bands[0].lower != 0.0:
        raise r.fail("bands[0].from", "the first band must start at 0")
    for i in range(1, len(bands)):
        if bands[i].lower <= bands[i - 1].lower:
            raise r.fail(f"bands[{i}].from", "bands must be in increasing order")
    if len({b.name for b in bands}) != len(bands):
        raise r.fail("bands", "band names must be unique")
    return bands


def _rules(
    r: _Reader, rules_raw: Any, cat_names: set[str], base_dir: Path
) -> tuple[list[Rule], list[str]]:
    """Read and check the hard ``rules``; return them and the hashes of their polygon files."""
    if not isinstance(rules_raw, list):
        raise r.fail("rules", "must be a list")
    rules = []
    extra = []
    for i, ru in enumerate(rules_raw):
        k = f"rules[{i}]"
        r.mapping(
            ru, k, {"name", "category", "within_m", "polygons", "road_classes", "windows"}, {"name"}
        )
        cat = ru.get("category")
        poly = ru.get("polygons")
        classes = ru.get("road_classes", [])
        if cat is None and poly is None and not classes:
            raise r.fail(k, "needs a category, a polygons file or road_classes")
        if cat is not None and cat not in cat_names:
            raise r.fail(f"{k}.category", f"unknown category {cat!r}")
        within = 0.0
        if cat is not None:
            if "within_m" not in ru:
                raise r.fail(f"{k}.within_m", "required key missing for a category rule")
            within = r.number(ru["within_m"], f"{k}.within_m", strict=True, high=5000)
        poly_path = None
        if poly is not None:
            pp = Path(r.text(poly, f"{k}.polygons"))
            pp = pp if pp.is_absolute() else base_dir / pp
            if not pp.is_file():
                raise r.fail(f"{k}.polygons", f"file not found: {pp}")
            poly_path = str(pp)
            extra.append(hashlib.sha256(pp.read_bytes()).hexdigest())
        if not isinstance(classes, list) or any(not isinstance(c, str) for c in classes):
            raise r.fail(f"{k}.road_classes", "must be a list of OSM highway values")
        wins = (
            r.windows(ru["windows"], f"{k}.windows", with_multiplier=False)
            if "windows" in ru
            else ()
        )
        rules.append(
            Rule(r.text(ru["name"], f"{k}.name"), cat, within, poly_path, tuple(classes), wins)
        )
    if len({ru.name for ru in rules}) != len(rules):
        raise r.fail("rules", "rule names must be unique")
    return rules, extra


def parse_profile(data: Any, *, path: str | Path = "<profile>") -> Profile:
    """Validate a profile mapping (as read from YAML or TOML) into a :class:`Profile`."""
    r = _Reader(str(path))
    base_dir = Path(path).parent if str(path) != "<profile>" else Path.cwd()
    d = r.mapping(data, "", _TOP_KEYS, {"version", "name", "categories"})
    if d["version"] != 1:
        raise r.fail("version", f"unsupported profile version {d['version']!r}; this tool reads 1")
    name = r.text(d["name"], "name")
    spacing = r.number(d.get("sample_spacing_m", 10), "sample_spacing_m", strict=True, high=500)

    bl = r.mapping(
        d.get("baseline", {}), "baseline", {"by_road_class", "default", "sidewalk", "time_profile"}
    )
    by_class = r.mapping(
        bl.get("by_road_class", {}),
        "baseline.by_road_class",
        set(map(str, bl.get("by_road_class", {}) or {})),
    )
    baseline = tuple(
        sorted(
            (str(k), r.number(v, f"baseline.by_road_class.{k}", high=MAX_FACTOR))
            for k, v in by_class.items()
        )
    )
    sidewalk_raw = bl.get("sidewalk", {}) or {}
    r.mapping(sidewalk_raw, "baseline.sidewalk", set(map(str, sidewalk_raw)))
    sidewalk = tuple(
        sorted(
            (str(k), r.number(v, f"baseline.sidewalk.{k}", high=MAX_FACTOR))
            for k, v in sidewalk_raw.items()
        )
    )

    tps_raw = d.get("time_profiles", {}) or {}
    r.mapping(tps_raw, "time_profiles", set(map(str, tps_raw)))
    tps = []
    for tname, t in tps_raw.items():
        k = f"time_profiles.{tname}"
        r.mapping(t, k, {"default", "windows"}, {"windows"})
        tps.append(
            TimeProfile(
                str(tname),
                r.number(t.get("default", 1.0), f"{k}.default", high=MAX_FACTOR),
                r.windows(t["windows"], f"{k}.windows", with_multiplier=True),
            )
        )
    tp_names = {t.name for t in tps}

    cats = _categories(r, d["categories"], tp_names)
    cat_names = {c.name for c in cats}

    sev = r.mapping(d.get("severity", {}) or {}, "severity", {"outcome", "reference_mph"})
    outcome = sev.get("outcome", "death")
    if outcome not in ("death", "severe_injury"):
        raise r.fail("severity.outcome", f"must be death or severe_injury, got {outcome!r}")
    ref = r.number(sev.get("reference_mph", 25), "severity.reference_mph", strict=True, high=100)

    bands = _bands(r, d.get("bands", [{"name": "all", "from": 0.0}]))

    rules, extra = _rules(r, d.get("rules", []) or [], cat_names, base_dir)

    return _model_options(
        r,
        d,
        Profile(
            name=name,
            description=str(d.get("description", "")).strip(),
            sample_spacing_m=spacing,
            baseline_by_class=baseline,
            baseline_default=r.number(bl.get("default", 0.2), "baseline.default", high=MAX_FACTOR),
            sidewalk=sidewalk,
            time_profiles=tuple(tps),
            categories=tuple(cats),
            crossing_weight=r.number(
                d.get("crossing_weight", 0.0), "crossing_weight", high=MAX_FACTOR
            ),
            severity_outcome=outcome,
            reference_mph=ref,
            bands=tuple(bands),
            rules=tuple(rules),
            source=str(path),
            extra_hash="".join(extra),
            uncertainty=_uncertainty(
                r,
                d.get("uncertainty"),
                [c.name for c in cats],
                {c.name: c.weight_range for c in cats},
            ),
        ),
    )


SPREADS = ("uniform", "log-uniform")


def _weight(r: _Reader, raw: Any, key: str) -> tuple[float, tuple[float, float, str] | None]:
    """Return (weight, range): a number, or ``{low, high, spread}`` (uniform by default).

    A range's weight for plain scoring is its median: the midpoint (uniform) or the
    geometric mean (log-uniform).
    """
    if not isinstance(raw, Mapping):
        return r.number(raw, key, high=MAX_FACTOR), None
    r.mapping(raw, key, {"low", "high", "spread"}, {"low", "high"})
    spread = raw.get("spread", "uniform")
    if spread not in SPREADS:
        raise r.fail(f"{key}.spread", f"must be one of {', '.join(SPREADS)}, got {spread!r}")
    low = r.number(raw["low"], f"{key}.low", high=MAX_FACTOR, strict=spread == "log-uniform")
    high = r.number(raw["high"], f"{key}.high", high=MAX_FACTOR)
    if low > high:
        raise r.fail(f"{key}.low", f"low {low:g} is above high {high:g}")
    mid = math.sqrt(low * high) if spread == "log-uniform" else (low + high) / 2
    return mid, (low, high, spread)


def _uncertainty(
    r: _Reader, raw: Any, cat_names: list[str], ranges: Mapping[str, Any]
) -> Uncertainty | None:
    """Validate the optional ``uncertainty`` block: named weights and their covariance."""
    if raw is None:
        return None
    k = "uncertainty"
    r.mapping(
        raw,
        k,
        {"method", "fitted_from", "scale", "weights", "covariance"},
        {"weights", "covariance"},
    )
    names = raw["weights"]
    if not isinstance(names, list) or not names or any(not isinstance(n, str) for n in names):
        raise r.fail(f"{k}.weights", "must be a non-empty list of category names")
    for n in names:
        if n not in cat_names:
            raise r.fail(f"{k}.weights", f"unknown category {n!r}")
    if len(set(names)) != len(names):
        raise r.fail(f"{k}.weights", "names a category twice")
    cov = raw["covariance"]
    if (
        not isinstance(cov, list)
        or len(cov) != len(names)
        or any(not isinstance(row, list) or len(row) != len(names) for row in cov)
    ):
        raise r.fail(
            f"{k}.covariance",
            f"must be a {len(names)} x {len(names)} matrix (a list of rows), one "
            "row and column per name in weights",
        )
    vals = np.array(
        [
            [
                r.number(v, f"{k}.covariance[{i}][{j}]", low=-MAX_FACTOR, high=MAX_FACTOR)
                for j, v in enumerate(row)
            ]
            for i, row in enumerate(cov)
        ]
    )
    if not np.allclose(vals, vals.T, rtol=1e-8, atol=1e-12):
        raise r.fail(f"{k}.covariance", "must be symmetric")
    eig = np.linalg.eigvalsh(vals)
    if eig.min() < -1e-9 * max(abs(eig).max(), 1e-300) or (np.diag(vals) < 0).any():
        raise r.fail(f"{k}.covariance", "must be positive semi-definite (a covariance)")
    for n in names:
        if ranges.get(n) is not None:
            raise r.fail(f"{k}.weights", f"category {n!r} also has a weight range; give one")
    scale = raw.get("scale")
    return Uncertainty(
        weights=tuple(names),
        covariance=tuple(tuple(float(v) for v in row) for row in vals),
        method=str(raw.get("method", "")),
        fitted_from=str(raw.get("fitted_from", "")),
        scale=None if scale is None else r.number(scale, f"{k}.scale", high=MAX_FACTOR),
    )


def _model_options(r: _Reader, d: Mapping[str, Any], prof: Profile) -> Profile:
    """Return ``prof`` with the optional model parts of ``d`` read and checked."""
    names = {t.name for t in prof.time_profiles}
    found: dict[str, Any] = {}
    bl = d.get("baseline") or {}
    for key, value in (
        ("baseline.time_profile", bl.get("time_profile")),
        ("crossing_time_profile", d.get("crossing_time_profile")),
    ):
        if value is not None and (not isinstance(value, str) or value not in names):
            raise r.fail(key, f"unknown time profile {value!r}")
        found[key] = value
    like = None
    if d.get("likelihood") is not None:
        lk = r.mapping(
            d["likelihood"], "likelihood", {"model", "crashes", "exponent", "reference_mph"}
        )
        if lk.get("model", "power") != "power":
            raise r.fail("likelihood.model", f"must be power, got {lk['model']!r}")
        if "crashes" in lk and "exponent" in lk:
            raise r.fail(
                "likelihood.exponent", "give crashes (a published exponent) or exponent, not both"
            )
        if "exponent" in lk:
            crashes = "custom"
            exponent = r.number(lk["exponent"], "likelihood.exponent", high=10)
        else:
            crashes = lk.get("crashes", "injury")
            if crashes not in POWER_MODEL_EXPONENTS:
                raise r.fail(
                    "likelihood.crashes",
                    f"must be one of {', '.join(POWER_MODEL_EXPONENTS)}, got {crashes!r}",
                )
            exponent = POWER_MODEL_EXPONENTS[crashes]
        ref = r.number(
            lk.get("reference_mph", prof.reference_mph),
            "likelihood.reference_mph",
            strict=True,
            high=100,
        )
        like = Likelihood(crashes, exponent, ref)
    return replace(
        prof,
        baseline_time_profile=found["baseline.time_profile"],
        crossing_time_profile=found["crossing_time_profile"],
        likelihood=like,
    )


def safe_load_yaml(text: str) -> Any:
    """Return ``yaml.safe_load(text)``, parsed by libyaml when PyYAML has it (ten times faster).

    Both build the same values with the same constructor; on a syntax error the text is read
    again by the pure-Python parser so the error message is PyYAML's usual one.
    """
    fast = getattr(yaml, "CSafeLoader", None)  # libyaml's parser, PyYAML's safe constructor
    if fast is not None:
        parser = fast(text)
        try:
            return parser.get_single_data()
        except yaml.YAMLError:
            pass
        finally:
            parser.dispose()
    return yaml.safe_load(text)


def load_profile(path: str | Path | None = None) -> Profile:
    """Read and validate a profile file (YAML or TOML); None reads the bundled default."""
    p = DEFAULT_PROFILE if path is None else Path(path)
    if not p.is_file():
        raise ProfileError("profile file not found", path=p)
    try:
        text = p.read_text(encoding="utf-8")
        if p.suffix.lower() == ".toml":
            data = tomllib.loads(text)
        else:
            data = safe_load_yaml(text)
    except (yaml.YAMLError, tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise ProfileError(f"cannot parse: {first}", path=p) from exc
    if data is None:
        raise ProfileError("file is empty", path=p)
    return parse_profile(data, path=p)

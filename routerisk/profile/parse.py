"""Validating a profile mapping (as read from YAML or TOML) into a :class:`Profile`.

:func:`parse_profile` reads the top-level keys, the baseline, the time profiles, the
categories with their selectors and weights (a number or a range), severity, bands, hard
rules (with their polygon files), the optional ``uncertainty`` block and the optional model
parts (time profiles of the baseline and crossings, crash likelihood by speed).
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.profile.reader import Reader
from routerisk.profile.schema import (
    DECAYS,
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
from routerisk.profile.timing import TimeProfile

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


def _categories(r: Reader, cats_raw: Any, tp_names: set[str]) -> list[Category]:
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


def _selectors(r: Reader, sels: list[Any], k: str) -> list[Selector]:
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


def _bands(r: Reader, bands_raw: Any) -> list[Band]:
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
    r: Reader, rules_raw: Any, cat_names: set[str], base_dir: Path
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
    r = Reader(str(path))
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


def _weight(r: Reader, raw: Any, key: str) -> tuple[float, tuple[float, float, str] | None]:
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
    r: Reader, raw: Any, cat_names: list[str], ranges: Mapping[str, Any]
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


def _model_options(r: Reader, d: Mapping[str, Any], prof: Profile) -> Profile:
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

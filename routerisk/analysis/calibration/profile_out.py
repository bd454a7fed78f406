"""Write the calibrated profile: fitted weights and an ``uncertainty`` block, as YAML."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from routerisk.errors import RouteriskError
from routerisk.profile import Profile

if TYPE_CHECKING:
    from routerisk.analysis.calibration.run import Calibration


def _profile_source(profile: Profile) -> dict[str, Any]:
    import tomllib

    import yaml

    src = Path(profile.source) if profile.source else None
    if src is None or not src.is_file():
        raise RouteriskError(
            "the profile has no readable source file to write a calibrated copy from",
            path=profile.source or None,
        )
    text = src.read_text(encoding="utf-8")
    return tomllib.loads(text) if src.suffix.lower() == ".toml" else yaml.safe_load(text)


def _num(x: float) -> float:
    return float(f"{float(x):.10g}")


def calibrated_document(
    cal: Calibration, *, out_path: str | Path, counts_sha256: str
) -> dict[str, Any]:
    """Return the calibrated profile as a mapping: fitted weights and an ``uncertainty`` block.

    Categories not fitted (no site near, or held at zero) keep their values; the block's
    covariance covers only the weights with an interval.
    """
    import copy
    import os

    doc = copy.deepcopy(_profile_source(cal.profile))
    recs = {w["category"]: w for w in cal.weights()}
    for name, c in doc["categories"].items():
        rec = recs[str(name)]
        if rec["fitted"]:
            c["weight"] = _num(rec["weight"])
    src_dir = Path(cal.profile.source).resolve().parent
    for rule in doc.get("rules") or []:  # keep polygon files found from the new place
        if isinstance(rule, dict) and rule.get("polygons"):
            p = Path(rule["polygons"])
            p = p if p.is_absolute() else src_dir / p
            rule["polygons"] = os.path.relpath(p, Path(out_path).resolve().parent)
    for b in cal.baselines():
        if b["fitted"]:
            doc.setdefault("baseline", {}).setdefault("by_road_class", {})[b["road_class"]] = _num(
                b["baseline"]
            )
    names = [w["category"] for w in cal.weights() if w["fitted"] and not w["at_zero"]]
    idx = [cal.design.column(n) for n in names]
    cov = cal.est_cov[np.ix_(idx, idx)]
    cov = (cov + cov.T) / 2
    doc["name"] = f"{doc.get('name', 'profile')}-calibrated"
    if names:
        doc["uncertainty"] = {
            "method": (
                f"observed information, {cal.fit.family} maximum likelihood "
                f"(alpha {_num(cal.fit.alpha)}), delta method"
            ),
            "fitted_from": f"counts sha256 {counts_sha256}; "
            f"{cal.design.periods['site'].nunique()} sites, "
            f"{len(cal.design.y)} periods",
            "scale": _num(cal.estimate[0]),
            "weights": names,
            "covariance": [[_num(v) for v in row] for row in cov],
        }
    return doc


def profile_text(
    cal: Calibration, out: str | Path, provenance: dict[str, Any] | None = None
) -> str:
    """Return the calibrated profile as YAML text, checked to read back as a valid profile.

    ``provenance`` (:func:`routerisk.io.atomic.provenance`) is recorded in a comment line.
    """
    import yaml

    from routerisk.io.atomic import provenance_line, sha256_file
    from routerisk.profile import parse_profile

    doc = calibrated_document(cal, out_path=out, counts_sha256=sha256_file(cal.counts_path))
    made = f"# Made from: {provenance_line(provenance)}\n" if provenance else ""
    text = (
        "# Calibrated by routerisk calibrate on pedestrian counts; see its report.\n"
        + made
        + yaml.safe_dump(
            doc, sort_keys=False, allow_unicode=True, width=100, default_flow_style=None
        )
    )
    parse_profile(yaml.safe_load(text), path=out)  # the written file must read back
    return text


def write_text(out: str | Path, text: str, *, force: bool = False) -> Path:
    """Write text atomically (refusing an existing file unless ``force``)."""
    from routerisk.io.atomic import write_text_atomic

    return write_text_atomic(out, text, force=force)


def write_profile(
    cal: Calibration,
    out: str | Path,
    *,
    force: bool = False,
    provenance: dict[str, Any] | None = None,
) -> Path:
    """Validate the calibrated profile and write it as YAML (atomically)."""
    return write_text(out, profile_text(cal, out, provenance), force=force)

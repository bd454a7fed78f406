"""Profile overlays: extra weight or a hard rule on given edges, fed back from early warnings.

An overlay file (YAML) lists edges by ``u``, ``v``, ``key`` with a risk ``factor`` (>= 1, the
edge's risk is multiplied by it) and optionally ``closed: true`` (a hard rule that holds at
every hour, or only at the listed ``hours`` of the week, ``"mon 08"`` style). ``score``,
``suggest`` and ``plan`` take it with ``--overlay FILE``; the overlay's checksum joins the
profile fingerprint, so outputs record that it was used.
"""

from __future__ import annotations

import dataclasses
import hashlib
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import yaml

from routerisk.errors import InputFileError
from routerisk.profile import DAYS, MAX_FACTOR, MINUTES_PER_WEEK, Rule

RULE_NAME = "early-warning overlay"


def write_overlay(
    path: str | Path,
    rows: list[dict[str, Any]],
    *,
    profile: str,
    source: str,
    force: bool = True,
    made_from: dict[str, Any] | None = None,
) -> Path:
    """Write an overlay file (atomically) for the given edge rows.

    ``made_from`` (tool version, profile, input checksums) is recorded as is.
    """
    from routerisk.io.atomic import write_text_atomic

    doc: dict[str, Any] = {
        "version": 1,
        "kind": "routerisk-overlay",
        "profile": profile,
        "from": source,
    }
    if made_from is not None:
        doc["made_from"] = made_from
    doc["edges"] = rows
    return write_text_atomic(path, yaml.safe_dump(doc, sort_keys=False), force=force)


def _hours_to_minutes(hours: list[Any], path: Path, field: str) -> np.ndarray:
    arr = np.zeros(MINUTES_PER_WEEK, dtype=bool)
    for h in hours:
        parts = str(h).split()
        if (
            len(parts) != 2
            or parts[0] not in DAYS
            or not parts[1].isdigit()
            or not 0 <= int(parts[1]) <= 23
        ):
            raise InputFileError(f"hour must look like 'mon 08', got {h!r}", path=path, field=field)
        start = DAYS.index(parts[0]) * 1440 + int(parts[1]) * 60
        arr[start : start + 60] = True
    return arr


def apply_overlay(net: Any, path: str | Path) -> Any:
    """Return ``net`` with the overlay's factors and closures applied."""
    from routerisk.network.folder import Network

    p = Path(path)
    if not p.is_file():
        raise InputFileError("overlay file not found", path=p, field="--overlay")
    try:
        doc = yaml.safe_load(p.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        raise InputFileError("overlay is not valid YAML", path=p) from exc
    if (
        not isinstance(doc, dict)
        or doc.get("kind") != "routerisk-overlay"
        or doc.get("version") != 1
    ):
        raise InputFileError("not a routerisk overlay (kind/version)", path=p, field="kind")
    rows = doc.get("edges") or []
    if not isinstance(rows, list):
        raise InputFileError("must be a list", path=p, field="edges")
    edges = net.edges.copy()
    factor = np.ones(len(edges))
    closed = np.zeros(len(edges), dtype=bool)
    hours_any = np.zeros(MINUTES_PER_WEEK, dtype=bool)
    always = False
    for i, r in enumerate(rows):
        f = f"edges[{i}]"
        if not isinstance(r, dict) or not {"u", "v", "key"} <= set(r):
            raise InputFileError("needs u, v and key", path=p, field=f)
        try:
            pos = edges.index.get_loc((int(r["u"]), int(r["v"]), int(r["key"])))
        except (KeyError, TypeError, ValueError) as exc:
            raise InputFileError("edge is not in this network", path=p, field=f) from exc
        fac = r.get("factor", 1.0)
        if (
            isinstance(fac, bool)
            or not isinstance(fac, int | float)
            or not fac >= 1.0
            or not fac <= MAX_FACTOR
        ):
            raise InputFileError(
                f"factor must be a number from 1 to {MAX_FACTOR:g}, got {fac!r}",
                path=p,
                field=f"{f}.factor",
            )
        factor[pos] = max(factor[pos], float(fac))
        if r.get("closed"):
            closed[pos] = True
            if r.get("hours"):
                hours_any |= _hours_to_minutes(list(r["hours"]), p, f"{f}.hours")
            else:
                always = True
    edges["severity"] = edges["severity"].to_numpy() * factor
    prof = net.profile
    rules = prof.rules
    if closed.any():
        windows_minute = np.ones(MINUTES_PER_WEEK, dtype=bool) if always else hours_any
        rule = _MinuteRule(RULE_NAME, None, 0.0, None, (), (), minutes=windows_minute)
        rules = (*rules, rule)
        edges[f"rule_{len(prof.rules)}"] = closed
    digest = hashlib.sha256(p.read_bytes()).hexdigest()
    new_prof = dataclasses.replace(prof, rules=rules, extra_hash=prof.extra_hash + digest)
    return Network(
        edges,
        net.nodes,
        net.sources,
        net.crossings,
        new_prof,
        {**net.meta, "overlay_sha256": digest},
        net.context,
    )


@dataclasses.dataclass(frozen=True)
class _MinuteRule(Rule):
    """A rule in force at the given minutes of the week (built from an overlay)."""

    minutes: np.ndarray = dataclasses.field(
        default_factory=lambda: np.ones(MINUTES_PER_WEEK, dtype=bool), compare=False, repr=False
    )

    @property
    def by_minute(self) -> np.ndarray:  # type: ignore[override]
        """Return the minutes the overlay closes its edges."""
        return self.minutes


def flagged_rows(table: pd.DataFrame, *, close: bool = False) -> list[dict[str, Any]]:
    """Return overlay rows for flagged segments (factor = EB ratio, at least 1)."""
    rows = []
    for r in table.itertuples(index=False):
        row = {
            "u": int(r.u),
            "v": int(r.v),
            "key": int(r.key),
            "street": str(r.street),
            "factor": round(max(1.0, float(r.eb_ratio)), 4),
        }
        if close:
            row["closed"] = True
        rows.append(row)
    return rows

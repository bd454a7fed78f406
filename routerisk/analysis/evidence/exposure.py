"""Split the distance driven by exposure band and category influence.

:func:`distance_by_exposure` splits a drive log (the scored segments of ``routerisk score``,
read by :func:`read_segments`, or the map-matched drives of :func:`segments_from_drives`) by
exposure band and category influence, so a safety case can say how much of the driving was
near schools or busy streets, and how far each stratum still has to go on its own.
"""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from routerisk.analysis.evidence.formulas import METRES_PER_UNIT
from routerisk.errors import InputFileError, OptionError

# The package's logger, so that log lines name ``routerisk.analysis.evidence`` as before the split.
logger = logging.getLogger(__package__)


@dataclass(frozen=True)
class ExposureEvidence:
    """Distance driven per exposure band and per category influence.

    Attributes
    ----------
    by_band
        Columns ``band``, ``segments``, ``driven``, ``share`` (of all distance driven),
        ``still_needed`` (``needed - driven`` floored at 0), in ``units``.
    by_category
        Columns ``category``, ``driven`` (sum of ``length x infl_<category>``), ``share``,
        ``still_needed``.
    total
        All distance driven, in ``units``.
    units
        Distance unit of the tables.
    needed
        Distance each stratum needs (typically the zero-event distance).
    """

    by_band: pd.DataFrame
    by_category: pd.DataFrame
    total: float
    units: str
    needed: float


def _column_error(message: str, column: str, path: str | Path | None) -> InputFileError:
    return InputFileError(message, path=path, field=column)


def _numeric(frame: pd.DataFrame, column: str, path: str | Path | None) -> pd.Series:
    values = pd.to_numeric(frame[column], errors="coerce")
    bad = values.isna() | ~np.isfinite(values.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise _column_error(
            f"segment {row} has no finite number ({frame[column].iloc[row]!r})", column, path
        )
    return values.astype(float)


def distance_by_exposure(
    segments: pd.DataFrame,
    *,
    needed: float,
    units: str = "mi",
    path: str | Path | None = None,
) -> ExposureEvidence:
    """Split driven distance by exposure band and by category influence.

    Each band is treated as its own stratum that must on its own reach ``needed`` (for a claim
    such as "below the target near schools, too"); ``still_needed = max(0, needed - driven)``.

    Parameters
    ----------
    segments
        One row per driven segment, with ``length_m`` (metres, >= 0), ``band`` (exposure band
        name) and any number of ``infl_<category>`` columns (share 0..1 of the segment length
        inside that category's influence). Other columns are ignored.
    needed
        Distance each stratum needs, in ``units``.
    units
        ``"mi"`` or ``"km"``.
    path
        File the segments came from, named in errors.

    Returns
    -------
    ExposureEvidence
        The two tables, in ``units``.
    """
    if units not in METRES_PER_UNIT:
        raise OptionError(f"must be 'mi' or 'km', got {units!r}", field="--units")
    for column in ("length_m", "band"):
        if column not in segments.columns:
            raise _column_error("the segments have no such column", column, path)
    length = _numeric(segments, "length_m", path)
    if (length < 0).any():
        row = int(np.flatnonzero((length < 0).to_numpy())[0])
        raise _column_error(f"segment {row} has a negative length", "length_m", path)
    band = segments["band"]
    bad_band = band.isna() | (band.astype(str).str.strip() == "")
    if bad_band.any():
        row = int(np.flatnonzero(bad_band.to_numpy())[0])
        raise _column_error(f"segment {row} has no band name", "band", path)
    band = band.astype(str)
    dist = length / METRES_PER_UNIT[units]
    total = float(dist.sum())

    def share(x: float) -> float:
        return x / total if total > 0 else 0.0

    grouped = pd.DataFrame({"band": band, "driven": dist}).groupby("band", sort=True)
    by_band = grouped.agg(segments=("driven", "size"), driven=("driven", "sum")).reset_index()
    if "risk" in segments.columns:  # order bands from the least to the most exposed
        risk = pd.to_numeric(segments["risk"], errors="coerce")
        order = risk.groupby(band).mean().reindex(by_band["band"]).to_numpy()
        if np.isfinite(order).all():
            by_band = by_band.iloc[np.argsort(order, kind="stable")].reset_index(drop=True)
    by_band["segments"] = by_band["segments"].astype(int)
    by_band["share"] = [share(x) for x in by_band["driven"]]
    by_band["still_needed"] = np.maximum(needed - by_band["driven"], 0.0)

    rows = []
    for column in sorted(c for c in segments.columns if str(c).startswith("infl_")):
        infl = _numeric(segments, column, path)
        outside = (infl < -1e-9) | (infl > 1 + 1e-9)
        if outside.any():
            row = int(np.flatnonzero(outside.to_numpy())[0])
            raise _column_error(
                f"segment {row} has a share {infl.iloc[row]:g} outside 0..1", column, path
            )
        driven = float((dist * infl.clip(0.0, 1.0)).sum())
        rows.append(
            {
                "category": column[len("infl_") :],
                "driven": driven,
                "share": share(driven),
                "still_needed": max(needed - driven, 0.0),
            }
        )
    by_category = pd.DataFrame(rows, columns=["category", "driven", "share", "still_needed"])
    logger.info(
        "distance_by_exposure: %d segments, %.4g %s in %d bands and %d categories",
        len(segments),
        total,
        units,
        len(by_band),
        len(by_category),
    )
    return ExposureEvidence(
        by_band=by_band[["band", "segments", "driven", "share", "still_needed"]],
        by_category=by_category,
        total=total,
        units=units,
        needed=needed,
    )


def read_segments(path: str | Path) -> pd.DataFrame:
    """Read the feature properties of a scored segments GeoJSON into a DataFrame.

    Parameters
    ----------
    path
        A GeoJSON FeatureCollection such as ``routerisk score --out DIR`` writes as
        ``DIR/segments.geojson``.

    Returns
    -------
    pandas.DataFrame
        One row per feature, one column per property (geometry dropped).
    """
    source = Path(path)
    try:
        data = json.loads(source.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputFileError("no such file", path=source) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(f"cannot be read ({exc.__class__.__name__})", path=source) from None
    except json.JSONDecodeError as exc:
        raise InputFileError(f"is not valid JSON (line {exc.lineno})", path=source) from None
    if not isinstance(data, dict) or data.get("type") != "FeatureCollection":
        raise InputFileError("is not a GeoJSON FeatureCollection", path=source, field="type")
    features = data.get("features")
    if not isinstance(features, list) or not features:
        raise InputFileError("holds no segment features", path=source, field="features")
    rows = []
    for i, feat in enumerate(features):
        props = feat.get("properties") if isinstance(feat, dict) else None
        if not isinstance(props, dict):
            raise InputFileError(f"feature {i} has no properties", path=source, field="properties")
        rows.append(props)
    return pd.DataFrame.from_records(rows)


def segments_from_drives(net: Any, folder: str | Path) -> pd.DataFrame:
    """Map-match every GPX/GeoJSON/CSV drive in ``folder`` and return its driven segments.

    The frame has one row per driven edge piece with ``drive``, ``length_m``, ``band`` and
    ``infl_<category>`` from the network, the input :func:`distance_by_exposure` takes.
    """
    from routerisk import matching
    from routerisk.io.drives import read_drive_routes

    drives = read_drive_routes(folder, default_tz=net.timezone)
    return pd.concat(
        _drive_segments(net, drives, matching.RoadIndex.of_network(net)), ignore_index=True
    )


def segments_of_drives(net: Any, drives: list[Any]) -> pd.DataFrame:
    """Map-match read drives (routes) and return their driven segments.

    The same frame as :func:`segments_from_drives`, for routes already read; each drive is
    named ``<file name>:<route name>``.
    """
    from routerisk import matching

    if not drives:
        raise InputFileError("no drive given", field="drives")
    return pd.concat(
        _drive_segments(net, drives, matching.RoadIndex.of_network(net)), ignore_index=True
    )


def _drive_segments(net: Any, drives: list[Any], idx: Any) -> list[pd.DataFrame]:
    from routerisk import matching

    edges = net.edges
    cats = net.profile.category_names
    frames = []
    for r in drives:
        m = matching.to_edges(idx, r)
        pos = m.rows(edges.index)
        part = pd.DataFrame(
            {
                "drive": f"{Path(r.source).name}:{r.name}",
                "length_m": edges["length"].to_numpy()[pos] * np.asarray(m.fractions),
                "band": edges["band"].to_numpy()[pos],
            }
        )
        for c in cats:
            part[f"infl_{c}"] = edges[f"infl_{c}"].to_numpy()[pos]
        frames.append(part)
    return frames

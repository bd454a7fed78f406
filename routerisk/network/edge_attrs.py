"""Edge attributes of the road graph, the speeds assumed by road class, the UTM zone.

One road class, name and lane count per edge and a parsed maxspeed; the speeds assumed by
road class where none is tagged; the UTM zone the graph is projected to.

Shared by the osmnx pipeline (:mod:`routerisk.network.loader`) and the array build
(:mod:`routerisk.network.project`), so both give the same values.
"""

from __future__ import annotations

import functools
import math
from typing import Any

import pyproj
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from routerisk.errors import EmptyNetworkError
from routerisk.network import speeds

#: Speed assumed by road class where no edge of that class has a maxspeed (km/h; common
#: practice for US-style urban streets, no source; the user can override).
DEFAULT_CLASS_KPH = {
    "motorway": 105.0,
    "motorway_link": 65.0,
    "trunk": 90.0,
    "trunk_link": 55.0,
    "primary": 65.0,
    "primary_link": 50.0,
    "secondary": 56.0,
    "secondary_link": 45.0,
    "tertiary": 48.0,
    "tertiary_link": 40.0,
    "unclassified": 40.0,
    "residential": 40.0,
    "living_street": 10.0,
    "road": 40.0,
    "busway": 40.0,
}
FALLBACK_KPH = 40.0

# Road classes from highest to lowest, for choosing one class for a merged edge.
CLASS_RANK = (
    "motorway",
    "trunk",
    "primary",
    "secondary",
    "tertiary",
    "motorway_link",
    "trunk_link",
    "primary_link",
    "secondary_link",
    "tertiary_link",
    "unclassified",
    "residential",
    "living_street",
    "road",
    "busway",
)


@functools.lru_cache(maxsize=256)
def utm_crs(lon: float, lat: float) -> pyproj.CRS:
    """Return the WGS 84 UTM zone CRS that contains the point (chosen by pyproj)."""
    infos = query_utm_crs_info(
        datum_name="WGS 84",
        area_of_interest=AreaOfInterest(lon, lat, lon, lat),
    )
    if not infos:  # pragma: no cover - polar areas
        raise EmptyNetworkError(f"no UTM zone for lon {lon}, lat {lat}")
    return pyproj.CRS.from_epsg(int(infos[0].code))


def _first_class(value: Any) -> str:
    if isinstance(value, list):
        ranked = sorted(
            value, key=lambda v: (CLASS_RANK.index(v) if v in CLASS_RANK else 99, str(v))
        )
        return str(ranked[0])
    return str(value)


def _lanes(value: Any) -> int | None:
    vals = value if isinstance(value, list) else [value]
    out = []
    for v in vals:
        for tok in str(v).replace(";", "|").split("|"):
            try:
                n = float(tok)
            except ValueError:
                continue
            if math.isfinite(n) and n > 0:
                out.append(int(round(n)))
    return max(out) if out else None


def _name(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, list):
        return " / ".join(sorted({str(v) for v in value if v}))
    return str(value)


def normalise_attrs(d: dict[str, Any]) -> None:
    """Give one edge's attributes one road class, name, lane count and a parsed maxspeed.

    Merged edges carry lists in an order that follows Python's hash seed (osmnx merges with
    ``set``); every choice here is independent of that order, so builds are reproducible.
    """
    d["highway"] = _first_class(d.get("highway"))
    d["name"] = _name(d.get("name"))
    d["lanes"] = _lanes(d["lanes"]) if "lanes" in d else None
    d["oneway"] = bool(d["oneway"]) if not isinstance(d.get("oneway"), list) else any(d["oneway"])
    if isinstance(d.get("sidewalk"), list):
        d["sidewalk"] = sorted(str(x) for x in d["sidewalk"])[0]
    if isinstance(d.get("osmid"), list):
        d["osmid"] = min(int(x) for x in d["osmid"])
    if "maxspeed" in d:
        d["maxspeed_raw"] = (
            d["maxspeed"]
            if isinstance(d["maxspeed"], str)
            else ";".join(sorted(map(str, d["maxspeed"])))
        )
        kph = speeds.parse_maxspeed(d["maxspeed"])
        if kph is None:
            del d["maxspeed"]
        else:
            d["maxspeed"] = f"{kph:.4f}"

"""routerisk: pedestrian-exposure scoring of automated-vehicle test routes.

The package is flat, one pipeline stage per module::

    routerisk.profile    frozen, validated exposure profile (weights, radii, rules)
    routerisk.loader     OSM file -> projected drivable road graph
    routerisk.sources    OSM file -> exposure sources per profile category
    routerisk.severity   impact speed -> pedestrian death / severe injury probability
    routerisk.tagging    per-edge exposure, crossings and severity
    routerisk.network    saved network folder (GeoPackage + metadata)
"""

from __future__ import annotations

__version__ = "0.1.0"

CAUTION = (
    "Caution: scores rank relative pedestrian exposure under the weights of the profile used; "
    "they are not crash predictions, not a safety case and not a permit. They model "
    "pedestrian presence by place and time of week (street baseline, crossings, nearby land "
    "uses) and the severity of a strike given its speed; crash likelihood by speed only where "
    "the profile turns it on. They do not model traffic or pedestrian counts, sight lines, "
    "driver or vehicle behaviour, weather or light. The relative index compares a route with "
    "the area at the same minutes under the same profile and cannot be compared across "
    "profiles. Local law, the permitting agency and licensed traffic engineers decide what "
    "testing is allowed."
)

__all__ = ["CAUTION", "__version__"]

"""Read planned routes and recorded drives from GeoJSON, GPX and CSV files.

Every reader returns a list of :class:`PlannedRoute`: points in WGS84 (lon, lat), optional
timestamps, a mask of points that must be kept, and an optional departure time. Values come
from user files: they are parsed, never evaluated, and every problem raises
:class:`~routerisk.errors.InputFileError` (the file as a whole) or
:class:`~routerisk.errors.RouteInputError` (a route in it) naming the file and the field.

Submodules
----------
- :mod:`~routerisk.io.routes.files`: the entry points :func:`read_routes`,
  :func:`routes_to_geojson` and :func:`write_routes`;
- :mod:`~routerisk.io.routes.detect`: the file kind (GeoJSON, GPX or CSV) from the extension or
  the first bytes, and the refusal of OSM extracts, binary and YAML files;
- :mod:`~routerisk.io.routes.geojsonfile`, :mod:`~routerisk.io.routes.gpxfile`,
  :mod:`~routerisk.io.routes.csvfile`: one reader (and writer) per format, each documenting the
  format it reads;
- :mod:`~routerisk.io.routes.common`: :class:`PlannedRoute`, the constants and the checks every
  reader shares (times, coordinates, unique names).

Times without a UTC offset (GeoJSON, CSV) take ``default_tz`` or are refused. If only some
points of a route carry a time, the times of that route are dropped with a warning.

Each submodule imports its siblings directly (``common`` <- ``detect`` / the format readers
<- ``files``), never this package, so there is no import cycle. This file only re-exports the
public names, so ``routes.read_routes`` and ``from routerisk.io.routes import PlannedRoute`` keep
working.
"""

from routerisk.io.routes.common import REQUIRED_POINT_TOLERANCE_M, PlannedRoute
from routerisk.io.routes.files import read_routes, routes_to_geojson, write_routes
from routerisk.io.routes.gpxfile import gpx_text

__all__ = [
    "REQUIRED_POINT_TOLERANCE_M",
    "PlannedRoute",
    "read_routes",
    "routes_to_geojson",
    "gpx_text",
    "write_routes",
]

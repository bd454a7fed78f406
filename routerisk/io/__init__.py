"""Reading the user's files and writing outputs safely.

:mod:`~routerisk.io.routes` reads planned routes and recorded drives (GeoJSON, GPX, CSV);
:mod:`~routerisk.io.areas` reads the polygons of proposed test areas (GeoJSON, GeoPackage);
:mod:`~routerisk.io.counts` reads pedestrian counts (CSV, GeoJSON) for calibration;
:mod:`~routerisk.io.runs` reads the RUNS file of a test day (YAML, CSV);
:mod:`~routerisk.io.atomic` writes every output atomically (nothing half-written at a final
path) and records file checksums.
"""

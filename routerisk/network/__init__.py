"""The road network: from an OpenStreetMap file to the saved, tagged folder.

Modules in pipeline order: :mod:`~routerisk.network.osm` (one-pass reading of the file),
:mod:`~routerisk.network.speeds` (OSM ``maxspeed`` to km/h), :mod:`~routerisk.network.loader`
and :mod:`~routerisk.network.simplify` (the drivable graph), :mod:`~routerisk.network.sources`
(schools, shops, stops ... from the same file), :mod:`~routerisk.network.severity` (impact speed
to harm), :mod:`~routerisk.network.tagging` (exposure per edge), :mod:`~routerisk.network.context`
(the map background), :mod:`~routerisk.network.folder` (the saved folder) and
:mod:`~routerisk.network.overlay` (extra weights and rules fed back from early warnings).
"""

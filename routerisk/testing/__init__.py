"""Helpers that tests and benchmarks share: invented street networks of any size.

Not used by any command. :mod:`~routerisk.testing.synthetic` writes a perturbed-grid city with
exposure sources as an OSM file, for scale tests and benchmarks; its stages live beside it:
:mod:`~routerisk.testing.grid` (the grid layout and its exact edge count),
:mod:`~routerisk.testing.city` (names, output buffer, block plan),
:mod:`~routerisk.testing.streets`, :mod:`~routerisk.testing.sources` and
:mod:`~routerisk.testing.osm_writer` (the osmium output).
"""

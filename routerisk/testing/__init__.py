"""Helpers that tests and benchmarks share: invented street networks of any size.

Not used by any command. :mod:`~routerisk.testing.synthetic` writes a perturbed-grid city with
exposure sources as an OSM file, for scale tests and benchmarks.
"""

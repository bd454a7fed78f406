"""What people read: maps, charts, HTML reports and plain words.

:mod:`~routerisk.render.mapview` draws self-contained folium maps, :mod:`~routerisk.render.report`
builds HTML pages, :mod:`~routerisk.render.aggplot` draws charts on matplotlib's Agg canvas
(no pyplot), :mod:`~routerisk.render.words` holds headings, the glossary and time formats, and
one module writes each result's outputs (:mod:`~routerisk.render.routemap` for scores,
:mod:`~routerisk.render.calibration_report`, :mod:`~routerisk.render.evidence_chart` ...).
"""

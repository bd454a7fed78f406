"""Texts and choices shared by a library module and its command's help, kept import-light.

``routerisk CMD --help`` shows them without importing the module that does the work (and its
geopandas, scipy, folium ...), so start-up stays quick.
"""

from __future__ import annotations

#: The scenario SPECs of ``routerisk review --what-if`` (also in review's errors and report).
WHAT_IF_HELP = (
    "rule:<rule name>=off drops that hard rule; rule:<rule name>=on keeps it but puts it in "
    "force at every hour of the week; weight:<category>=<number> sets a category weight. "
    "Several SPECs after one --what-if form one scenario; repeat --what-if for more scenarios."
)

#: The CUSUM groups of ``routerisk watch --group``.
WATCH_GROUPS = ("street", "band", "hour")

#: The units of discovery, p-value tests and expectations of ``routerisk watch``.
WATCH_UNITS = ("block", "segment")
WATCH_TESTS = ("auto", "negbin", "poisson")
WATCH_EXPECTED = ("modelled", "distance")

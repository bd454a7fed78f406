"""Ways digitised twice: copy some roads of an OSM XML file over the same nodes.

Duplicate digitising leaves a road drawn twice over the same nodes, sometimes only over its
first nodes, sometimes as a one-way copy of a two-way street. Such copies make shape nodes
with more than one way in and out, the case where osmnx's simplification depends on the
order it walks the graph. Used by tests/test_simplify.py and bench/make_city.py (invented
data only).
"""

from __future__ import annotations

import copy
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from routerisk.io.atomic import write_bytes_atomic

#: Ids of the copies start here, above every id the generated cities use.
FIRST_COPY_ID = 10**9


def write_with_copies(
    src: str | Path, out: str | Path, *, oneway: int, twoway: int, seed: int = 0
) -> int:
    """Write ``src`` (OSM XML) to ``out`` with some of its roads copied; return the count.

    ``oneway`` one-way roads are copied as they are, ``twoway`` two-way roads as one-way
    copies (tagged ``oneway=yes``).

    Half the copies (at random) keep only the first two or more of their way's nodes. ``out``
    may be ``src``: the file is written whole, then moved into place.
    """
    root = ET.parse(src).getroot()  # noqa: S314 (a file the city generator wrote)
    rng = np.random.default_rng(seed)
    roads = [w for w in root.findall("way") if w.find("tag[@k='highway']") is not None]
    one = [w for w in roads if w.find("tag[@k='oneway']") is not None]
    two = [w for w in roads if w.find("tag[@k='oneway']") is None]
    picked = [one[i] for i in rng.choice(len(one), oneway, replace=False)]
    picked += [two[i] for i in rng.choice(len(two), twoway, replace=False)]
    for i, way in enumerate(picked):
        twin = copy.deepcopy(way)
        twin.set("id", str(FIRST_COPY_ID + i))
        if twin.find("tag[@k='oneway']") is None:
            ET.SubElement(twin, "tag", k="oneway", v="yes")
        nds = twin.findall("nd")
        if len(nds) > 2 and rng.random() < 0.5:
            for nd in nds[int(rng.integers(2, len(nds) + 1)) :]:
                twin.remove(nd)
        root.append(twin)
    write_bytes_atomic(out, ET.tostring(root, encoding="utf-8", xml_declaration=True))
    return len(picked)

"""The unsimplified road graph as arrays: one directed edge per consecutive node pair of a way.

The first step of the vectorised build (:mod:`routerisk.network.simplify` merges the chains,
:mod:`routerisk.network.project` projects and writes the frames); it gives the nodes and
edges osmnx's ``graph_from_xml`` adds before simplification, in the same order, with the
same great-circle lengths.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from routerisk.network.osm import RawOSM

#: The tags of a way copied onto its edges, in the order the loader always used.
EDGE_TAGS = ("name", "lanes", "maxspeed", "sidewalk", "ref", "hazard", "maxspeed:conditional")
_ONEWAY = {"yes", "true", "1", "-1", "reverse", "T", "F"}
_REVERSED = {"-1", "reverse", "T"}


@dataclass
class RawEdges:
    """The unsimplified directed graph as arrays (one edge per consecutive node pair)."""

    node_ids: np.ndarray  # int64 OSM ids, in the order osmnx would add them
    lon: np.ndarray
    lat: np.ndarray
    src: np.ndarray  # node positions, edges in insertion order
    dst: np.ndarray
    length: np.ndarray  # metres (great circle, as osmnx)
    group: np.ndarray  # way index
    groups: list[dict[str, Any]]  # raw attributes of each group (without length)


#: osmnx's ``osmnx.distance.EARTH_RADIUS_M`` (metres).
EARTH_RADIUS_M = 6_371_009


def great_circle(
    lat1: np.ndarray, lon1: np.ndarray, lat2: np.ndarray, lon2: np.ndarray
) -> np.ndarray:
    """Return ``osmnx.distance.great_circle`` (haversine, metres) in the same operations.

    Written out here because importing osmnx (and through it matplotlib.pyplot) costs more
    than a second of start-up; tests/test_simplify.py checks the values are osmnx's to the bit.
    """
    y1 = np.deg2rad(lat1)
    y2 = np.deg2rad(lat2)
    delta_y = y2 - y1
    x1 = np.deg2rad(lon1)
    x2 = np.deg2rad(lon2)
    delta_x = x2 - x1
    h = np.sin(delta_y / 2) ** 2 + np.cos(y1) * np.cos(y2) * np.sin(delta_x / 2) ** 2
    h = np.minimum(1, h)
    arc = 2 * np.arcsin(np.sqrt(h))
    return arc * EARTH_RADIUS_M


def raw_edges(raw: RawOSM) -> RawEdges:
    """Return the raw edges of the drivable ways of ``raw``, in osmnx insertion order."""
    ways = raw.ways
    nw = len(ways)
    counts = np.fromiter((len(w.refs) for w in ways), dtype=np.int64, count=nw)
    oneway = np.zeros(nw, dtype=bool)
    rev = np.zeros(nw, dtype=bool)
    groups: list[dict[str, Any]] = []
    refs_l, ll_l = [], []
    for i, w in enumerate(ways):
        tags = w.tags
        ow_tag = tags.get("oneway")
        ow = ow_tag in _ONEWAY or tags.get("junction") == "roundabout"
        r = bool(ow and ow_tag in _REVERSED)
        oneway[i], rev[i] = ow, r
        base: dict[str, Any] = {
            "osmid": w.osmid,
            "highway": tags.get("highway"),
            "oneway": bool(ow),
            "reversed": r,
        }
        for key in EDGE_TAGS:
            if key in tags:
                base[key] = tags[key]
        groups.append(base)  # "reversed" is dropped at the end; kept for the key order
        if r:
            refs_l.append(w.refs[::-1])
            ll_l.append(w.lonlat[::-1])
        else:
            refs_l.append(w.refs)
            ll_l.append(w.lonlat)
    refs = np.concatenate(refs_l) if refs_l else np.zeros(0, np.int64)
    ll = np.concatenate(ll_l) if ll_l else np.zeros((0, 2))
    # nodes in order of first appearance
    uniq, first = np.unique(refs, return_index=True)
    order = np.argsort(first, kind="stable")
    node_ids = uniq[order]
    pos_of_sorted = np.empty(len(uniq), dtype=np.int64)
    pos_of_sorted[order] = np.arange(len(uniq))
    node_pos = pos_of_sorted[np.searchsorted(uniq, refs)]
    lon = ll[first[order], 0]
    lat = ll[first[order], 1]
    # consecutive pairs inside each way
    way_of = np.repeat(np.arange(nw), counts)
    starts = np.cumsum(counts) - counts
    is_last = np.zeros(len(refs), dtype=bool)
    is_last[starts + counts - 1] = True
    a = np.flatnonzero(~is_last)
    b = a + 1
    lengths = np.atleast_1d(great_circle(ll[a, 1], ll[a, 0], ll[b, 1], ll[b, 0]))
    keep = refs[a] != refs[b]
    a, b, lengths = a[keep], b[keep], lengths[keep]
    pw = way_of[a]
    two = ~oneway[pw]
    n_out = 1 + two.astype(np.int64)
    idx = np.repeat(np.arange(len(a)), n_out)
    back = np.zeros(len(idx), dtype=bool)
    back[np.cumsum(n_out)[two] - 1] = True  # the second of each two-way pair
    pa, pb = node_pos[a[idx]], node_pos[b[idx]]
    src = np.where(back, pb, pa)
    dst = np.where(back, pa, pb)
    group = pw[idx]
    return RawEdges(node_ids, lon, lat, src, dst, lengths[idx], group, groups)


# --------------------------------------------------------------------------- simplification

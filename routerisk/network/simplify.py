"""Vectorised road-graph construction: raw edges, topology simplification, projection.

This replaces the pure-Python steps of the osmnx pipeline the loader used (one
``networkx`` edge per node pair, ``osmnx.simplification.simplify_graph``,
``osmnx.truncate.largest_component``, ``osmnx.routing.add_edge_speeds`` /
``add_edge_travel_times``, ``osmnx.projection.project_graph`` and ``graph_to_gdfs``) with
numpy / shapely 2 / pyproj array code that gives the same graph: the same nodes in the same
order, the same ``(u, v, key)`` edges in the same order, the same attribute values, dtypes and
column order. ``tests/test_simplify.py`` checks this against the osmnx pipeline.

Simplification follows ``osmnx.simplification.simplify_graph`` with its default arguments
(strict mode, ``remove_rings=True``). A node is an endpoint (``_is_endpoint``) when

1. it is its own neighbour (a self-loop), or
2. it has no incoming or no outgoing edge, or
3. it does not have exactly two neighbours with 2 or 4 directed edges.

Every other node is interstitial and disappears into the edge that runs through it. In
this module an interstitial node with 2 directed edges is ``a -> x -> b``, one with 4 is
``a <-> x <-> b``; both give each incoming edge exactly one next edge, so the chains are
found by pointer jumping (list ranking) on the edge arrays. Interstitial nodes with 4
directed edges made of parallel duplicates (``a -> x`` twice) walk in osmnx in ways that
depend on the traversal, so for those rare inputs :func:`build_frames` raises
:class:`NeedsReference` and the loader uses the osmnx pipeline instead; it does the same when
isolated nodes would be kept (``--all-parts``), where osmnx's order comes from Python sets.
A largest strongly connected part that is tied or smaller than half the graph (clipped or
fragmented extracts) is ordered by networkx itself on a bare copy of the graph, as osmnx
orders it (:func:`largest_strong_part`).
"""

from __future__ import annotations

import logging
import operator
from dataclasses import dataclass
from typing import Any

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pyproj
import shapely
from scipy import sparse
from scipy.sparse import csgraph

from routerisk.network.osm import RawOSM

log = logging.getLogger(__name__)

#: The tags of a way copied onto its edges, in the order the loader always used.
EDGE_TAGS = ("name", "lanes", "maxspeed", "sidewalk", "ref", "hazard", "maxspeed:conditional")
_ONEWAY = {"yes", "true", "1", "-1", "reverse", "T", "F"}
_REVERSED = {"-1", "reverse", "T"}
_MISSING = object()


class NeedsReference(Exception):  # noqa: N818 - a signal, not an error a user sees
    """The input has a pattern whose osmnx result depends on traversal order."""


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


@dataclass
class SimpleGraph:
    """A (simplified) graph as arrays; edges in the order osmnx iterates them."""

    n_nodes: int  # positions refer to RawEdges.node_ids
    u: np.ndarray
    v: np.ndarray
    key: np.ndarray
    length: np.ndarray
    template: np.ndarray  # index into templates (attribute dicts without length/geometry)
    templates: list[dict[str, Any]]
    path_nodes: np.ndarray  # flat node positions of every edge's geometry
    path_offsets: np.ndarray  # edge i uses path_nodes[off[i]:off[i+1]]
    simplified: bool


def _endpoints(n: int, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """Return osmnx's endpoint flag of every node (rules 1-3, strict mode)."""
    outd = np.bincount(src, minlength=n)
    ind = np.bincount(dst, minlength=n)
    deg = outd + ind
    loop = np.zeros(n, dtype=bool)
    loop[src[src == dst]] = True
    pairs = np.unique(np.concatenate([src * n + dst, dst * n + src]))
    nbr = np.bincount(pairs // n, minlength=n)
    inter = (~loop) & (nbr == 2) & ((deg == 2) | (deg == 4)) & (ind > 0) & (outd > 0)
    return ~inter


def _rank_chains(prev: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """List ranking: return (root, rank, resolved) of every edge given its previous edge."""
    m = len(prev)
    anc = prev.copy()
    rank = (prev >= 0).astype(np.int64)
    root = np.where(prev < 0, np.arange(m), -1)
    for _ in range(int(np.ceil(np.log2(max(m, 2)))) + 2):
        idx = np.flatnonzero(anc >= 0)
        if len(idx) == 0:
            break
        a = anc[idx]
        done = anc[a] < 0
        new_rank = rank[idx] + rank[a]
        new_root = np.where(done, root[a], root[idx])
        anc[idx] = anc[a]
        rank[idx] = new_rank
        root[idx] = new_root
    resolved = anc < 0
    return root, rank, resolved


def _seq_sum(values: np.ndarray, owner: np.ndarray, rank: np.ndarray, n: int) -> np.ndarray:
    """Sum ``values`` per owner in rank order, one addition at a time (as Python's sum)."""
    out = np.zeros(n)
    order = np.lexsort((owner, rank))
    r = rank[order]
    bounds = np.flatnonzero(np.diff(r)) + 1
    for part in np.split(order, bounds):
        out[owner[part]] += values[part]
    return out


def _merge_attrs(dicts: list[dict[str, Any]]) -> dict[str, Any]:
    """Merge the attribute dicts of a path exactly as osmnx's simplify_graph does."""
    pa: dict[str, list[Any]] = {}
    for d in dicts:
        for attr, val in d.items():
            if attr in pa:
                pa[attr].append(val)
            else:
                pa[attr] = [val]
    out: dict[str, Any] = {}
    for attr, vals in pa.items():
        if attr in ("length", "travel_time"):
            out[attr] = None  # per edge, summed elsewhere
        elif len(set(vals)) == 1:
            out[attr] = vals[0]
        else:
            out[attr] = list(set(vals))
    return out


def simplify(re: RawEdges, *, simplify: bool = True) -> SimpleGraph:
    """Return the graph of ``re`` after osmnx's topology simplification (or unsimplified)."""
    n = len(re.node_ids)
    src, dst, m = re.src, re.dst, len(re.src)
    pair = src * n + dst
    # position of each raw edge's pair in the adjacency (first edge of the pair) and its key
    order = np.argsort(pair, kind="stable")
    sp = pair[order]
    head = np.ones(m, dtype=bool)
    head[1:] = sp[1:] != sp[:-1]
    grp = np.cumsum(head) - 1
    first_of_grp = order[head]
    slot = np.empty(m, dtype=np.int64)
    slot[order] = first_of_grp[grp]
    key = np.empty(m, dtype=np.int64)
    key[order] = np.arange(m) - np.flatnonzero(head)[grp]
    templates: list[dict[str, Any]] = []
    tcache: dict[tuple[int, bool], int] = {}

    def template_of(g: int, merged: bool) -> int:
        t = tcache.get((g, merged))
        if t is None:
            d = {"length": None, **re.groups[g]}
            if merged:
                d["geometry"] = None
            t = tcache[(g, merged)] = len(templates)
            templates.append(d)
        return t

    if not simplify:
        tmpl = np.array([template_of(int(g), False) for g in np.unique(re.group)], dtype=np.int64)
        tmap = np.full(len(re.groups), -1, dtype=np.int64)
        tmap[np.unique(re.group)] = tmpl
        srt = np.lexsort((key, slot, src))
        return SimpleGraph(
            n,
            src[srt],
            dst[srt],
            key[srt],
            re.length[srt],
            tmap[re.group[srt]],
            templates,
            np.column_stack([src[srt], dst[srt]]).ravel(),
            np.arange(0, 2 * m + 1, 2),
            False,
        )

    endpoint = _endpoints(n, src, dst)
    inter = ~endpoint
    ind = np.bincount(dst, minlength=n)
    outd = np.bincount(src, minlength=n)
    deg = ind + outd
    din = np.bincount(np.unique(dst * n + src) // n, minlength=n)
    dout = np.bincount(np.unique(pair) // n, minlength=n)
    regular = (deg == 2) | ((ind == 2) & (outd == 2) & (din == 2) & (dout == 2))
    if (inter & ~regular).any():
        raise NeedsReference("interstitial nodes with parallel edges")
    # the two neighbours of every interstitial node
    und = np.unique(np.concatenate([pair, dst * n + src]))
    und_node = und // n
    und_nb = und % n
    nb_sum = np.bincount(und_node, weights=und_nb, minlength=n).astype(np.int64)
    # previous edge of an edge leaving an interstitial node: from its other neighbour
    prev = np.full(m, -1, dtype=np.int64)
    e_int = np.flatnonzero(inter[src])
    x = src[e_int]
    p = nb_sum[x] - dst[e_int]
    look = np.minimum(np.searchsorted(sp, p * n + x), m - 1)
    if (sp[look] != p * n + x).any():  # pragma: no cover - regular nodes always have it
        raise NeedsReference("chain without a previous edge")
    prev[e_int] = order[look]
    root, rank, resolved = _rank_chains(prev)
    # path edges: resolved edges whose chain starts endpoint -> interstitial
    in_path = resolved & inter[dst[np.maximum(root, 0)]] & (root >= 0)
    kept = ~in_path  # edges between endpoints, and edges of endpoint-free rings
    pe = np.flatnonzero(in_path)
    roots, path_id = np.unique(root[pe], return_inverse=True)
    n_paths = len(roots)
    prank = rank[pe]
    path_len = np.bincount(path_id, minlength=n_paths)
    last = np.empty(n_paths, dtype=np.int64)
    last[path_id[prank == path_len[path_id] - 1]] = pe[prank == path_len[path_id] - 1]
    pu, pv = src[roots], dst[last]
    plength = _seq_sum(re.length[pe], path_id, prank, n_paths)
    # attributes: one group along the whole path, or a literal osmnx merge
    g_pe = re.group[pe]
    g_first = np.full(n_paths, -1, dtype=np.int64)
    g_first[path_id] = g_pe  # any member's group ...
    same = np.ones(n_paths, dtype=bool)
    np.logical_and.at(same, path_id, g_pe == g_first[path_id])
    ptmpl = np.empty(n_paths, dtype=np.int64)
    srt_pe = np.lexsort((prank, path_id))
    pe_sorted = pe[srt_pe]
    starts = np.concatenate([[0], np.cumsum(path_len)[:-1]])
    for i in np.flatnonzero(same):
        ptmpl[i] = template_of(int(g_first[i]), True)
    mixed = np.flatnonzero(~same)
    for i in mixed:
        es = pe_sorted[starts[i] : starts[i] + path_len[i]]
        merged = _merge_attrs([{"length": None, **re.groups[g]} for g in re.group[es]])
        merged["geometry"] = None
        ptmpl[i] = len(templates)
        templates.append(merged)
    # path geometry nodes: u, then the head of every chain edge in order
    path_nodes_l = np.empty(len(pe) + n_paths, dtype=np.int64)
    off_p = starts + np.arange(n_paths)
    path_nodes_l[off_p] = pu
    within = np.arange(len(pe)) - np.repeat(starts, path_len)
    path_nodes_l[np.repeat(off_p, path_len) + 1 + within] = dst[pe_sorted]
    # kept raw edges
    ke = np.flatnonzero(kept)
    kg = np.unique(re.group[ke])
    kmap = np.full(len(re.groups), -1, dtype=np.int64)
    kmap[kg] = [template_of(int(g), False) for g in kg]
    # adjacency slot and key of the path edges (after the raw edges of the same pair)
    ppair = pu * n + pv
    kpair = pair[ke]
    kp_sorted = np.sort(kpair)
    n_raw = np.searchsorted(kp_sorted, ppair, side="right") - np.searchsorted(
        kp_sorted, ppair, side="left"
    )
    p_order = np.lexsort((roots, ppair))
    pp = ppair[p_order]
    phead = np.ones(n_paths, dtype=bool)
    phead[1:] = pp[1:] != pp[:-1]
    pgrp = np.cumsum(phead) - 1
    prank_pair = np.empty(n_paths, dtype=np.int64)
    prank_pair[p_order] = np.arange(n_paths) - np.flatnonzero(phead)[pgrp]
    first_root = np.empty(n_paths, dtype=np.int64)
    first_root[p_order] = roots[p_order][phead][pgrp]
    raw_slot = np.full(n_paths, -1, dtype=np.int64)
    has_raw = n_raw > 0
    if has_raw.any():
        look = np.searchsorted(sp, ppair[has_raw])
        raw_slot[has_raw] = slot[order[look]]
    p_slot = np.where(has_raw, raw_slot, m + first_root)
    p_key = n_raw + prank_pair
    # assemble
    u = np.concatenate([src[ke], pu])
    v = np.concatenate([dst[ke], pv])
    k = np.concatenate([key[ke], p_key])
    sl = np.concatenate([slot[ke], p_slot])
    length = np.concatenate([re.length[ke], plength])
    tmpl = np.concatenate([kmap[re.group[ke]], ptmpl])
    counts = np.concatenate([np.full(len(ke), 2, dtype=np.int64), path_len + 1])
    flat = np.concatenate([np.column_stack([src[ke], dst[ke]]).ravel(), path_nodes_l])
    srt = np.lexsort((k, sl, u))
    u, v, k, length, tmpl, flat, off = _take_edges(u, v, k, length, tmpl, flat, counts, srt)
    g = SimpleGraph(n, u, v, k, length, tmpl, templates, flat, off, True)
    return _remove_rings(g)


def _take_edges(u, v, k, length, tmpl, flat, counts, sel):
    off = np.concatenate([[0], np.cumsum(counts)])
    c = counts[sel]
    starts = off[:-1][sel]
    idx = np.repeat(starts - np.concatenate([[0], np.cumsum(c)[:-1]]), c) + np.arange(c.sum())
    return (
        u[sel],
        v[sel],
        k[sel],
        length[sel],
        tmpl[sel],
        flat[idx],
        np.concatenate([[0], np.cumsum(c)]),
    )


def _subset(g: SimpleGraph, sel: np.ndarray) -> SimpleGraph:
    counts = np.diff(g.path_offsets)
    u, v, k, length, tmpl, flat, off = _take_edges(
        g.u, g.v, g.key, g.length, g.template, g.path_nodes, counts, sel
    )
    return SimpleGraph(g.n_nodes, u, v, k, length, tmpl, g.templates, flat, off, g.simplified)


def _remove_rings(g: SimpleGraph) -> SimpleGraph:
    """Drop weakly connected parts without an endpoint (osmnx ``_remove_rings``)."""
    n = g.n_nodes
    endpoint = _endpoints(n, g.u, g.v)
    present = np.zeros(n, dtype=bool)
    present[g.u] = present[g.v] = True
    mat = sparse.coo_matrix((np.ones(len(g.u)), (g.u, g.v)), shape=(n, n)).tocsr()
    _, lab = csgraph.connected_components(mat, directed=True, connection="weak")
    has_end = np.zeros(lab.max() + 1, dtype=bool)
    has_end[lab[present & endpoint]] = True
    ok = has_end[lab[g.u]]
    if ok.all():
        return g
    return _subset(g, np.flatnonzero(ok))


def largest_strong_part(
    g: SimpleGraph, nodes_in_graph: np.ndarray, node_ids: np.ndarray | None = None
) -> SimpleGraph:
    """Keep the largest strongly connected part, in osmnx's node and edge order.

    ``nodes_in_graph`` are the node positions of the graph in its order (nodes without
    edges included); ``node_ids`` the OSM ids of all positions.

    osmnx keeps ``nx.MultiDiGraph(G.subgraph(largest))``. When the part holds at least half
    the nodes its edges come in the graph's order; when it holds fewer (a clipped or
    fragmented extract), networkx walks the nodes in the order of the part's Python set,
    and when parts tie, ``max`` takes the first one networkx finds. For those cases the
    edges are ordered by running networkx itself on a bare copy of the graph (the node ids,
    node order and edge order of osmnx's graph, no attributes), which gives the same set and
    so the same order (tests/test_simplify.py, fragmented and tied inputs).
    """
    n = g.n_nodes
    mat = sparse.coo_matrix((np.ones(len(g.u)), (g.u, g.v)), shape=(n, n)).tocsr()
    _, lab = csgraph.connected_components(mat, directed=True, connection="strong")
    lab_g = lab[nodes_in_graph]
    _, inv, sizes = np.unique(lab_g, return_inverse=True, return_counts=True)
    if len(sizes) == 1:
        return g
    big = sizes.max()
    if (sizes == big).sum() > 1 or 2 * big < len(nodes_in_graph):
        if node_ids is None:
            raise NeedsReference("largest strongly connected part tied or under half the nodes")
        return _subset(g, _networkx_part_order(g, nodes_in_graph, node_ids))
    keep_lab = lab_g[np.flatnonzero(sizes[inv] == big)[0]]
    ok = (lab[g.u] == keep_lab) & (lab[g.v] == keep_lab)
    return _subset(g, np.flatnonzero(ok))


def _networkx_part_order(
    g: SimpleGraph, nodes_in_graph: np.ndarray, node_ids: np.ndarray
) -> np.ndarray:
    """Return the edge positions of osmnx's largest strong part, in its edge order."""
    bare = nx.MultiDiGraph()
    bare.add_nodes_from(node_ids[nodes_in_graph].tolist())
    uid, vid, keys = node_ids[g.u].tolist(), node_ids[g.v].tolist(), g.key.tolist()
    bare.add_edges_from(zip(uid, vid, keys, strict=True))
    largest = max(nx.strongly_connected_components(bare), key=len)
    kept = nx.MultiDiGraph(bare.subgraph(largest))
    where = {e: i for i, e in enumerate(zip(uid, vid, keys, strict=True))}
    return np.fromiter(
        (where[e] for e in kept.edges(keys=True)), dtype=np.int64, count=kept.number_of_edges()
    )


def isolated_nodes(re: RawEdges) -> np.ndarray:
    """Return a flag per node of the raw graph: True when it has no edge."""
    has = np.zeros(len(re.node_ids), dtype=bool)
    has[re.src] = has[re.dst] = True
    return ~has


# ----------------------------------------------------------------------- normalise, speeds


def _normalise(d: dict[str, Any]) -> dict[str, Any]:
    """Apply the loader's edge normalisation to one attribute dict (a copy)."""
    from routerisk.network import loader

    d = dict(d)
    loader.normalise_attrs(d)
    if "geometry" not in d:
        d["geometry"] = None
    d["speed_kph"] = None
    d["travel_time"] = None
    return d


def _normalise_all(templates: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Normalise every template, once per distinct content (ways differ mostly by osmid)."""
    cache: dict[Any, dict[str, Any]] = {}
    out = []
    for t in templates:
        try:
            key = tuple((k, v) for k, v in t.items() if k != "osmid")
            hash(key)
        except TypeError:  # merged lists
            out.append(_normalise(t))
            continue
        d = cache.get(key)
        if d is None:
            d = cache[key] = _normalise(t)
        if "osmid" in t:
            d = dict(d)
            d["osmid"] = (
                min(int(x) for x in t["osmid"]) if isinstance(t["osmid"], list) else t["osmid"]
            )
        out.append(d)
    return out


def _is_null(val: Any) -> bool:
    if isinstance(val, list):
        return False
    return val is None or (isinstance(val, float) and val != val)


@dataclass
class Frames:
    """The projected nodes and edges, equal to ``osmnx.convert.graph_to_gdfs`` of the graph."""

    nodes: gpd.GeoDataFrame
    edges: gpd.GeoDataFrame
    graph_attrs: dict[str, Any]
    graph_columns: list[str]  # edge attribute order of the graph's dicts


def _column(values: list[Any], tmpl: np.ndarray) -> Any:
    """Return the column of per-edge values taken from per-template ``values``.

    The dtype is the one pandas infers for a list of dicts holding these values (missing
    keys read as NaN), found on one row per distinct value kind.
    """
    used = np.unique(tmpl)
    reps = [values[t] for t in used.tolist()]
    missing = any(r is _MISSING for r in reps)
    sample: list[dict[str, Any]] = []
    kinds: set[type] = set()
    for r in reps:
        if r is not _MISSING and type(r) not in kinds:
            kinds.add(type(r))
            sample.append({"c": r})
    if missing:
        sample.append({})
    dtype = pd.DataFrame(sample)["c"].dtype
    obj = np.empty(len(values), dtype=object)
    for i, val in enumerate(values):
        obj[i] = np.nan if val is _MISSING else val
    col = obj[tmpl]
    if isinstance(dtype, np.dtype) and dtype.kind in "fiub":
        return col.astype(dtype)
    return pd.array(col, dtype=dtype)


def _edge_speeds(norm: list[dict[str, Any]], used: np.ndarray, template: np.ndarray) -> np.ndarray:
    """Return each edge's speed in km/h as osmnx's add_edge_speeds gives it.

    A parsed ``maxspeed`` where the edge has one, else the mean of its class's observed
    speeds, else the loader's default for the class.
    """
    from routerisk.network import loader

    tm_hw = [d["highway"] for d in norm]
    tm_ms = [float(d["maxspeed"]) if "maxspeed" in d else np.nan for d in norm]
    hw_codes = {h: i for i, h in enumerate(sorted(set(tm_hw[t] for t in used)))}
    t_hw = np.array([hw_codes.get(h, -1) for h in tm_hw], dtype=np.int64)
    edge_hw = t_hw[template]
    edge_ms = np.asarray(tm_ms, dtype=float)[template]
    classes = sorted(hw_codes, key=hw_codes.get)
    observed = {c for c in classes if np.isfinite(edge_ms[edge_hw == hw_codes[c]]).any()}
    hwy = {c: loader.DEFAULT_CLASS_KPH.get(c, loader.FALLBACK_KPH) for c in set(classes) - observed}
    avg: dict[str, float] = dict(pd.Series(hwy, dtype=float).dropna()) if hwy else {}
    for c in classes:
        if c not in avg:
            avg[c] = float(pd.Series(edge_ms[edge_hw == hw_codes[c]]).mean())
    avg_arr = np.array([avg[c] for c in classes], dtype=float)
    speed = np.where(np.isfinite(edge_ms), edge_ms, avg_arr[edge_hw])
    return speed


def build_frames(
    raw: RawOSM, *, largest_component: bool = True, simplify_graph: bool = True
) -> Frames:
    """Return nodes and edges GeoDataFrames of the projected drivable graph of ``raw``.

    Raises
    ------
    NeedsReference
        The osmnx result depends on a traversal order this module does not reproduce.
    """
    from routerisk.network import loader

    re = raw_edges(raw)
    iso = isolated_nodes(re)
    if iso.any() and not largest_component:
        raise NeedsReference("nodes without edges")
    g = simplify(re, simplify=simplify_graph)
    if largest_component:
        present = iso.copy()
        present[g.u] = present[g.v] = True
        g = largest_strong_part(g, np.flatnonzero(present), re.node_ids)
    if len(g.u) == 0:
        return Frames(gpd.GeoDataFrame(), gpd.GeoDataFrame(), {}, [])
    # nodes of the graph in its order (before projection): all nodes with edges
    present = np.zeros(g.n_nodes, dtype=bool)
    present[g.u] = present[g.v] = True
    gnodes = np.flatnonzero(present)
    lon0 = float(np.mean(re.lon[gnodes].tolist()))
    lat0 = float(np.mean(re.lat[gnodes].tolist()))
    crs = loader.utm_crs(lon0, lat0)
    tr = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    px, py = tr.transform(re.lon, re.lat)
    px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
    # normalised templates and their attribute values
    norm = _normalise_all(g.templates)
    used, first_row = np.unique(g.template, return_index=True)
    speed = _edge_speeds(norm, used, g.template)
    length = g.length
    travel = (pd.Series(length) / 1000 / (pd.Series(speed) / (60 * 60))).to_numpy()
    # column order of the graph's edge dicts (first appearance over rows)
    order_rows = np.argsort(first_row, kind="stable")
    graph_cols: list[str] = []
    seen: set[str] = set()
    for t in used[order_rows]:
        for c in norm[t]:
            if c not in seen:
                seen.add(c)
                graph_cols.append(c)
    # per-template values of the normalised columns; a column whose values are all null is
    # dropped by the round trip through graph_from_gdfs (osmnx project_graph)
    per_edge = {"length", "geometry", "speed_kph", "travel_time"}
    tvals: dict[str, list[Any]] = {}
    for c in graph_cols:
        if c in per_edge:
            continue
        tvals[c] = [norm[t].get(c, _MISSING) for t in range(len(norm))]
        tvals[c] = [_MISSING if (v is not _MISSING and _is_null(v)) else v for v in tvals[c]]
    graph_cols = [c for c in graph_cols if c != "reversed"]
    # edges of the final graph are grouped by node in order of first appearance
    first_seen = np.full(g.n_nodes, np.iinfo(np.int64).max, dtype=np.int64)
    uv = np.column_stack([g.u, g.v]).ravel()
    rows2 = np.repeat(np.arange(len(g.u)), 2) * 2 + np.tile([0, 1], len(g.u))
    np.minimum.at(first_seen, uv, rows2)
    final = np.argsort(first_seen[g.u], kind="stable")
    node_order = np.argsort(first_seen[gnodes], kind="stable")
    node_pos = gnodes[node_order]
    # final column order: first appearance of non-null keys over the final rows
    tmpl_final = g.template[final]
    used_f, first_f = np.unique(tmpl_final, return_index=True)
    cols: list[str] = []
    seen = set()
    for t in used_f[np.argsort(first_f, kind="stable")]:
        for c in graph_cols:
            if c in seen:
                continue
            if c in per_edge or tvals[c][t] is not _MISSING:
                seen.add(c)
                cols.append(c)
    counts = np.diff(g.path_offsets)
    idx = np.concatenate([[0], np.cumsum(counts[final])])
    take = np.repeat(g.path_offsets[:-1][final] - idx[:-1], counts[final]) + np.arange(idx[-1])
    pn = g.path_nodes[take]
    geoms = shapely.linestrings(
        np.column_stack([px[pn], py[pn]]), indices=np.repeat(np.arange(len(final)), counts[final])
    )
    data: dict[str, Any] = {}
    for c in cols:
        if c == "length":
            data[c] = length[final]
        elif c == "speed_kph":
            data[c] = speed[final]
        elif c == "travel_time":
            data[c] = travel[final]
        elif c == "geometry":
            data[c] = geoms
        else:
            data[c] = _column(tvals[c], tmpl_final)
    index = pd.MultiIndex.from_arrays(
        [re.node_ids[g.u[final]], re.node_ids[g.v[final]], g.key[final]], names=["u", "v", "key"]
    )
    crs_str = crs.to_string()
    edges = gpd.GeoDataFrame(data, index=index, geometry="geometry", crs=crs_str)
    nodes = gpd.GeoDataFrame(
        {"x": px[node_pos], "y": py[node_pos], "lon": re.lon[node_pos], "lat": re.lat[node_pos]},
        index=pd.Index(re.node_ids[node_pos], name="osmid"),
        geometry=shapely.points(px[node_pos], py[node_pos]),
        crs=crs_str,
    )
    attrs: dict[str, Any] = {"crs": crs_str, "created_with": "routerisk"}
    if g.simplified:
        attrs["simplified"] = True
    attrs["source"] = __import__("pathlib").Path(raw.path).name
    return Frames(nodes, edges, attrs, graph_cols)


def graph_from_frames(fr: Frames) -> nx.MultiDiGraph:
    """Return the MultiDiGraph the loader's osmnx pipeline built, from its frames."""
    G = nx.MultiDiGraph(**fr.graph_attrs)
    e = fr.edges
    nd = fr.nodes
    G.add_nodes_from(nd.index.tolist())
    cols = [c for c in fr.graph_columns if c in e.columns]
    lists, masks = [], []
    for c in cols:
        if c == "geometry":
            a = np.asarray(e.geometry.array, dtype=object)
        else:
            a = e[c].to_numpy(dtype=object)
        nn = ~pd.isna(a)
        lists.append(a.tolist())
        masks.append(None if nn.all() else nn.tolist())
    u = e.index.get_level_values(0).tolist()
    v = e.index.get_level_values(1).tolist()
    k = e.index.get_level_values(2).tolist()
    full = [c for c, mk in zip(cols, masks, strict=True) if mk is None]
    if len(full) == len(cols):
        rows: Any = (dict(zip(cols, vals, strict=True)) for vals in zip(*lists, strict=True))
    else:

        def gen() -> Any:
            spec = list(zip(cols, lists, masks, strict=True))
            for i in range(len(u)):
                yield {c: lst[i] for c, lst, mk in spec if mk is None or mk[i]}

        rows = gen()
    G.add_edges_from(zip(u, v, k, rows, strict=False))
    ids = nd.index.tolist()
    for c in ("x", "y", "lon", "lat"):
        nx.set_node_attributes(G, dict(zip(ids, nd[c].tolist(), strict=True)), name=c)
    return G


def graph_from_gdfs(
    nodes: gpd.GeoDataFrame, edges: gpd.GeoDataFrame, *, graph_attrs: dict[str, Any]
) -> nx.MultiDiGraph:
    """Return ``osmnx.convert.graph_from_gdfs(nodes, edges, graph_attrs=...)``, column-wise.

    The same nodes and edges in the same order with the same attribute dicts (null values
    left out, lists kept), without osmnx's per-row checks of every value.
    """
    G = nx.MultiDiGraph(**graph_attrs)
    cols = edges.columns.to_list()
    lists, masks = [], []
    for c in cols:
        a = edges[c].to_numpy(dtype=object)
        nn = ~pd.isna(a)
        lists.append(a.tolist())
        masks.append(None if nn.all() else nn.tolist())
    idx = edges.index
    u = idx.get_level_values(0).tolist()
    v = idx.get_level_values(1).tolist()
    k = idx.get_level_values(2).tolist()
    partial = [j for j, mk in enumerate(masks) if mk is not None]
    if partial:
        # rows sharing a pattern of null columns share the list of kept columns
        bits = np.zeros(len(u), dtype=np.int64)
        pat_cols: list[int] = partial[:62]
        for b, j in enumerate(pat_cols):
            bits |= np.asarray(masks[j], dtype=np.int64) << b
        if len(partial) > 62:  # pragma: no cover - not with the columns routerisk writes
            pat_cols = []
        pats, inv = np.unique(bits, return_inverse=True)
        keep = []
        for pat in pats.tolist():
            js = [
                j
                for j in range(len(cols))
                if masks[j] is None or (pat_cols and j in pat_cols and pat >> pat_cols.index(j) & 1)
            ]
            keep.append(
                (
                    tuple(cols[j] for j in js),
                    operator.itemgetter(*js)
                    if len(js) > 1
                    else (lambda row, j=js[0]: (row[j],))
                    if js
                    else (lambda row: ()),
                )
            )
        inv_l = inv.tolist()

    def rows() -> Any:
        if not partial:
            yield from (dict(zip(cols, vals, strict=True)) for vals in zip(*lists, strict=True))
            return
        if not pat_cols:  # pragma: no cover
            for i in range(len(u)):
                yield {
                    c: lists[j][i] for j, c in enumerate(cols) if masks[j] is None or masks[j][i]
                }
            return
        for i, vals in enumerate(zip(*lists, strict=True)):
            names, get = keep[inv_l[i]]
            yield dict(zip(names, get(vals), strict=True))

    add = G.add_edge  # one call per edge: add_edges_from copies every dict twice
    for a, b, key, d in zip(u, v, k, rows(), strict=False):
        add(a, b, key, **d)
    G.add_nodes_from(set(nodes.index) - set(G.nodes))
    df = (
        nodes.drop(columns=nodes.active_geometry_name)
        if (nodes.active_geometry_name is not None)
        else pd.DataFrame(nodes)
    )
    for col in df.columns:
        nx.set_node_attributes(G, values=df[col].dropna().to_dict(), name=col)
    return G

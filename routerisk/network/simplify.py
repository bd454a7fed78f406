"""Vectorised road-graph construction: topology simplification and the largest strong part.

With :mod:`routerisk.network.raw_edges` and :mod:`routerisk.network.project` this
replaces the pure-Python steps of the osmnx pipeline the loader used (one
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
found by pointer jumping (list ranking) on the edge arrays. An interstitial node with 4
directed edges in any other shape holds parallel copies (a one-way way digitised twice over
the same nodes, copies in mixed directions, a one-way street that turns two-way at a shape
node). Where the walk osmnx takes depends on the order it meets the successors, so the
clusters of interstitial nodes around such nodes (rare: a few per city) are walked in Python
with osmnx's own rules (:func:`_build_path`), and their paths join the ranked chains: osmnx
merges the first edge of each node pair along a path, removes the nodes inside every path
with all their edges, and keeps a path that runs out at a shape node as it is (a node it
leaves without edges stays in the graph, as in osmnx). Nodes without edges kept with
``--all-parts`` are placed as osmnx's projection places them (the order of a Python set
difference, rebuilt the same way in :mod:`routerisk.network.project`).
A largest strongly connected part that is tied or smaller than half the graph (clipped or
fragmented extracts) is ordered by networkx itself on a bare copy of the graph, as osmnx
orders it (:func:`largest_strong_part`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import networkx as nx
import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

from routerisk.network.raw_edges import (  # noqa: F401 - re-exported for callers of simplify
    EARTH_RADIUS_M,
    RawEdges,
    great_circle,
    raw_edges,
)


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
    orphans: np.ndarray | None = None  # per node: kept by simplification without an edge


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


@dataclass
class _Walked:
    """osmnx's walk through the shape-node clusters the array chains cannot rank."""

    cluster: np.ndarray  # per node: a shape node of such a cluster
    local: np.ndarray  # per raw edge: touches a node of such a cluster
    removed: np.ndarray  # per node: inside a walked path (osmnx removes it and its edges)
    edges: np.ndarray  # raw edge of every step of every path, path after path
    path: np.ndarray  # path number of every step
    rank: np.ndarray  # step number within its path
    roots: np.ndarray  # per path: first raw edge from its endpoint to its first shape node


def _walk_clusters(
    n: int,
    src: np.ndarray,
    dst: np.ndarray,
    slot: np.ndarray,
    inter: np.ndarray,
    irregular: np.ndarray,
) -> _Walked:
    """Walk the clusters of shape nodes that hold an irregular node as osmnx walks them.

    A cluster is a set of interstitial nodes joined by edges between interstitial nodes;
    osmnx's paths enter and leave a cluster only at endpoints, so the clusters with an
    irregular node (parallel copies of a one-way way, copies in mixed directions, a one-way
    street that turns two-way at a shape node) are walked here with osmnx's own rules
    (``osmnx.simplification._build_path``: successors in adjacency order, the first one not
    yet on the path; a path that runs out of successors ends where it is, or closes on its
    endpoint when that is a successor), and the rest of the graph is ranked on arrays.
    """
    both = inter[src] & inter[dst]
    mat = sparse.coo_matrix((np.ones(int(both.sum())), (src[both], dst[both])), shape=(n, n))
    _, lab = csgraph.connected_components(mat.tocsr(), directed=True, connection="weak")
    bad = inter & np.isin(lab, np.unique(lab[irregular]))
    local = bad[src] | bad[dst]
    # successors in adjacency order: the first raw edge of each node pair, in raw order
    succ: dict[int, list[int]] = {}
    first: dict[tuple[int, int], int] = {}
    for e in np.unique(slot[local]).tolist():
        a, b = int(src[e]), int(dst[e])
        succ.setdefault(a, []).append(b)
        first[(a, b)] = e
    is_end = (~inter).tolist()
    steps: list[int] = []
    path_no: list[int] = []
    ranks: list[int] = []
    roots: list[int] = []
    removed = np.zeros(n, dtype=bool)
    starts = np.unique(slot[local & ~inter[src] & bad[dst]])
    for e in starts.tolist():
        nodes = _build_path(int(src[e]), int(dst[e]), succ, is_end)
        removed[nodes[1:-1]] = True
        path_no.extend([len(roots)] * (len(nodes) - 1))
        ranks.extend(range(len(nodes) - 1))
        steps.extend(first[(a, b)] for a, b in zip(nodes[:-1], nodes[1:], strict=True))
        roots.append(e)
    steps_a, path_a, rank_a, roots_a = (
        np.asarray(x, dtype=np.int64) for x in (steps, path_no, ranks, roots)
    )
    return _Walked(bad, local, removed, steps_a, path_a, rank_a, roots_a)


def _build_path(
    endpoint: int, first: int, succ: dict[int, list[int]], is_end: list[bool]
) -> list[int]:
    """Return the nodes of the path osmnx builds from ``endpoint`` through ``first``."""
    path = [endpoint, first]
    on = {endpoint, first}
    for nxt in succ.get(first, ()):
        if nxt in on:
            continue
        path.append(nxt)
        on.add(nxt)
        at = nxt
        while not is_end[at]:
            ahead = [b for b in succ.get(at, ()) if b not in on]
            if len(ahead) == 1:
                at = ahead[0]
                path.append(at)
                on.add(at)
            elif not ahead:
                if endpoint in succ.get(at, ()):
                    return [*path, endpoint]  # a loop back to where it started
                return path  # runs out at a shape node (as osmnx, which warns)
            else:  # pragma: no cover - a shape node has two neighbours, one on the path
                raise AssertionError(f"shape node {at} with two ways on")
        return path
    return path


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

    inter = ~_endpoints(n, src, dst)
    ind = np.bincount(dst, minlength=n)
    outd = np.bincount(src, minlength=n)
    deg = ind + outd
    din = np.bincount(np.unique(dst * n + src) // n, minlength=n)
    dout = np.bincount(np.unique(pair) // n, minlength=n)
    regular = (deg == 2) | ((ind == 2) & (outd == 2) & (din == 2) & (dout == 2))
    irregular = inter & ~regular
    walked = _walk_clusters(n, src, dst, slot, inter, irregular) if irregular.any() else None
    ranked = inter if walked is None else inter & ~walked.cluster  # shape nodes ranked here
    # the two neighbours of every interstitial node
    und = np.unique(np.concatenate([pair, dst * n + src]))
    und_node = und // n
    und_nb = und % n
    nb_sum = np.bincount(und_node, weights=und_nb, minlength=n).astype(np.int64)
    # previous edge of an edge leaving an interstitial node: from its other neighbour
    prev = np.full(m, -1, dtype=np.int64)
    e_int = np.flatnonzero(ranked[src])
    x = src[e_int]
    p = nb_sum[x] - dst[e_int]
    look = np.minimum(np.searchsorted(sp, p * n + x), m - 1)
    if (sp[look] != p * n + x).any():  # pragma: no cover - regular nodes always have it
        raise AssertionError("a regular shape node without a previous edge")
    prev[e_int] = order[look]
    root, rank, resolved = _rank_chains(prev)
    # path edges: resolved edges whose chain starts endpoint -> interstitial
    in_path = resolved & ranked[dst[np.maximum(root, 0)]] & (root >= 0)
    kept = ~in_path  # edges between endpoints, and edges of endpoint-free rings
    pe = np.flatnonzero(in_path)
    roots, path_id = np.unique(root[pe], return_inverse=True)
    prank = rank[pe]
    if walked is not None:  # osmnx removes the nodes inside its paths with all their edges
        le = np.flatnonzero(walked.local)
        kept[le] = ~(walked.removed[src[le]] | walked.removed[dst[le]])
        pe = np.concatenate([pe, walked.edges])
        path_id = np.concatenate([path_id, walked.path + len(roots)])
        prank = np.concatenate([prank, walked.rank])
        roots = np.concatenate([roots, walked.roots])
    n_paths = len(roots)
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
    starts = np.cumsum(path_len) - path_len
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
    orphans = np.zeros(n, dtype=bool)
    if walked is not None:  # a path that ran out at a node another path passes through
        srt = srt[~(walked.removed[u[srt]] | walked.removed[v[srt]])]
        orphans[src[walked.local]] = orphans[dst[walked.local]] = True
        orphans[u[srt]] = orphans[v[srt]] = False
        orphans &= ~walked.removed  # left in the graph without edges, as osmnx leaves them
    u, v, k, length, tmpl, flat, off = _take_edges(u, v, k, length, tmpl, flat, counts, srt)
    g = SimpleGraph(n, u, v, k, length, tmpl, templates, flat, off, True, orphans)
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
    return SimpleGraph(
        g.n_nodes, u, v, k, length, tmpl, g.templates, flat, off, g.simplified, g.orphans
    )


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
    g: SimpleGraph, nodes_in_graph: np.ndarray, node_ids: np.ndarray
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
    if len(sizes) <= 1:
        return g
    big = sizes.max()
    if (sizes == big).sum() > 1 or 2 * big < len(nodes_in_graph):
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

"""The last steps of the vectorised build: attributes, speeds, projection, frames.

Normalised edge attributes, speeds and travel times, projection to the local UTM zone, and
the node and edge frames (or the graph).

Equal to osmnx's ``routing.add_edge_speeds`` / ``add_edge_travel_times``,
``projection.project_graph`` and ``convert.graph_to_gdfs`` / ``graph_from_gdfs`` on the
graph :mod:`routerisk.network.simplify` gives (tests/test_simplify.py).
"""

from __future__ import annotations

import operator
from dataclasses import dataclass
from typing import Any

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pyproj
import shapely

from routerisk.network.edge_attrs import DEFAULT_CLASS_KPH, FALLBACK_KPH, normalise_attrs, utm_crs
from routerisk.network.osm import RawOSM
from routerisk.network.raw_edges import raw_edges
from routerisk.network.simplify import isolated_nodes, largest_strong_part, simplify

_MISSING = object()


def _normalise(d: dict[str, Any]) -> dict[str, Any]:
    """Apply the loader's edge normalisation to one attribute dict (a copy)."""
    d = dict(d)
    normalise_attrs(d)
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
    tm_hw = [d["highway"] for d in norm]
    tm_ms = [float(d["maxspeed"]) if "maxspeed" in d else np.nan for d in norm]
    hw_codes = {h: i for i, h in enumerate(sorted(set(tm_hw[t] for t in used)))}
    t_hw = np.array([hw_codes.get(h, -1) for h in tm_hw], dtype=np.int64)
    edge_hw = t_hw[template]
    edge_ms = np.asarray(tm_ms, dtype=float)[template]
    classes = sorted(hw_codes, key=hw_codes.get)
    observed = {c for c in classes if np.isfinite(edge_ms[edge_hw == hw_codes[c]]).any()}
    hwy = {c: DEFAULT_CLASS_KPH.get(c, FALLBACK_KPH) for c in set(classes) - observed}
    avg: dict[str, float] = dict(pd.Series(hwy, dtype=float).dropna()) if hwy else {}
    for c in classes:
        if c not in avg:
            avg[c] = float(pd.Series(edge_ms[edge_hw == hw_codes[c]]).mean())
    avg_arr = np.array([avg[c] for c in classes], dtype=float)
    speed = np.where(np.isfinite(edge_ms), edge_ms, avg_arr[edge_hw])
    return speed


def _isolated_order(ids: np.ndarray, every: np.ndarray, linked: np.ndarray) -> np.ndarray:
    """Return the positions of the nodes without edges, in the order osmnx adds them back.

    In its projection ``graph_from_gdfs`` adds ``set(nodes.index) - set(G.nodes)`` after the edges
    (``nodes`` in the graph's order, ``G.nodes`` as the edges named them). The same two sets
    are built here the same way, so Python iterates their difference in the same order.
    """
    left = ids[every].tolist()
    rest = list(set(left) - set(ids[linked].tolist()))
    pos = {n: i for i, n in zip(every.tolist(), left, strict=True)}
    return np.array([pos[n] for n in rest], dtype=np.int64)


def build_frames(
    raw: RawOSM, *, largest_component: bool = True, simplify_graph: bool = True
) -> Frames:
    """Return nodes and edges GeoDataFrames of the projected drivable graph of ``raw``."""
    re = raw_edges(raw)
    g = simplify(re, simplify=simplify_graph)
    iso = isolated_nodes(re)
    if g.orphans is not None:
        iso |= g.orphans
    keep_iso = iso.any() and not largest_component  # nodes without edges stay in the graph
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
    every = np.flatnonzero(present | iso) if keep_iso else gnodes  # the graph's nodes, in order
    lon0 = float(np.mean(re.lon[every].tolist()))
    lat0 = float(np.mean(re.lat[every].tolist()))
    crs = utm_crs(lon0, lat0)
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
    if keep_iso:
        node_pos = np.concatenate([node_pos, _isolated_order(re.node_ids, every, node_pos)])
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

"""The arrays of a :class:`~routerisk.matching.index.RoadIndex`, read from node and edge frames.

The same arrays, in the same order, as from the graph
``osmnx.convert.graph_from_gdfs(nodes, edges)`` (:func:`routerisk.network.project.graph_from_gdfs`),
without building it: nodes as the edges first name them (u then v, row by row), then the nodes
no edge touches in the order ``graph_from_gdfs`` adds them; edges grouped by u, then by v in
order of first appearance, then in row order (networkx's adjacency order).
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import numpy as np
import pandas as pd
import shapely
from shapely import LineString

from routerisk.errors import EmptyNetworkError


def _column(frame: Any, name: str, order: np.ndarray) -> np.ndarray:
    """Return ``frame[name]`` as floats in ``order`` (NaN where null or missing)."""
    if name not in frame:
        return np.full(len(order), np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)[order].copy()


def frame_arrays(nodes: Any, edges: Any, crs: Any) -> tuple[Any, ...]:
    """Return (node ids, id -> position, node xy, (u, v, keys), geometries, length, time)."""
    if not crs:
        raise ValueError("the road graph has no 'crs' graph attribute")
    if len(edges) == 0:
        raise EmptyNetworkError("the road graph has no edges")
    if not edges.index.is_unique:
        raise ValueError("edges repeat a (u, v, key); build the graph instead")
    idx = edges.index
    u_ids = idx.get_level_values(0).to_numpy(dtype=object)
    v_ids = idx.get_level_values(1).to_numpy(dtype=object)
    # nodes in the order add_edge first meets them: u then v, row by row
    both = np.empty(2 * len(u_ids), dtype=object)
    both[0::2], both[1::2] = u_ids, v_ids
    seen: dict[Hashable, int] = {}
    for n in both.tolist():
        if n not in seen:
            seen[n] = len(seen)
    order_nodes = list(seen)
    order_nodes += list(set(nodes.index) - set(order_nodes))  # as graph_from_gdfs adds them
    node_pos = {n: i for i, n in enumerate(order_nodes)}
    pos_in_frame = nodes.index.get_indexer(order_nodes)
    if (pos_in_frame < 0).any():
        raise ValueError("an edge names a node the node frame lacks")
    node_xy = np.column_stack(
        [
            nodes["x"].to_numpy(dtype=float)[pos_in_frame],
            nodes["y"].to_numpy(dtype=float)[pos_in_frame],
        ]
    )
    eu0 = np.fromiter((node_pos[n] for n in u_ids.tolist()), dtype=np.int64, count=len(u_ids))
    ev0 = np.fromiter((node_pos[n] for n in v_ids.tolist()), dtype=np.int64, count=len(v_ids))
    # networkx iterates u in node order, then v in the order (u, v) was first added
    pair = eu0 * len(order_nodes) + ev0
    _, first_row, inv = np.unique(pair, return_index=True, return_inverse=True)
    order = np.lexsort((np.arange(len(pair)), first_row[inv.ravel()], eu0))
    eu, ev = eu0[order], ev0[order]
    key_vals = idx.get_level_values(2).to_numpy(dtype=object)[order]
    keys: list[Hashable] = key_vals.tolist()
    geoms = edges.geometry.to_numpy(dtype=object)[order].copy()
    missing = np.flatnonzero(pd.isna(geoms))
    for i in missing.tolist():
        geoms[i] = LineString([node_xy[eu[i]], node_xy[ev[i]]])
    length = _column(edges, "length", order)
    no_len = np.isnan(length)
    if no_len.any():
        length[no_len] = shapely.length(geoms[no_len])
    ttime = _column(edges, "travel_time", order)
    no_time = np.isnan(ttime)
    if no_time.any():
        kph = _column(edges, "speed_kph", order)
        bad = no_time & (np.isnan(kph) | (kph == 0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            edge = (order_nodes[eu[i]], order_nodes[ev[i]], keys[i])
            raise ValueError(f"edge {edge} has neither travel_time nor speed_kph")
        ttime[no_time] = length[no_time] / (kph[no_time] / 3.6)
    return order_nodes, node_pos, node_xy, (eu, ev, keys), geoms, length, ttime

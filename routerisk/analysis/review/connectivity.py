"""Which streets of an area stay open under the hard rules, and whether they still join up.

:func:`connectivity` splits the open edges of an area into strongly connected parts (networkx).
"""

from __future__ import annotations

from typing import Any

import networkx as nx
import numpy as np
import pandas as pd

from routerisk.analysis.review.basis import _names_by_km, _r, _street_key
from routerisk.profile import Profile


def _closed_matrix(
    clip: pd.DataFrame, profile: Profile, force_hour: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Return cover (n, rules) and closed-by-hour (n, 168) bool arrays."""
    n = len(clip)
    cover = np.zeros((n, len(profile.rules)), dtype=bool)
    for i in range(len(profile.rules)):
        col = f"rule_{i}"
        if col in clip:
            cover[:, i] = clip[col].to_numpy(dtype=bool)
    closed = (cover.astype(np.int64) @ force_hour.astype(np.int64)) > 0
    return cover, closed


def connectivity(clip: pd.DataFrame, closed: np.ndarray) -> dict[str, Any]:
    """Return the strongly connected parts of the area's graph without the closed edges.

    Parameters
    ----------
    clip
        Clipped edges of the area (index ``u, v, key``; ``clip_m``, ``name``).
    closed
        One bool per row: the edge is closed.

    Returns
    -------
    dict
        ``parts`` (largest first: ``km`` directed, ``centreline_km``, ``nodes``, ``edges``,
        ``streets``), ``open_km``, ``closed_km``, ``km_between_parts`` (open edges from one
        part to another, drivable one way only), ``nodes_without_open_edge`` and
        ``largest_share`` (largest part km / open km).
    """
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    names = clip["name"].fillna("").astype(str).to_numpy()
    skey = _street_key(u, v, clip["length"].to_numpy(dtype=float))
    open_ = ~np.asarray(closed, dtype=bool)
    G = nx.DiGraph()
    G.add_edges_from(zip(u[open_].tolist(), v[open_].tolist(), strict=True))
    comp: dict[Any, int] = {}
    sccs = sorted((sorted(s) for s in nx.strongly_connected_components(G)), key=lambda s: s[0])
    for ci, nodes in enumerate(sccs):
        for nd in nodes:
            comp[nd] = ci
    part_rows: dict[int, list[int]] = {}
    between = 0.0
    for j in np.flatnonzero(open_):
        cu, cv = comp[u[j]], comp[v[j]]
        if cu == cv:
            part_rows.setdefault(cu, []).append(int(j))
        else:
            between += km[j]
    parts = []
    for ci, rows in part_rows.items():
        rows_a = np.array(rows)
        parts.append(
            {
                "km": _r(km[rows_a].sum()),
                "centreline_km": _r(sum(km[j] for j in {skey[r]: r for r in rows}.values())),
                "nodes": len(sccs[ci]),
                "edges": len(rows),
                "streets": _names_by_km(names[rows_a], km[rows_a]),
            }
        )
    parts.sort(key=lambda p: (-p["km"], -p["nodes"], p["streets"][:1]))
    open_km = float(km[open_].sum())
    all_nodes = set(u.tolist()) | set(v.tolist())
    touched = set(u[open_].tolist()) | set(v[open_].tolist())
    return {
        "parts": parts,
        "parts_count": len(parts),
        "open_km": _r(open_km),
        "closed_km": _r(km[~open_].sum()),
        "km_between_parts": _r(between),
        "nodes_without_open_edge": len(all_nodes - touched),
        "largest_share": _r(parts[0]["km"] / open_km) if parts and open_km > 0 else None,
    }

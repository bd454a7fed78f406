"""Small tagged networks built directly in memory for tests (invented, CC0)."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
from shapely import LineString

from routerisk.network.folder import Network

CRS = "EPSG:32625"


def make_network(
    nodes: dict[int, tuple[float, float]],
    edges: list[dict],
    profile,
    *,
    timezone: str = "Etc/GMT+3",
) -> Network:
    """Return a Network from node coordinates and edge dicts (u, v and any tag columns).

    Missing columns get neutral values: length from the straight geometry, 10 m/s travel,
    severity 1, baseline 0.1, no exposure, no crossings, no rule cover.
    """
    rows = []
    for e in edges:
        u, v = e["u"], e["v"]
        geom = LineString([nodes[u], nodes[v]])
        row = {
            "u": u,
            "v": v,
            "key": e.get("key", 0),
            "highway": "residential",
            "name": f"Street {u}-{v}",
            "length": geom.length,
            "speed_kph": 36.0,
            "severity": 1.0,
            "baseline": 0.1,
            "crossings": 0,
            "band": "quiet",
            "exposure_km": 0.1,
            "geometry": geom,
        }
        for c in profile.category_names:
            row[f"exp_{c}"] = 0.0
            row[f"infl_{c}"] = 0.0
        for i in range(len(profile.rules)):
            row[f"rule_{i}"] = False
        row.update({k: val for k, val in e.items() if k not in ("u", "v")})
        row.setdefault("travel_time", row["length"] / 10.0)
        rows.append(row)
    df = gpd.GeoDataFrame(pd.DataFrame(rows), geometry="geometry", crs=CRS)
    df = df.set_index(["u", "v", "key"])
    ids = sorted(nodes)
    nd = gpd.GeoDataFrame(
        {"x": [nodes[i][0] for i in ids], "y": [nodes[i][1] for i in ids]},
        index=pd.Index(ids, name="osmid"),
        geometry=gpd.points_from_xy([nodes[i][0] for i in ids], [nodes[i][1] for i in ids]),
        crs=CRS,
    )
    empty = gpd.GeoDataFrame({"category": []}, geometry=[], crs=CRS)
    return Network(df, nd, empty, empty, profile, {"timezone": timezone})


def random_grid(profile, *, n: int = 4, step: float = 100.0, seed: int = 0) -> Network:
    """Return an n x n two-way grid with random travel times and exposures (seeded)."""
    rng = np.random.default_rng(seed)
    nodes = {r * n + c + 1: (c * step, r * step) for r in range(n) for c in range(n)}
    edges = []
    for r in range(n):
        for c in range(n):
            a = r * n + c + 1
            for dr, dc in ((0, 1), (1, 0)):
                if r + dr < n and c + dc < n:
                    b = (r + dr) * n + c + dc + 1
                    for u, v in ((a, b), (b, a)):
                        e = {"u": u, "v": v, "travel_time": float(rng.uniform(5, 20))}
                        for cat in profile.category_names:
                            e[f"exp_{cat}"] = float(rng.choice([0.0, rng.uniform(0, 1)]))
                        edges.append(e)
    return make_network(nodes, edges, profile)


def without_context(net: Network) -> Network:
    """Return the same frames as a new Network: nothing cached, no background layer (a
    folder built before the layer existed)."""
    return Network(net.edges, net.nodes, net.sources, net.crossings, net.profile, net.meta)

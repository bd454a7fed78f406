"""Build a projected, drivable road graph from an OSM file, offline.

The graph follows osmnx conventions (``networkx.MultiDiGraph``; nodes with ``x``/``y``;
edges with ``osmid``, ``highway``, ``name``, ``oneway``, ``length`` ...). Topology
simplification, the largest strongly connected part, speeds and travel times follow osmnx
exactly; projection is to the local UTM zone chosen by pyproj.

The work is done on arrays by :mod:`routerisk.network.raw_edges`,
:mod:`routerisk.network.simplify` and :mod:`routerisk.network.project` (the osmnx steps are
pure Python and dominated the build); :func:`graph_from_raw_reference` keeps the osmnx
pipeline itself, for the tests that check both give the same graph.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np
from shapely import LineString

from routerisk.errors import EmptyNetworkError, OfflineError
from routerisk.network import project as _project
from routerisk.network.edge_attrs import (  # noqa: F401 - re-exported, loader's names before
    CLASS_RANK,
    DEFAULT_CLASS_KPH,
    FALLBACK_KPH,
    normalise_attrs,
    utm_crs,
)
from routerisk.network.osm import RawOSM, read_osm

log = logging.getLogger(__name__)

_ONEWAY = {"yes", "true", "1", "-1", "reverse", "T", "F"}
_REVERSED = {"-1", "reverse", "T"}


def _graph_from_raw(raw: RawOSM) -> nx.MultiDiGraph:
    """Create the unsimplified lon/lat graph (one edge per consecutive node pair)."""
    import osmnx as ox

    G = nx.MultiDiGraph(crs="epsg:4326", created_with="routerisk")
    for way in raw.ways:
        tags = way.tags
        oneway_tag = tags.get("oneway")
        oneway = oneway_tag in _ONEWAY or tags.get("junction") == "roundabout"
        refs, ll = way.refs, way.lonlat
        if oneway and oneway_tag in _REVERSED:
            refs, ll = refs[::-1], ll[::-1]
        for ref, (lon, lat) in zip(refs.tolist(), ll.tolist(), strict=True):
            if ref not in G:
                G.add_node(ref, x=lon, y=lat)
        attrs: dict[str, Any] = {
            "osmid": way.osmid,
            "highway": tags.get("highway"),
            "oneway": bool(oneway),
            "reversed": bool(oneway and oneway_tag in _REVERSED),
        }
        for key in (
            "name",
            "lanes",
            "maxspeed",
            "sidewalk",
            "ref",
            "hazard",
            "maxspeed:conditional",
        ):
            if key in tags:
                attrs[key] = tags[key]
        lengths = ox.distance.great_circle(ll[:-1, 1], ll[:-1, 0], ll[1:, 1], ll[1:, 0])
        rl = refs.tolist()
        for a, b, length in zip(rl[:-1], rl[1:], np.atleast_1d(lengths).tolist(), strict=True):
            if a == b:
                continue
            G.add_edge(a, b, length=float(length), **attrs)
            if not oneway:
                G.add_edge(b, a, length=float(length), **{**attrs, "reversed": True})
    return G


def _normalise_edges(G: nx.MultiDiGraph) -> None:
    """Normalise every edge's attributes and give straight edges a geometry."""
    for u, v, d in G.edges(data=True):
        normalise_attrs(d)
        if "geometry" not in d:
            d["geometry"] = LineString(
                [(G.nodes[u]["x"], G.nodes[u]["y"]), (G.nodes[v]["x"], G.nodes[v]["y"])]
            )


def _add_speeds(G: nx.MultiDiGraph) -> None:
    import osmnx as ox

    observed = {d["highway"] for _, _, d in G.edges(data=True) if "maxspeed" in d}
    classes = {d["highway"] for _, _, d in G.edges(data=True)}
    hwy = {c: DEFAULT_CLASS_KPH.get(c, FALLBACK_KPH) for c in classes - observed}
    ox.routing.add_edge_speeds(G, hwy_speeds=hwy or None, fallback=FALLBACK_KPH)
    ox.routing.add_edge_travel_times(G)


def graph_from_raw_reference(
    raw: RawOSM, *, largest_component: bool = True, simplify: bool = True
) -> nx.MultiDiGraph:
    """Build the projected drivable graph with osmnx's own (pure-Python) steps."""
    import osmnx as ox

    if not raw.ways:
        raise EmptyNetworkError("holds no drivable roads (after the drive filter)", path=raw.path)
    G = _graph_from_raw(raw)
    if simplify:
        G = ox.simplification.simplify_graph(G)
    if largest_component and G.number_of_nodes():  # osmnx refuses an empty graph here
        G = ox.truncate.largest_component(G, strongly=True)
    if G.number_of_edges() == 0:
        raise EmptyNetworkError("holds no connected drivable roads", path=raw.path)
    _normalise_edges(G)
    _add_speeds(G)
    lon = float(np.mean([d["x"] for _, d in G.nodes(data=True)]))
    lat = float(np.mean([d["y"] for _, d in G.nodes(data=True)]))
    crs = utm_crs(lon, lat)
    for _, d in G.nodes(data=True):
        d["lon"], d["lat"] = d["x"], d["y"]
    G = ox.projection.project_graph(G, to_crs=crs)
    for _, _, d in G.edges(data=True):
        d.pop("reversed", None)
    G.graph["crs"] = crs.to_string()
    G.graph["source"] = Path(raw.path).name
    return G


def _array_frames(raw: RawOSM, largest_component: bool, simplify: bool) -> _project.Frames:
    """Return the array-built frames, or a clear error when no drivable road is left."""
    if not raw.ways:
        raise EmptyNetworkError("holds no drivable roads (after the drive filter)", path=raw.path)
    fr = _project.build_frames(raw, largest_component=largest_component, simplify_graph=simplify)
    if len(fr.edges) == 0:
        raise EmptyNetworkError("holds no connected drivable roads", path=raw.path)
    return fr


def frames_from_raw(
    raw: RawOSM, *, largest_component: bool = True, simplify: bool = True
) -> _project.Frames:
    """Return the nodes and edges GeoDataFrames of the projected drivable graph.

    They equal ``osmnx.convert.graph_to_gdfs(graph_from_raw(raw))``, built without the
    graph.
    """
    return _array_frames(raw, largest_component, simplify)


def graph_from_raw(
    raw: RawOSM, *, largest_component: bool = True, simplify: bool = True
) -> nx.MultiDiGraph:
    """Build the projected drivable graph from an already-read OSM file."""
    G = _project.graph_from_frames(_array_frames(raw, largest_component, simplify))
    log.info(
        "graph_from_raw returned graph with %d nodes and %d edges",
        G.number_of_nodes(),
        G.number_of_edges(),
    )
    return G


def graph_from_file(
    path: str | Path, *, largest_component: bool = True, simplify: bool = True
) -> nx.MultiDiGraph:
    """Read an OSM file and return its projected drivable road graph.

    Parameters
    ----------
    path
        ``.osm``, ``.osm.bz2``, ``.osm.gz`` or ``.osm.pbf`` file.
    largest_component
        Keep only the largest strongly connected part (default).
    simplify
        Merge chains of interstitial nodes into single edges (osmnx's simplification).
    """
    return graph_from_raw(read_osm(path), largest_component=largest_component, simplify=simplify)


def graph_from_place(query: str, *, largest_component: bool = True) -> nx.MultiDiGraph:
    """Download a drivable graph for a place name through osmnx (needs the internet)."""
    import osmnx as ox

    try:
        G = ox.graph_from_place(
            query, network_type="drive", simplify=True, retain_all=not largest_component
        )
    except Exception as exc:  # noqa: BLE001 - osmnx raises many kinds when offline
        raise OfflineError(
            f"could not download the road network for {query!r} ({type(exc).__name__}); "
            "this needs an internet connection; offline, pass an OSM file instead",
            field="--place",
        ) from exc
    return G  # pragma: no cover - needs the network

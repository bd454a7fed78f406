"""The saved network folder: the tagged road graph that every later command reads.

A folder holds ``network.gpkg`` (layers ``edges``, ``nodes``, ``sources``, ``crossings``, and
``context``, the streets, water, parks and buildings maps draw behind the routes; any GIS opens
it; a folder without ``context`` still loads), ``profile.yaml`` (the profile used) and
``meta.json`` (format version, tool version, profile fingerprint, input checksum, CRS, time
zone), written last. The folder
is assembled under a hidden temporary name and moved into place only when complete.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import yaml

from routerisk import __version__
from routerisk._bulk import bulk
from routerisk.errors import NetworkFolderError, ProfileError
from routerisk.io.atomic import atomic_directory, dumps_json, sha256_file
from routerisk.io.timezones import check_timezone, infer_timezone
from routerisk.profile import Profile, load_profile, parse_profile, safe_load_yaml

if TYPE_CHECKING:
    import networkx as nx

# Building and tagging (osmium, scipy, the graph code) are imported where they are used, so
# that loading a saved network for scoring stays quick.

if TYPE_CHECKING:
    import folium

log = logging.getLogger(__name__)

FORMAT_VERSION = 1
GPKG = "network.gpkg"
META = "meta.json"
PROFILE = "profile.yaml"
EDGE_KEEP = (
    "u",
    "v",
    "key",
    "osmid",
    "highway",
    "name",
    "lanes",
    "oneway",
    "sidewalk",
    "maxspeed_raw",
    "hazard",
    "length",
    "speed_kph",
    "travel_time",
    "geometry",
)


@dataclass
class Network:
    """A tagged road network: edges, nodes, sources and crossings, with its profile."""

    edges: gpd.GeoDataFrame  # MultiIndex (u, v, key)
    nodes: gpd.GeoDataFrame  # index osmid
    sources: gpd.GeoDataFrame
    crossings: gpd.GeoDataFrame
    profile: Profile
    meta: dict[str, Any] = field(default_factory=dict)
    #: background of maps (streets, water, parks, buildings); None in folders built before it
    context: gpd.GeoDataFrame | None = None

    @property
    def crs(self) -> Any:
        """Return the projected CRS of the network."""
        return self.edges.crs

    @property
    def timezone(self) -> ZoneInfo:
        """Return the area's local time zone (a network setting)."""
        return ZoneInfo(self.meta.get("timezone", "UTC"))

    @cached_property
    def graph(self) -> nx.MultiDiGraph:
        """Return the tagged graph (osmnx conventions), built on first use.

        The same graph as ``osmnx.convert.graph_from_gdfs(nodes, edges)``, built column-wise.
        """
        from routerisk.network import project

        return project.graph_from_gdfs(
            self.nodes, self.edges, graph_attrs={"crs": self.edges.crs.to_string()}
        )

    @property
    def length_km(self) -> float:
        """Return the total directed edge length in km."""
        return float(self.edges["length"].sum() / 1000.0)

    def summary(self) -> dict[str, Any]:
        """Return the counts printed by ``routerisk build --json``."""
        counts = self.sources["category"].value_counts()
        return {
            "nodes": int(len(self.nodes)),
            "edges": int(len(self.edges)),
            "length_km": round(self.length_km, 3),
            "sources": {c: int(counts.get(c, 0)) for c in self.profile.category_names},
            "crossings": int(len(self.crossings)),
            "profile": self.profile.fingerprint,
            "timezone": self.meta.get("timezone", "UTC"),
        }

    def to_frame(self) -> pd.DataFrame:
        """Return the tagged edges without geometry (``u``, ``v``, ``key`` as columns)."""
        return pd.DataFrame(self.edges.reset_index().drop(columns="geometry"))

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return the tagged edges (``u``, ``v``, ``key`` as columns) in the network's CRS."""
        return self.edges.reset_index()

    def to_dict(self) -> dict[str, Any]:
        """Return the summary ``routerisk build --json`` prints."""
        return self.summary()

    def to_map(self, *, tiles: str | None = None) -> folium.Map:
        """Return the offline folium map of the edges by exposure band, with the sources."""
        from routerisk.render import mapview

        return mapview.network_map(self, tiles=tiles)

    def retag(
        self, profile: Profile, *, tagger: Callable[..., gpd.GeoDataFrame] | None = None
    ) -> Network:
        """Return this network tagged with another profile (same categories and selectors).

        ``tagger`` replaces :func:`routerisk.network.tagging.tag_edges` (e.g. a tiled one from
        :func:`routerisk.parallel.tagger`); the values are the same.
        """
        if profile.fingerprint == self.profile.fingerprint:
            return self
        old = {c.name: c.selectors for c in self.profile.categories}
        for c in profile.categories:
            if old.get(c.name) != c.selectors:
                raise ProfileError(
                    f"category {c.name!r} selects other OSM objects than the network was "
                    "built with; rebuild the network with this profile",
                    path=profile.source,
                    field=f"categories.{c.name}.select",
                )
        from routerisk.network import tagging

        base = self.edges[[c for c in self.edges.columns if c in EDGE_KEEP]]
        tag = tagging.tag_edges if tagger is None else tagger
        edges = tag(base, self.sources, self.crossings, profile, polygons=_rule_polygons(profile))
        return Network(
            edges,
            self.nodes,
            self.sources,
            self.crossings,
            profile,
            {**self.meta, "profile": profile.fingerprint},
            self.context,
        )


def _rule_polygons(profile: Profile) -> dict[str, gpd.GeoSeries]:
    from routerisk.errors import InputFileError

    out = {}
    for rule in profile.rules:
        if rule.polygons_file is None:
            continue
        try:
            gdf = gpd.read_file(rule.polygons_file)
        except Exception as exc:  # noqa: BLE001 - pyogrio raises several kinds
            raise InputFileError(
                f"cannot read rule polygons ({exc})",
                path=rule.polygons_file,
                field=f"rules.{rule.name}",
            ) from exc
        if gdf.crs is None:
            gdf = gdf.set_crs("EPSG:4326")
        out[rule.name] = gdf.geometry
    return out


def _feature_filter(profile: Profile) -> Any:
    """Return the profile's source predicate behind a cheap test of the tag keys.

    A selector matches only objects that carry its first key, so an object carrying none of
    those keys is no source; most OSM objects are dropped by this test alone.
    """
    from routerisk.network import sources

    want = sources.feature_filter(profile)
    first: dict[str, set[str] | None] = {}
    for cat in profile.categories:
        for sel in cat.selectors:
            if not sel.tags:
                return want  # a selector without keys matches everything
            key, values = sel.tags[0]
            if values is None or first.get(key, set()) is None:
                first[key] = None
            else:
                first[key] = first.get(key, set()) | set(values)  # type: ignore[operator]
    tests = tuple(first.items())

    def quick(tags: Any) -> bool:
        for key, values in tests:
            val = tags.get(key)
            if val is not None and (values is None or val in values):
                return want(tags)
        return False

    return quick


@bulk
def build_network(
    source: str | Path,
    *,
    profile: Profile | None = None,
    timezone: str | None = None,
    largest_component: bool = True,
    tagger: Any = None,
) -> Network:
    """Read an OSM file, build the road graph, extract sources and tag every edge.

    ``timezone`` is the area's local time zone (an IANA name); without it the zone is looked
    up offline at the centre of the network's nodes (:func:`infer_timezone`), and
    ``meta["timezone_source"]`` says which.

    ``tagger`` replaces :func:`routerisk.network.tagging.tag_edges` (same arguments and result),
    e.g. the tiled tagging of :mod:`routerisk.parallel` on a Dask cluster.
    """
    from routerisk.network import loader, sources, tagging
    from routerisk.network.osm import read_osm

    profile = profile or load_profile()
    if timezone is not None:
        check_timezone(timezone)
    raw = read_osm(source, feature_filter=_feature_filter(profile))
    frames = loader.frames_from_raw(raw, largest_component=largest_component)
    crs = frames.graph_attrs["crs"]
    nodes, edges = frames.nodes, frames.edges
    edges = edges[[c for c in edges.columns if c in EDGE_KEEP]]
    src = sources.sources_from_raw(raw, profile, crs=crs)
    cross = sources.crossings_from_raw(raw, crs=crs)
    tag = tagger or tagging.tag_edges
    tagged = tag(edges, src, cross, profile, polygons=_rule_polygons(profile))
    zone_source = "given"
    if timezone is None:
        lon, lat = nodes["lon"].astype(float), nodes["lat"].astype(float)
        timezone = infer_timezone((lon.min() + lon.max()) / 2, (lat.min() + lat.max()) / 2)
        zone_source = "looked up offline at the centre of the extract (timezonefinder)"
    meta = {
        "format_version": FORMAT_VERSION,
        "routerisk_version": __version__,
        "profile": profile.fingerprint,
        "source_name": Path(source).name,
        "source_sha256": sha256_file(source),
        "source_timestamp": raw.timestamp,
        "missing_node_refs": raw.missing_refs,
        "crs": crs,
        "timezone": timezone,
        "timezone_source": zone_source,
        "data_licence": "OpenStreetMap data: ODbL 1.0 (c) OpenStreetMap contributors, "
        "unless the source file says otherwise",
    }
    nodes = nodes[
        [c for c in ("x", "y", "lon", "lat", "street_count", "geometry") if c in nodes.columns]
    ]
    from routerisk.network import context as _context

    return Network(
        tagged, nodes, src, cross, profile, meta, _context.context_from_raw(raw, crs=crs)
    )


def _clean_for_gpkg(df: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    out = df.copy()
    for col in out.columns:
        if col == "geometry":
            continue
        if out[col].dtype == object:
            out[col] = out[col].map(
                lambda v: "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
            )
    return out


@bulk
def save_network(net: Network, out: str | Path, *, force: bool = False) -> Path:
    """Write the network folder atomically; return its path."""
    # GDAL stamps each layer with the time of writing; a fixed date keeps builds identical.
    before = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2000-01-01T00:00:00.000Z"})
    try:
        return _save(net, out, force=force)
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": before})


def _write_arrow() -> bool:
    """Return True when pyogrio can write through Arrow (pyarrow, pyogrio >= 0.8, GDAL >= 3.8).

    The GeoPackage is the same file either way (tests/test_network.py compares the bytes);
    through Arrow it is written several times faster.
    """
    try:
        major, minor = (int(p) for p in pyogrio.__version__.split(".")[:2])
    except ValueError:
        return False
    return _use_arrow() and (major, minor) >= (0, 8) and pyogrio.__gdal_version__ >= (3, 8, 0)


def _save(net: Network, out: str | Path, *, force: bool) -> Path:
    arrow = _write_arrow()
    with atomic_directory(out, force=force) as tmp:
        gpkg = tmp / GPKG
        edges = _clean_for_gpkg(net.edges.reset_index())
        edges["lanes"] = edges["lanes"].astype("float64") if "lanes" in edges else np.nan
        pyogrio.write_dataframe(edges, gpkg, layer="edges", use_arrow=arrow)
        pyogrio.write_dataframe(
            _clean_for_gpkg(net.nodes.reset_index()), gpkg, layer="nodes", use_arrow=arrow
        )
        if len(net.sources):
            pyogrio.write_dataframe(
                _clean_for_gpkg(net.sources),
                gpkg,
                layer="sources",
                promote_to_multi=False,
                use_arrow=arrow,
            )
        if len(net.crossings):
            pyogrio.write_dataframe(
                _clean_for_gpkg(net.crossings), gpkg, layer="crossings", use_arrow=arrow
            )
        if net.context is not None and len(net.context):
            pyogrio.write_dataframe(
                _clean_for_gpkg(net.context),
                gpkg,
                layer="context",
                promote_to_multi=False,
                use_arrow=arrow,
            )
        (tmp / PROFILE).write_text(
            yaml.safe_dump(_profile_doc(net.profile), sort_keys=False), encoding="utf-8"
        )
        meta = {
            **net.meta,
            "complete": True,
            "gpkg_sha256": sha256_file(gpkg),
            "profile_sha256": sha256_file(tmp / PROFILE),
            "summary": net.summary(),
        }
        (tmp / META).write_text(dumps_json(meta) + "\n", encoding="utf-8")
    return Path(out)


def _profile_doc(profile: Profile) -> Any:
    src = Path(profile.source) if profile.source else None
    if src is not None and src.is_file():
        return safe_load_yaml(src.read_text(encoding="utf-8"))
    raise ProfileError("profile has no readable source file", path=profile.source)


def _use_arrow() -> bool:
    """Return True when pyarrow is installed: pyogrio then reads layers about 4x faster.

    Both ways give the same frames (same columns, dtypes and values).
    """
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


def _source_columns() -> list[str]:
    from routerisk.network.sources import COLUMNS

    return list(COLUMNS)


@bulk
def load_network(
    folder: str | Path,
    *,
    profile: Profile | None = None,
    verify: bool = True,
    tagger: Callable[..., gpd.GeoDataFrame] | None = None,
) -> Network:
    """Read a network folder written by :func:`save_network`.

    Refuses a folder that is missing, incomplete, of another format version, or whose
    files do not match the checksums it records. With ``profile`` the network is re-tagged
    (by ``tagger`` when given, see :meth:`Network.retag`).
    """
    d = Path(folder)
    if not d.is_dir():
        raise NetworkFolderError("network folder not found (run 'routerisk build' first)", path=d)
    meta_path = d / META
    if not meta_path.is_file():
        raise NetworkFolderError("incomplete network folder: meta.json missing", path=d)
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise NetworkFolderError("meta.json is not valid JSON", path=meta_path) from exc
    if not isinstance(meta, dict) or meta.get("complete") is not True:
        raise NetworkFolderError("incomplete network folder", path=meta_path, field="complete")
    if meta.get("format_version") != FORMAT_VERSION:
        raise NetworkFolderError(
            f"network format {meta.get('format_version')!r}, this tool reads "
            f"{FORMAT_VERSION}; rebuild it",
            path=meta_path,
            field="format_version",
        )
    gpkg = d / GPKG
    if not gpkg.is_file():
        raise NetworkFolderError("network.gpkg missing", path=d)
    if verify and sha256_file(gpkg) != meta.get("gpkg_sha256"):
        raise NetworkFolderError(
            "network.gpkg does not match its checksum; rebuild", path=gpkg, field="gpkg_sha256"
        )
    arrow = _use_arrow()
    try:
        layers = {name for name, _ in pyogrio.list_layers(gpkg)}
        edges = pyogrio.read_dataframe(gpkg, layer="edges", use_arrow=arrow)
        nodes = pyogrio.read_dataframe(gpkg, layer="nodes", use_arrow=arrow)
        src = (
            pyogrio.read_dataframe(gpkg, layer="sources", use_arrow=arrow)
            if "sources" in layers
            else gpd.GeoDataFrame(columns=_source_columns(), geometry="geometry", crs=edges.crs)
        )
        cross = (
            pyogrio.read_dataframe(gpkg, layer="crossings", use_arrow=arrow)
            if "crossings" in layers
            else gpd.GeoDataFrame({"osmid": [], "crossing": []}, geometry=[], crs=edges.crs)
        )
        context = (
            pyogrio.read_dataframe(gpkg, layer="context", use_arrow=arrow)
            if "context" in layers
            else None
        )
    except Exception as exc:  # noqa: BLE001 - GDAL errors of many kinds
        raise NetworkFolderError(f"cannot read network.gpkg ({exc})", path=gpkg) from exc
    prof_path = d / PROFILE
    if not prof_path.is_file():
        raise NetworkFolderError(
            "incomplete network folder: profile.yaml missing", path=d, field=PROFILE
        )
    if verify and sha256_file(prof_path) != meta.get("profile_sha256"):
        raise NetworkFolderError(
            "profile.yaml does not match its checksum (edited after the "
            "build?); rebuild, or pass the new profile with --profile",
            path=prof_path,
            field="profile_sha256",
        )
    try:
        saved_profile = parse_profile(
            safe_load_yaml(prof_path.read_text(encoding="utf-8")), path=prof_path
        )
    except yaml.YAMLError as exc:
        raise NetworkFolderError("profile.yaml is not valid YAML", path=prof_path) from exc
    edges = edges.set_index(["u", "v", "key"])
    edges["lanes"] = edges["lanes"].astype("float64") if "lanes" in edges else np.nan
    if "oneway" in edges:
        edges["oneway"] = edges["oneway"].astype(bool)
    nodes = nodes.set_index("osmid")
    net = Network(edges, nodes, src, cross, saved_profile, meta, context)
    if saved_profile.fingerprint != meta.get("profile"):
        # A profile with polygon files hashes them too; the copy sits elsewhere, so recompute.
        log.debug("saved profile fingerprint differs from meta; using meta's record")
    if profile is not None:
        net = net.retag(profile, tagger=tagger)
    return net


def edge_frame(net: Network) -> pd.DataFrame:
    """Return the edges without geometry, for fast numeric work."""
    return pd.DataFrame(net.edges.drop(columns="geometry"))

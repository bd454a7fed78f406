"""Tagging and area review partitioned by spatial tiles, run on Dask.

For areas larger than one machine handles comfortably, the edges are cut into square tiles
(each edge belongs to the tile of its midpoint) and each tile is tagged on its own by
:func:`routerisk.network.tagging.tag_edges`, with the sources and crossings near it: those within a
halo of the largest reach of the profile (the largest influence radius or rule distance,
plus the sample spacing and the crossing snap distance) around the bounding box of the
tile's edges. Every value of an edge depends only on sources within that reach of the edge's
own sample points, which all lie in that box, so a partitioned run gives the same values as
the single-machine run, bit for bit (``tests/test_partition.py``), whatever the tile size.

The tiles run as tasks on a ``dask.distributed`` cluster: :func:`cluster` starts a local
one (two worker processes by default) or connects to a running scheduler by its address,
so the same code runs on this machine or on many (the workers need routerisk installed).
The area review clips the edges to each area tile by tile (:func:`clipper`, the heavy step of
a review: one polygon intersection per edge), so a review on tiles reports the same figures
as one on a single machine; its length sums alone can also run as partitions of a
``dask_geopandas`` GeoDataFrame (:func:`review_sums`). ``client=None`` runs the same tiles
one after the other in this process.

Dask, distributed and dask-geopandas are optional; they are imported only here, on use.
"""

from __future__ import annotations

import contextlib
import logging
import math
from collections.abc import Iterator, Sequence
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely import STRtree

from routerisk.errors import OptionError
from routerisk.network import tagging
from routerisk.profile import Profile

log = logging.getLogger(__name__)

#: Default tile side (m): a few thousand edges per tile in a dense city grid.
DEFAULT_TILE_M = 3000.0
_LAST: dict[str, int] = {"tiles": 0}


def halo_m(profile: Profile) -> float:
    """Return the reach around a tile's edges from which sources and crossings are taken."""
    reach = [c.radius_m for c in profile.categories]
    reach += [r.within_m for r in profile.rules if r.category is not None]
    return max(reach, default=0.0) + profile.sample_spacing_m + tagging.CROSSING_SNAP_M


def check_tile(tile_m: float) -> float:
    """Return ``tile_m`` if it is a positive finite number of metres, else raise."""
    if not (isinstance(tile_m, int | float) and math.isfinite(tile_m) and tile_m > 0):
        raise OptionError(
            f"the tile size must be a positive number of metres, got {tile_m!r}", field="--tile-m"
        )
    return float(tile_m)


def tile_ids(edges: gpd.GeoDataFrame, tile_m: float) -> np.ndarray:
    """Return the tile number of every edge: the tile holding its midpoint."""
    check_tile(tile_m)
    mid = shapely.line_interpolate_point(edges.geometry.to_numpy(), 0.5, normalized=True)
    xy = shapely.get_coordinates(mid)
    if len(xy) == 0:
        return np.zeros(0, dtype=np.int64)
    ij = np.floor((xy - xy.min(axis=0)) / tile_m).astype(np.int64)
    ncol = int(ij[:, 0].max()) + 1
    return ij[:, 1] * ncol + ij[:, 0]


def _near(geoms: np.ndarray, tree: STRtree | None, bounds: np.ndarray, halo: float) -> np.ndarray:
    """Return the sorted indices of ``geoms`` meeting ``bounds`` grown by ``halo``."""
    if tree is None or len(geoms) == 0:
        return np.zeros(0, dtype=np.int64)
    x0, y0, x1, y1 = bounds
    return np.sort(tree.query(shapely.box(x0 - halo, y0 - halo, x1 + halo, y1 + halo)))


def split(
    edges: gpd.GeoDataFrame,
    sources: gpd.GeoDataFrame,
    crossings: gpd.GeoDataFrame,
    profile: Profile,
    *,
    tile_m: float,
) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Return per tile (edge rows, source rows, crossing rows), in tile order.

    Source and crossing rows keep their order in the input frames, so a tile sees its
    sources in the same relative order as the whole network does.
    """
    tiles = tile_ids(edges, tile_m)
    halo = halo_m(profile)
    sgeo = sources.geometry.to_numpy()
    cgeo = crossings.geometry.to_numpy() if len(crossings) else np.zeros(0, dtype=object)
    stree = STRtree(sgeo) if len(sgeo) else None
    ctree = STRtree(cgeo) if len(cgeo) else None
    order = np.argsort(tiles, kind="stable")
    ts = tiles[order]
    cuts = np.flatnonzero(np.diff(ts)) + 1
    egeo = edges.geometry.to_numpy()
    out = []
    for rows in np.split(order, cuts):
        if len(rows) == 0:
            continue
        b = shapely.total_bounds(egeo[rows])
        out.append((rows, _near(sgeo, stree, b, halo), _near(cgeo, ctree, b, halo)))
    return out


def _tag_tiles(
    tiles: list[tuple[gpd.GeoDataFrame, gpd.GeoDataFrame, gpd.GeoDataFrame]],
    profile: Profile,
    polygons: dict[str, gpd.GeoSeries] | None,
) -> list[tuple[pd.DataFrame, list[str]]]:
    """Tag a batch of tiles, each on its own (one task on a worker).

    Returns each tile's tagged frame without its geometry (the caller has it already, and
    it is the bulk of what would travel back), with the tagged frame's column order.
    """
    out = []
    for e, s, c in tiles:
        t = tagging.tag_edges(e, s, c, profile, polygons=polygons)
        out.append((pd.DataFrame(t.drop(columns=t.geometry.name)), list(t.columns)))
    return out


def _run_bounded(
    client: Any, fn: Any, batches: list[list[int]], make: Any, *args: Any
) -> list[Any]:
    """Run ``fn(make(batch), *args)`` for every batch on ``client``, a few tasks in flight.

    Only about two tasks per worker are submitted ahead, and a batch's inputs are made by
    ``make`` only when it is submitted, so the inputs waiting at the scheduler (which, for a
    local cluster, lives in this process) stay a few batches, not the whole network.
    Results come back in batch order.
    """
    from distributed import as_completed

    n_workers = max(1, len(client.scheduler_info().get("workers", {})))
    todo = iter(range(len(batches)))
    index: dict[Any, int] = {}
    results: dict[int, Any] = {}
    running = as_completed()

    def submit_next() -> None:
        i = next(todo, None)
        if i is not None:
            fut = client.submit(fn, make(batches[i]), *args, pure=False)
            index[fut.key] = i
            running.add(fut)

    for _ in range(2 * n_workers):
        submit_next()
    for fut in running:
        results[index.pop(fut.key)] = fut.result()
        fut.release()
        submit_next()
    return [results[i] for i in range(len(batches))]


def _batches(sizes: list[int], min_edges: int) -> list[list[int]]:
    """Group consecutive tiles into tasks of at least ``min_edges`` edges (or one tile)."""
    out: list[list[int]] = []
    cur: list[int] = []
    n = 0
    for i, k in enumerate(sizes):
        cur.append(i)
        n += k
        if n >= min_edges:
            out.append(cur)
            cur, n = [], 0
    if cur:
        out.append(cur)
    return out


def tag_partitioned(
    edges: gpd.GeoDataFrame,
    sources: gpd.GeoDataFrame,
    crossings: gpd.GeoDataFrame,
    profile: Profile,
    *,
    tile_m: float = DEFAULT_TILE_M,
    client: Any = None,
    polygons: dict[str, gpd.GeoSeries] | None = None,
    task_edges: int = 20_000,
) -> gpd.GeoDataFrame:
    """Return the same frame as :func:`routerisk.network.tagging.tag_edges`, tagged tile by tile.

    Parameters
    ----------
    edges, sources, crossings, profile, polygons
        As for :func:`routerisk.network.tagging.tag_edges`.
    tile_m
        Tile side in metres; any size gives the same result (tiles may be smaller than the
        largest influence radius).
    client
        A ``dask.distributed.Client``: tiles run as tasks on its workers. None tags the
        tiles one after the other in this process.
    task_edges
        Consecutive small tiles are grouped into one task of at least this many edges
        (each tile is still tagged on its own), so tiny tiles do not drown in task overhead.
    """
    parts = split(edges, sources, crossings, profile, tile_m=tile_m)
    _LAST["tiles"] = len(parts)
    log.info(
        "tag_partitioned: %d edges in %d tiles of %.0f m (halo %.0f m)",
        len(edges),
        len(parts),
        tile_m,
        halo_m(profile),
    )
    if not parts:
        return tagging.tag_edges(edges, sources, crossings, profile, polygons=polygons)

    def tiles(batch: list[int]) -> list[tuple[gpd.GeoDataFrame, ...]]:
        return [
            (edges.iloc[parts[i][0]], sources.iloc[parts[i][1]], crossings.iloc[parts[i][2]])
            for i in batch
        ]

    batches = _batches([len(p[0]) for p in parts], task_edges)
    if client is None:
        done = [_tag_tiles(tiles(b), profile, polygons) for b in batches]
    else:
        prof = client.scatter(profile, broadcast=True)
        polys = client.scatter(polygons, broadcast=True) if polygons else None
        done = _run_bounded(client, _tag_tiles, batches, tiles, prof, polys)
    results = [r for batch in done for r in batch]
    del done
    columns = results[0][1]
    rows = np.concatenate([p[0] for p in parts])
    out = pd.concat([frame for frame, _ in results])
    del results
    back = np.empty(len(rows), dtype=np.int64)
    back[rows] = np.arange(len(rows))
    out = out.iloc[back]
    geom = edges.geometry.name
    out[geom] = edges.geometry.to_numpy()  # rows are in the order of ``edges`` again
    return gpd.GeoDataFrame(out[columns], geometry=geom, crs=edges.crs)


def tagger(*, client: Any = None, tile_m: float = DEFAULT_TILE_M) -> Any:
    """Return a drop-in for :func:`routerisk.network.tagging.tag_edges` that tags by tiles."""
    check_tile(tile_m)

    def tag(
        edges: gpd.GeoDataFrame,
        sources: gpd.GeoDataFrame,
        crossings: gpd.GeoDataFrame,
        profile: Profile,
        *,
        polygons: dict[str, gpd.GeoSeries] | None = None,
    ) -> gpd.GeoDataFrame:
        return tag_partitioned(
            edges, sources, crossings, profile, tile_m=tile_m, client=client, polygons=polygons
        )

    return tag


def last_tile_count() -> int:
    """Return how many tiles the last :func:`tag_partitioned` call used."""
    return _LAST["tiles"]


@contextlib.contextmanager
def cluster(
    *, workers: int | None = None, scheduler: str | None = None, processes: bool = True
) -> Iterator[Any]:
    """Yield a ``dask.distributed.Client``: to ``scheduler`` if given, else a local cluster.

    Parameters
    ----------
    workers
        Worker processes of the local cluster (default 2, one thread each).
    scheduler
        Address of a running scheduler, e.g. ``tcp://10.0.0.5:8786``; its workers need
        routerisk and its dependencies installed.
    processes
        Local workers as processes (True) or threads in this process (False).
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise OptionError(
            "partitioned runs need the optional packages dask, distributed "
            "and dask-geopandas (pip install 'routerisk[scale]')",
            field="--workers",
        ) from exc
    if scheduler is not None and workers is not None:
        raise OptionError(
            "give --workers for a local cluster or --scheduler for a running one, not both",
            field="--scheduler",
        )
    if workers is not None and workers < 1:
        raise OptionError(f"must be at least 1, got {workers}", field="--workers")
    if scheduler is not None:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise OptionError(
                f"cannot reach the scheduler at {scheduler!r} ({exc})", field="--scheduler"
            ) from exc
        try:
            yield client
        finally:
            client.close()
        return
    n = workers or 2
    # ":0": the scheduler's HTTP endpoint takes a free port, so two local clusters never clash
    lc = LocalCluster(
        n_workers=n if processes else 1,
        threads_per_worker=1 if processes else n,
        processes=processes,
        dashboard_address=":0",
        silence_logs=logging.WARNING,
    )
    client = Client(lc)
    try:
        yield client
    finally:
        client.close()
        lc.close()


# ------------------------------------------------------------------------ area review


def _clip_tiles(tiles: list[gpd.GeoDataFrame], geometry: Any) -> list[gpd.GeoDataFrame]:
    """Clip a batch of tiles to one area, each on its own (one task on a worker)."""
    from routerisk.analysis.review import clip_edges

    return [clip_edges(t, geometry) for t in tiles]


def clip_partitioned(
    edges: gpd.GeoDataFrame,
    geometry: Any,
    *,
    tile_m: float = DEFAULT_TILE_M,
    client: Any = None,
    tree: STRtree | None = None,
    task_edges: int = 20_000,
) -> gpd.GeoDataFrame:
    """Return the same frame as :func:`routerisk.analysis.review.clip_edges`, clipped tile by tile.

    The edges whose bounding boxes meet the area are picked here with the index; their
    intersections with the area (the costly part) run per tile, as tasks on ``client``'s
    workers or, with None, one after the other in this process. Each edge is clipped on its
    own, so the values are those of the single-machine clip, bit for bit, in the same order.
    """
    check_tile(tile_m)
    geoms = edges.geometry.to_numpy()
    tree = tree if tree is not None else STRtree(geoms)
    rows = np.sort(tree.query(geometry))
    sub = edges.iloc[rows]
    if len(sub) == 0:
        return _clip_tiles([sub], geometry)[0]
    tiles = tile_ids(sub, tile_m)
    order = np.argsort(tiles, kind="stable")
    cuts = np.flatnonzero(np.diff(tiles[order])) + 1
    parts = [sub.iloc[np.sort(r)] for r in np.split(order, cuts)]
    if client is None:
        results = _clip_tiles(parts, geometry)
    else:
        area = client.scatter(geometry, broadcast=True)
        done = _run_bounded(
            client,
            _clip_tiles,
            _batches([len(p) for p in parts], task_edges),
            lambda b: [parts[i] for i in b],
            area,
        )
        results = [r for batch in done for r in batch]
    out = pd.concat(results)
    out = out.iloc[np.argsort(edges.index.get_indexer(out.index), kind="stable")]
    return gpd.GeoDataFrame(out, geometry=edges.geometry.name, crs=edges.crs)


def clipper(*, client: Any = None, tile_m: float = DEFAULT_TILE_M) -> Any:
    """Return a drop-in for :func:`routerisk.analysis.review.clip_edges` that clips by tiles."""
    check_tile(tile_m)

    def clip(
        edges: gpd.GeoDataFrame, geometry: Any, *, tree: STRtree | None = None
    ) -> gpd.GeoDataFrame:
        return clip_partitioned(edges, geometry, tile_m=tile_m, client=client, tree=tree)

    return clip


def _area_sums(
    part: pd.DataFrame, areas: list[Any], categories: list[str], bands: list[str]
) -> pd.DataFrame:
    """Return per area the length sums of one partition's edges (a task)."""
    from routerisk.analysis.review import clip_edges

    part = gpd.GeoDataFrame(part, geometry="geometry")
    rows = []
    for i, geom in enumerate(areas):
        clip = clip_edges(part, geom) if len(part) else part.iloc[:0]
        km = clip["clip_m"].to_numpy(dtype=float) / 1000.0 if len(clip) else np.zeros(0)
        row: dict[str, Any] = {"area": i, "network_km": float(km.sum())}
        band = clip["band"].astype(str).to_numpy() if len(clip) else np.zeros(0, dtype=object)
        for b in bands:
            row[f"band:{b}"] = float(km[band == b].sum())
        for c in categories:
            infl = clip[f"infl_{c}"].to_numpy(dtype=float) if len(clip) else np.zeros(0)
            row[f"infl:{c}"] = float((km * infl).sum())
        rows.append(row)
    return pd.DataFrame(rows)


def review_sums(
    net: Any, areas: Sequence[Any], *, tile_m: float = DEFAULT_TILE_M, client: Any = None
) -> list[dict[str, Any]]:
    """Return per area ``network_km``, ``km_by_band`` and ``km_in_influence``, by tiles.

    The same figures as :func:`routerisk.analysis.review.review_areas` reports, summed tile by tile
    (each edge is clipped once, in the tile of its midpoint), so they agree with it to the
    rounding of a different order of addition. With a client the tiles are the partitions
    of a ``dask_geopandas`` GeoDataFrame.
    """
    edges = net.edges
    tiles = tile_ids(edges, tile_m)
    order = np.argsort(tiles, kind="stable")
    cols = ["geometry", "length", "band"] + [f"infl_{c}" for c in net.profile.category_names]
    frame = edges[cols].iloc[order].reset_index(drop=True)
    frame["tile"] = tiles[order]
    geoms = [a.geometry for a in areas]
    cats = list(net.profile.category_names)
    bands = [b.name for b in net.profile.bands]
    meta = _area_sums(frame.iloc[:0], geoms, cats, bands).iloc[:0]
    if client is None:
        cuts = np.flatnonzero(np.diff(frame["tile"].to_numpy())) + 1
        parts = [
            _area_sums(frame.iloc[idx], geoms, cats, bands)
            for idx in np.split(np.arange(len(frame)), cuts)
        ]
        sums = pd.concat(parts)
    else:
        import dask_geopandas

        n_tiles = int(frame["tile"].nunique())
        dgdf = dask_geopandas.from_geopandas(
            frame.set_index("tile", drop=False), npartitions=max(1, n_tiles), sort=True
        )
        sums = dgdf.map_partitions(_area_sums, geoms, cats, bands, meta=meta).compute()
    sums = sums.groupby("area").sum()
    out = []
    for i, a in enumerate(areas):
        r = sums.loc[i] if i in sums.index else pd.Series(dtype=float)
        out.append(
            {
                "name": getattr(a, "name", f"area-{i + 1}"),
                "network_km": float(r.get("network_km", 0.0)),
                "km_by_band": {b: float(r.get(f"band:{b}", 0.0)) for b in bands},
                "km_in_influence": {c: float(r.get(f"infl:{c}", 0.0)) for c in cats},
            }
        )
    return out

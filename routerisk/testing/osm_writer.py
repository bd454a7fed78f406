"""Write the invented city as OSM data: local metres to longitude and latitude, then osmium.

The local frame is rotated and placed around the centre in its UTM zone; nodes are
transformed a slice at a time (bounded memory) and written with osmium without metadata or
timestamps, so the same city gives a byte-identical file. The file is written atomically.
"""

from __future__ import annotations

import contextlib
import math
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from routerisk.testing.city import City


class LonLat:
    """Rotate local metres by ``angle`` and place them around ``centre`` in a UTM zone."""

    def __init__(self, *, centre: tuple[float, float], angle: float, epsg: int) -> None:
        from pyproj import Transformer

        lat0, lon0 = centre
        fwd = Transformer.from_crs("EPSG:4326", f"EPSG:{epsg}", always_xy=True)
        self.e0, self.n0 = fwd.transform(lon0, lat0)
        self.cos, self.sin = math.cos(angle), math.sin(angle)
        self.inv = Transformer.from_crs(f"EPSG:{epsg}", "EPSG:4326", always_xy=True)

    def __call__(self, x: np.ndarray, y: np.ndarray) -> tuple[list[float], list[float]]:
        """Return the longitudes and latitudes of local points (``x``, ``y``) in metres."""
        xe = self.e0 + x * self.cos - y * self.sin
        yn = self.n0 + x * self.sin + y * self.cos
        lon, lat = self.inv.transform(xe, yn)
        return np.asarray(lon).tolist(), np.asarray(lat).tolist()


def _chunks(
    ids: np.ndarray, x: np.ndarray, y: np.ndarray, lonlat: LonLat, size: int = 1 << 16
) -> Iterator[tuple[list[int], list[float], list[float]]]:
    """Yield node ids with longitudes and latitudes a slice at a time (bounded memory)."""
    for s in range(0, len(ids), size):
        lon, lat = lonlat(x[s : s + size], y[s : s + size])
        yield ids[s : s + size].tolist(), lon, lat


def utm_epsg(lat: float, lon: float) -> int:
    """Return the EPSG code of the UTM zone holding (``lat``, ``lon``)."""
    zone = int((lon + 180.0) // 6.0) % 60 + 1
    return (32600 if lat >= 0 else 32700) + zone


def write_osm(target: Path, fmt: str, city: City, lonlat: LonLat) -> int:
    """Write the nodes and ways of ``city`` to ``target`` atomically; return the node count.

    ``fmt`` is ``"pbf"`` or ``"osm"``; ``lonlat`` maps local metres to (lon, lat).
    """
    import osmium
    from osmium.osm import mutable

    lay, out = city.lay, city.out
    kept = np.flatnonzero(lay.keep.ravel())
    xs = np.frombuffer(out.xs, dtype=np.float64)
    ys = np.frombuffer(out.ys, dtype=np.float64)
    gx, gy = lay.x.ravel()[kept], lay.y.ravel()[kept]
    x_lo, x_hi = min(gx.min(), xs.min(initial=0.0)), max(gx.max(), xs.max(initial=0.0))
    y_lo, y_hi = min(gy.min(), ys.min(initial=0.0)), max(gy.max(), ys.max(initial=0.0))
    # the rotated local bounding rectangle holds every node; its corners give the box
    box_lon, box_lat = lonlat(
        np.array([x_lo, x_hi, x_hi, x_lo]), np.array([y_lo, y_lo, y_hi, y_hi])
    )

    header = osmium.io.Header()
    header.set("generator", "routerisk synthetic city")
    header.add_box(
        osmium.osm.Box(
            osmium.osm.Location(min(box_lon) - 0.001, min(box_lat) - 0.001),
            osmium.osm.Location(max(box_lon) + 0.001, max(box_lat) + 0.001),
        )
    )
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    try:
        writer = osmium.SimpleWriter(
            osmium.io.File(tmp, f"{fmt},add_metadata=false"), header=header, overwrite=True
        )
        try:
            node = mutable.Node()
            empty: dict[str, str] = {}
            gtags = city.grid_tags
            for ids, lon, lat in _chunks(kept, gx, gy, lonlat):
                for k, lo, la in zip(ids, lon, lat, strict=True):
                    node.id = k + 1
                    node.location = (lo, la)
                    node.tags = gtags.get(k, empty)
                    writer.add_node(node)
            ntags = out.ntags
            for ids, lon, lat in _chunks(np.arange(len(xs)), xs, ys, lonlat):
                for q, lo, la in zip(ids, lon, lat, strict=True):
                    node.id = out.first + q
                    node.location = (lo, la)
                    node.tags = ntags[q] or empty
                    writer.add_node(node)
            way = mutable.Way()
            refs, offs = out.refs, out.offs
            for w, flat in enumerate(out.wtags):
                way.id = w + 1
                way.nodes = refs[offs[w] : offs[w + 1]].tolist()
                way.tags = dict(zip(flat[::2], flat[1::2], strict=True))
                writer.add_way(way)
        finally:
            writer.close()
        os.chmod(tmp, 0o644)  # mkstemp makes 0600 files; a data file may be read by anyone
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return int(len(kept) + len(out.xs))

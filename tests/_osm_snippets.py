"""Tiny invented OSM XML files for tests (CC0)."""

from __future__ import annotations

from pathlib import Path

HEADER = '<?xml version="1.0" encoding="UTF-8"?>\n<osm version="0.6" generator="routerisk-tests">\n'


def node(i: int, lat: float, lon: float, **tags: str) -> str:
    body = "".join(f'<tag k="{k.replace("__", ":")}" v="{v}"/>' for k, v in tags.items())
    return f'<node id="{i}" lat="{lat:.7f}" lon="{lon:.7f}">{body}</node>\n'


def way(i: int, refs: list[int], **tags: str) -> str:
    nds = "".join(f'<nd ref="{r}"/>' for r in refs)
    body = "".join(f'<tag k="{k.replace("__", ":")}" v="{v}"/>' for k, v in tags.items())
    return f'<way id="{i}">{nds}{body}</way>\n'


def write(path: Path, parts: list[str]) -> Path:
    path.write_text(HEADER + "".join(parts) + "</osm>\n", encoding="utf-8")
    return path


def grid_town(
    path: Path,
    *,
    n: int = 4,
    step_deg: float = 0.001,
    lat0: float = 38.5,
    lon0: float = -38.0,
    extra: list[str] | None = None,
) -> Path:
    """Write an n x n grid of two-way residential streets (ids 1..n*n) plus ``extra``."""
    parts = []
    for r in range(n):
        for c in range(n):
            parts.append(node(1 + r * n + c, lat0 + r * step_deg, lon0 + c * step_deg))
    wid = 1000
    for r in range(n):
        parts.append(
            way(
                wid,
                [1 + r * n + c for c in range(n)],
                highway="residential",
                name=f"Row {r} Street",
                maxspeed="25 mph",
            )
        )
        wid += 1
    for c in range(n):
        parts.append(
            way(
                wid,
                [1 + r * n + c for r in range(n)],
                highway="residential",
                name=f"Column {c} Avenue",
            )
        )
        wid += 1
    return write(path, parts + (extra or []))

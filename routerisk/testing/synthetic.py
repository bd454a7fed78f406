"""Invent street networks of any size, with exposure sources, for benchmarks and scale tests.

The invented city is a perturbed grid: jittered and gently warped intersections, block sides of
100 to 150 m, some missing links (a few left as dead-end stubs), a few block diagonals and
shape nodes on curved streets. Collectors (tertiary) run every 4 to 6 blocks, arterials
(secondary or primary, some as one-way pairs) every 10 to 15 blocks. The extent grows with the
square root of the requested edge count; the grid size is refined until the number of directed
drivable edges after topology simplification (drivable ways only, then osmnx's endpoint rules)
is within about 2 % of the request.

Exposure sources are placed at plausible densities: schools and kindergartens, campuses,
retail strips with shops along arterials, commercial blocks, bus stops about every 400 m along
arterials, parks and playgrounds, hospitals, and crossing nodes at arterial intersections and
around schools. Footways and driveways are added for the drive filter to drop.

All names are made up from invented syllables or numbers. The default centre lies in open ocean
(30.0 N, 45.0 W, UTM zone 23N), far from any land. The same seed and size give a byte-identical
file (no timestamps or metadata are written).
"""

from __future__ import annotations

import contextlib
import logging
import math
import os
import random
import tempfile
from array import array
from bisect import bisect_right
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from itertools import chain
from pathlib import Path
from typing import Any

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

from routerisk.errors import OptionError
from routerisk.io.atomic import check_target

log = logging.getLogger(__name__)

DEFAULT_CENTRE = (30.0, -45.0)
"""Default city centre (lat, lon): open ocean, UTM zone 23N."""

MIN_EDGES = 500
MAX_EDGES = 5_000_000

DRIVE_HIGHWAYS = ("primary", "secondary", "tertiary", "residential", "living_street")
"""Highway values of the drivable ways this generator writes."""

SOURCE_CATEGORIES = ("school", "campus", "retail", "commercial", "transit", "park", "hospital")

# road classes of grid lines
_RES, _COL, _SEC, _PRI = 0, 1, 2, 3
_HIGHWAY = {_RES: "residential", _COL: "tertiary", _SEC: "secondary", _PRI: "primary"}

_ASPECT = 1.25  # grid columns / rows
_EDGES_PER_NODE = 3.6  # first guess, refined by the exact count
_P_DROP = 0.07  # share of residential block sides left out
_P_STUB = 0.4  # share of left-out block sides kept as two dead-end stubs
_P_ONEWAY = 0.03  # share of residential block sides made one-way
_P_DIAGONAL = 0.012  # share of all-residential blocks crossed by a diagonal street
_P_BREAK = 0.18  # chance that a way ends at an intersection although tags do not change
_P_RETAIL = 0.2  # share of arterial block frontages with a retail strip
_CROSS_OFFSET = 12.0  # metres from the intersection to a crossing node on an arm

_BLOCKED, _SCHOOL, _KINDER, _CAMPUS, _COLLEGE, _HOSPITAL, _PARK, _COMMERCIAL, _PLAY = range(1, 10)

_CROSS_TAGS: tuple[dict[str, str], ...] = (
    {},
    {"highway": "crossing", "crossing": "traffic_signals"},
    {"highway": "crossing", "crossing": "uncontrolled"},
    {"highway": "crossing", "crossing": "marked"},
    {"highway": "crossing", "crossing": "unmarked"},
    {"highway": "crossing", "crossing": "marked", "crossing_ref": "zebra"},
)
_SIGNALS = {"highway": "traffic_signals"}

_MAXSPEED: dict[str, tuple[tuple[str | None, ...], tuple[float, ...]]] = {
    "residential": (
        ("25 mph", None, "20 mph", "40", "30", "15 mph"),
        (0.45, 0.32, 0.06, 0.10, 0.04, 0.03),
    ),
    "living_street": (("walk", None, "10 mph"), (0.6, 0.25, 0.15)),
    "tertiary": (("30 mph", "35 mph", "50", None), (0.35, 0.35, 0.15, 0.15)),
    "secondary": (("40 mph", "45 mph", "70", "60", None), (0.45, 0.25, 0.15, 0.05, 0.10)),
    "primary": (("45 mph", "40 mph", "70", None), (0.45, 0.20, 0.20, 0.15)),
}
_SCHOOL_CONDITIONAL = "20 mph @ (Mo-Fr 07:00-09:00,14:00-16:00)"

_SHOPS = (
    ("supermarket", "Market"),
    ("convenience", "Corner Store"),
    ("bakery", "Bakery"),
    ("clothes", "Outfitters"),
    ("hairdresser", "Hair"),
    ("alcohol", "Cellar"),
    ("hardware", "Hardware"),
    ("books", "Books"),
    ("mobile_phone", "Phones"),
    ("butcher", "Butcher"),
)

_ONSETS = (
    "b", "br", "d", "dr", "f", "g", "gr", "k", "kr", "l", "m", "n", "p", "qu", "r", "s",
    "sk", "t", "tr", "v", "vr", "z", "zh", "th",
)  # fmt: skip
_VOWELS = ("a", "e", "i", "o", "u", "ai", "eo", "ua", "y", "ae")
_CODAS = ("", "", "", "n", "r", "l", "s", "sk", "rn", "lv", "x", "m")


class _Names:
    """Invent unique words from syllables (never a list of real names)."""

    def __init__(self, pr: random.Random) -> None:
        self._pr = pr
        self._used: dict[str, None] = {}

    def word(self) -> str:
        """Return a new capitalised word of two or three invented syllables."""
        choice = self._pr.choice
        while True:
            parts = []
            for _ in range(2 if self._pr.random() < 0.7 else 3):
                parts += (choice(_ONSETS), choice(_VOWELS), choice(_CODAS))
            w = "".join(parts).capitalize()
            if 4 <= len(w) <= 11 and w not in self._used:
                self._used[w] = None
                return w


@dataclass
class _Layout:
    """Grid structure: line classes, block sides present, one-way directions, node kept."""

    nx: int
    ny: int
    gx: np.ndarray  # column base positions (m)
    gy: np.ndarray  # row base positions (m)
    x: np.ndarray  # (ny, nx) node positions (m, local frame)
    y: np.ndarray
    col_cls: np.ndarray  # (nx,) road class of each column
    row_cls: np.ndarray  # (ny,)
    col_ow: np.ndarray  # (nx,) one-way direction of a one-way pair line (+1 / -1 / 0)
    row_ow: np.ndarray
    h_on: np.ndarray  # (ny, nx-1) horizontal block side present; [row, segment]
    h_ow: np.ndarray  # +1 along increasing column, -1 against, 0 two-way
    v_on: np.ndarray  # (nx, ny-1) vertical block side present; [column, segment]
    v_ow: np.ndarray
    h_stub: np.ndarray  # (ny, nx-1, 2) stub from the start / end node of a missing side
    v_stub: np.ndarray
    d_on: np.ndarray  # (ny-1, nx-1) block diagonal present
    d_dir: np.ndarray  # 0: (i,j)-(i+1,j+1), 1: (i+1,j)-(i,j+1)
    keep: np.ndarray  # (ny, nx) node in the drivable network
    nbr: np.ndarray  # (ny, nx) number of drivable neighbours
    drive_edges: int  # directed drivable edges after simplification


def _line_plan(n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Return the road class and one-way direction of each of ``n`` parallel lines."""
    cls = np.zeros(n, np.int8)
    ow = np.zeros(n, np.int8)
    arts = []
    pos = int(rng.integers(2, 7))
    while pos <= n - 3:
        arts.append(pos)
        pos += int(rng.integers(10, 16))
    if not arts:
        arts = [n // 2]
    for a in arts:
        cls[a] = _PRI if rng.random() < 0.45 else _SEC
    anchors = [0, *arts, n - 1]
    for lo, hi in zip(anchors[:-1], anchors[1:], strict=True):
        p = lo + int(rng.integers(4, 7))
        while p <= hi - 3:
            cls[p] = _COL
            p += int(rng.integers(4, 7))
    for a in arts:
        if a + 1 <= n - 2 and cls[a + 1] == _RES and rng.random() < 0.3:
            d = 1 if rng.random() < 0.5 else -1
            cls[a + 1] = cls[a]
            ow[a], ow[a + 1] = d, -d
    return cls, ow


def _make_layout(nx: int, ny: int, seed: int) -> _Layout:
    """Draw the grid structure for ``nx`` x ``ny`` intersections and count its edges."""
    rng = np.random.default_rng([seed, nx, ny, 0])
    col_cls, col_ow = _line_plan(nx, rng)
    row_cls, row_ow = _line_plan(ny, rng)

    gx = np.concatenate([[0.0], np.cumsum(rng.uniform(100.0, 150.0, nx - 1))])
    gy = np.concatenate([[0.0], np.cumsum(rng.uniform(100.0, 150.0, ny - 1))])
    gx -= gx[-1] / 2
    gy -= gy[-1] / 2
    y0, x0 = np.meshgrid(gy, gx, indexing="ij")
    amp_x, amp_y = rng.uniform(8.0, 25.0, 2)
    wl_x, wl_y = rng.uniform(2500.0, 5000.0, 2)
    ph_x, ph_y = rng.uniform(0.0, 2 * math.pi, 2)
    straight_col = np.where(col_cls >= _SEC, 0.2, 1.0)[None, :]
    straight_row = np.where(row_cls >= _SEC, 0.2, 1.0)[:, None]
    jx = np.clip(rng.normal(0.0, 4.0, (ny, nx)), -10.0, 10.0) * straight_col
    jy = np.clip(rng.normal(0.0, 4.0, (ny, nx)), -10.0, 10.0) * straight_row
    x = x0 + amp_x * np.sin(2 * math.pi * y0 / wl_x + ph_x) + jx
    y = y0 + amp_y * np.sin(2 * math.pi * x0 / wl_y + ph_y) + jy

    def sides(line_cls: np.ndarray, line_ow: np.ndarray, n_seg: int) -> tuple[np.ndarray, ...]:
        shape = (len(line_cls), n_seg)
        res = np.broadcast_to((line_cls == _RES)[:, None], shape)
        drop = res & (rng.random(shape) < _P_DROP)
        drop[0, :] = drop[-1, :] = False  # keep the outline whole
        on = ~drop
        stub = drop[:, :, None] & (rng.random((*shape, 1)) < _P_STUB)
        stub = np.repeat(stub, 2, axis=2)
        ow = np.broadcast_to(line_ow[:, None], shape).astype(np.int8)
        single = on & res & (rng.random(shape) < _P_ONEWAY)
        ow[single] = rng.choice(np.array([-1, 1], np.int8), int(single.sum()))
        return on, ow, stub

    h_on, h_ow, h_stub = sides(row_cls, row_ow, nx - 1)
    v_on, v_ow, v_stub = sides(col_cls, col_ow, ny - 1)
    all_res = (
        (row_cls[:-1] == _RES)[:, None]
        & (row_cls[1:] == _RES)[:, None]
        & (col_cls[:-1] == _RES)[None, :]
        & (col_cls[1:] == _RES)[None, :]
    )
    d_on = all_res & (rng.random((ny - 1, nx - 1)) < _P_DIAGONAL)
    d_dir = rng.integers(0, 2, (ny - 1, nx - 1)).astype(np.int8)

    lay = _Layout(
        nx, ny, gx, gy, x, y, col_cls, row_cls, col_ow, row_ow, h_on, h_ow, v_on, v_ow,
        h_stub, v_stub, d_on, d_dir, np.ones((ny, nx), bool), np.zeros((ny, nx), np.int32), 0,
    )  # fmt: skip
    _prune_to_strong_component(lay)
    lay.drive_edges = _count_simplified(lay)
    return lay


def _side_pairs(lay: _Layout) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (a, b, ow) node indices and one-way flags of every present street side."""
    nx = lay.nx
    jj, ii = np.nonzero(lay.h_on)
    ha = jj * nx + ii
    hb = ha + 1
    how = lay.h_ow[jj, ii]
    ii, jj = np.nonzero(lay.v_on)
    va = jj * nx + ii
    vb = va + nx
    vow = lay.v_ow[ii, jj]
    jj, ii = np.nonzero(lay.d_on)
    dd = lay.d_dir[jj, ii]
    da = jj * nx + ii + dd
    db = da + nx + 1 - 2 * dd
    return (
        np.concatenate([ha, va, da]),
        np.concatenate([hb, vb, db]),
        np.concatenate([how, vow, np.zeros(len(da), np.int8)]),
    )


def _prune_to_strong_component(lay: _Layout) -> None:
    """Keep only the largest strongly connected part of the drivable grid."""
    n = lay.nx * lay.ny
    a, b, ow = _side_pairs(lay)
    src = np.concatenate([a[ow >= 0], b[ow <= 0]])
    dst = np.concatenate([b[ow >= 0], a[ow <= 0]])
    m = sparse.csr_matrix((np.ones(len(src), np.int8), (src, dst)), shape=(n, n))
    _, labels = csgraph.connected_components(m, directed=True, connection="strong")
    keep = labels == np.bincount(labels).argmax()
    k2 = keep.reshape(lay.ny, lay.nx)
    lay.keep = k2
    lay.h_on &= k2[:, :-1] & k2[:, 1:]
    lay.v_on &= (k2[:-1, :] & k2[1:, :]).T
    lay.h_stub[:, :, 0] &= k2[:, :-1]
    lay.h_stub[:, :, 1] &= k2[:, 1:]
    kt = k2.T
    lay.v_stub[:, :, 0] &= kt[:, :-1]
    lay.v_stub[:, :, 1] &= kt[:, 1:]
    corner0 = np.where(lay.d_dir == 0, k2[:-1, :-1] & k2[1:, 1:], k2[:-1, 1:] & k2[1:, :-1])
    lay.d_on &= corner0
    lay.keep = k2 & _touched(lay)


def _touched(lay: _Layout) -> np.ndarray:
    a, b, _ = _side_pairs(lay)
    t = np.zeros(lay.nx * lay.ny, bool)
    t[a] = True
    t[b] = True
    return t.reshape(lay.ny, lay.nx)


def _count_simplified(lay: _Layout) -> int:
    """Count directed drivable edges after osmnx's topology simplification, exactly.

    A node is interior to a simplified edge when it has exactly two neighbours, two or four
    directed edges, and both incoming and outgoing edges (osmnx ``simplify_graph`` rules 1-3);
    every such node merges away half of its directed edges.
    """
    n = lay.nx * lay.ny
    a, b, ow = _side_pairs(lay)
    nbr = np.zeros(n, np.int64)
    deg = np.zeros(n, np.int64)
    ind = np.zeros(n, np.int64)
    outd = np.zeros(n, np.int64)
    two = ow == 0
    np.add.at(nbr, a, 1)
    np.add.at(nbr, b, 1)
    w = np.where(two, 2, 1)
    np.add.at(deg, a, w)
    np.add.at(deg, b, w)
    np.add.at(outd, a, (ow >= 0).astype(np.int64))
    np.add.at(ind, b, (ow >= 0).astype(np.int64))
    np.add.at(outd, b, (ow <= 0).astype(np.int64))
    np.add.at(ind, a, (ow <= 0).astype(np.int64))
    edges = int(w.sum())
    nx = lay.nx
    stub_nodes = []
    for stub, is_h in ((lay.h_stub, True), (lay.v_stub, False)):
        for end in (0, 1):
            p, q = np.nonzero(stub[:, :, end])
            k = p * nx + q + end if is_h else (q + end) * nx + p
            stub_nodes.append(k)
    sk = np.concatenate(stub_nodes)
    np.add.at(nbr, sk, 1)
    np.add.at(deg, sk, 2)
    np.add.at(ind, sk, 1)
    np.add.at(outd, sk, 1)
    edges += 2 * len(sk)
    interior = (nbr == 2) & ((deg == 2) | (deg == 4)) & (ind > 0) & (outd > 0)
    lay.nbr = nbr.reshape(lay.ny, lay.nx).astype(np.int32)
    return edges - int(deg[interior].sum() // 2)


def _choose_layout(edges: int, seed: int) -> _Layout:
    """Refine the grid size until the simplified edge count is close to ``edges``."""
    n_nodes = edges / _EDGES_PER_NODE
    best: _Layout | None = None
    tried: set[tuple[int, int]] = set()
    for _ in range(6):
        nx = max(10, round(math.sqrt(n_nodes * _ASPECT)))
        ny = max(8, round(n_nodes / nx))
        if (nx, ny) in tried:
            break
        tried.add((nx, ny))
        lay = _make_layout(nx, ny, seed)
        if best is None or abs(lay.drive_edges - edges) < abs(best.drive_edges - edges):
            best = lay
        if abs(lay.drive_edges / edges - 1) < 0.02:
            break
        n_nodes *= edges / max(lay.drive_edges, 1)
    assert best is not None
    if abs(best.drive_edges / edges - 1) >= 0.02:  # small grids: try the neighbouring sizes
        for dx, dy in ((-1, 0), (1, 0), (0, -1), (0, 1), (-1, 1), (1, -1)):
            nx, ny = best.nx + dx, best.ny + dy
            if (nx, ny) in tried or nx < 10 or ny < 8:
                continue
            tried.add((nx, ny))
            lay = _make_layout(nx, ny, seed)
            if abs(lay.drive_edges - edges) < abs(best.drive_edges - edges):
                best = lay
    return best


class _Out:
    """Collect extra nodes and all ways compactly until they are written."""

    def __init__(self, first_node_id: int) -> None:
        self.first = first_node_id
        self.xs = array("d")
        self.ys = array("d")
        self.ntags: list[dict[str, str] | None] = []
        self.refs = array("q")
        self.offs = array("q", [0])
        self.wtags: list[tuple[str, ...]] = []  # flat (key, value, key, value, ...)
        self.counts: dict[str, int] = {}

    def node(self, x: float, y: float, tags: dict[str, str] | None = None) -> int:
        self.xs.append(x)
        self.ys.append(y)
        self.ntags.append(tags)
        return self.first + len(self.xs) - 1

    def way(self, refs: Sequence[int], tags: dict[str, str]) -> None:
        self.refs.extend(refs)
        self.offs.append(len(self.refs))
        self.wtags.append(tuple(chain.from_iterable(tags.items())))

    def polygon(self, pts: Sequence[tuple[float, float]], tags: dict[str, str]) -> None:
        ids = [self.node(px, py) for px, py in pts]
        self.way([*ids, ids[0]], tags)

    def count(self, what: str, n: int = 1) -> None:
        self.counts[what] = self.counts.get(what, 0) + n


def _pick(pr: random.Random, values: tuple[Any, ...], probs: tuple[float, ...]) -> Any:
    """Return one of ``values`` drawn with the weights ``probs``."""
    cum = _CUMULATIVE.get(probs)
    if cum is None:
        cum = _CUMULATIVE[probs] = tuple(np.cumsum(probs) / sum(probs))
    return values[min(bisect_right(cum, pr.random()), len(values) - 1)]


_CUMULATIVE: dict[tuple[float, ...], tuple[float, ...]] = {}


def _inset(pts: list[tuple[float, float]], margin: float) -> list[tuple[float, float]]:
    """Move the corners of a convex quadrilateral ``margin`` metres towards its centre."""
    cx = sum(p[0] for p in pts) / len(pts)
    cy = sum(p[1] for p in pts) / len(pts)
    out = []
    for px, py in pts:
        dx, dy = cx - px, cy - py
        d = math.hypot(dx, dy) or 1.0
        f = min(0.45, margin * math.sqrt(2) / d)
        out.append((px + dx * f, py + dy * f))
    return out


class _City:
    """Place sources on blocks, then emit street and source geometry into an ``_Out``."""

    def __init__(self, lay: _Layout, seed: int) -> None:
        self.lay = lay
        # numpy for draws in bulk, the standard library's generator for single draws (faster)
        self.rng = np.random.default_rng([seed, lay.nx, lay.ny, 1])
        # seeded generators for reproducible benchmark cities, not for secrets
        self.pr = random.Random(((seed * 1_000_003) + lay.nx) * 100_003 + lay.ny)  # noqa: S311
        self.names = _Names(
            random.Random(  # noqa: S311
                ((seed * 1_000_033) + lay.nx) * 100_019 + lay.ny
            )
        )
        self.out = _Out(lay.nx * lay.ny + 1)
        self.xl = lay.x.ravel().tolist()
        self.yl = lay.y.ravel().tolist()
        self.use = np.zeros((lay.ny - 1, lay.nx - 1), np.int8)
        self.use[lay.d_on] = _BLOCKED
        self.retail_block = np.zeros_like(self.use, dtype=bool)
        self.grid_tags: dict[int, dict[str, str]] = {}
        self.area_km2 = float((lay.gx[-1] - lay.gx[0]) * (lay.gy[-1] - lay.gy[0]) / 1e6)
        self._name_lines()

    # ----- names --------------------------------------------------------------------------
    def _name_lines(self) -> None:
        lay = self.lay
        suffix = {
            _RES: ("Street", "Lane", "Way", "Court", "Place", "Row"),
            _COL: ("Road", "Drive", "Street"),
            _SEC: ("Avenue", "Road", "Boulevard"),
            _PRI: ("Boulevard", "Avenue"),
        }
        pr = self.pr

        def name(cls: int, numbered: int | None) -> str:
            if numbered is not None:
                return f"Street {numbered}"
            opts = suffix[cls]
            return f"{self.names.word()} {opts[pr.randrange(len(opts))]}"

        self.col_names: list[str] = []
        for i in range(lay.nx):
            if i > 0 and lay.col_ow[i] != 0 and lay.col_ow[i - 1] == -lay.col_ow[i]:
                self.col_names.append(self.col_names[-1])  # a one-way pair shares its name
            else:
                self.col_names.append(name(int(lay.col_cls[i]), None))
        self.row_names: list[str] = []
        for j in range(lay.ny):
            if j > 0 and lay.row_ow[j] != 0 and lay.row_ow[j - 1] == -lay.row_ow[j]:
                self.row_names.append(self.row_names[-1])
            else:
                cls = int(lay.row_cls[j])
                self.row_names.append(name(cls, j + 1 if cls == _RES else None))

    # ----- block plan ---------------------------------------------------------------------
    def _block_corners(self, j: int, i: int, h: int = 1, w: int = 1) -> list[tuple[float, float]]:
        nx, xl, yl = self.lay.nx, self.xl, self.yl
        ks = (j * nx + i, j * nx + i + w, (j + h) * nx + i + w, (j + h) * nx + i)
        return [(xl[k], yl[k]) for k in ks]

    def _free_blocks(self, mask: np.ndarray | None = None) -> np.ndarray:
        free = (self.use == 0) & ~self.retail_block
        if mask is not None:
            free &= mask
        return np.flatnonzero(free)

    def _choose_blocks(self, n: int, mask: np.ndarray | None = None) -> list[tuple[int, int]]:
        cand = self._free_blocks(mask)
        if len(cand) == 0 and mask is not None:
            cand = self._free_blocks()
        n = min(n, len(cand))
        picks = self.rng.choice(cand, n, replace=False) if n else np.array([], np.int64)
        bx = self.lay.nx - 1
        return [(int(p // bx), int(p % bx)) for p in np.sort(picks)]

    def plan_blocks(self) -> None:
        """Allocate blocks to campuses, hospitals, retail, commercial, schools and parks."""
        lay, rng, pr, area = self.lay, self.rng, self.pr, self.area_km2
        rc, cc = lay.row_cls, lay.col_cls
        art_adj = (
            (rc[:-1] >= _SEC)[:, None]
            | (rc[1:] >= _SEC)[:, None]
            | (cc[:-1] >= _SEC)[None, :]
            | (cc[1:] >= _SEC)[None, :]
        )
        maj_adj = (
            (rc[:-1] >= _COL)[:, None]
            | (rc[1:] >= _COL)[:, None]
            | (cc[:-1] >= _COL)[None, :]
            | (cc[1:] >= _COL)[None, :]
        )
        self.campuses: list[tuple[int, int, int, int]] = []
        for _ in range(max(1, int(rng.poisson(area / 20.0)))):
            for _attempt in range(40):
                h, w = pr.randrange(2, 4), pr.randrange(2, 4)
                if lay.ny - 1 - h <= 0 or lay.nx - 1 - w <= 0:
                    break
                j = pr.randrange(0, lay.ny - 1 - h + 1)
                i = pr.randrange(0, lay.nx - 1 - w + 1)
                inner_major = (lay.row_cls[j + 1 : j + h] >= _SEC).any() or (
                    lay.col_cls[i + 1 : i + w] >= _SEC
                ).any()
                if not inner_major and (self.use[j : j + h, i : i + w] == 0).all():
                    self.use[j : j + h, i : i + w] = _CAMPUS
                    self.campuses.append((j, i, h, w))
                    break
        self.colleges = self._choose_blocks(int(rng.poisson(area / 40.0)))
        for b in self.colleges:
            self.use[b] = _COLLEGE
        self.hospitals = self._choose_blocks(max(1, int(rng.poisson(area / 30.0))), art_adj)
        for b in self.hospitals:
            self.use[b] = _HOSPITAL
        self._plan_retail()
        comm_mask = maj_adj & (rng.random(self.use.shape) < 0.08)
        self.commercial = [tuple(map(int, b)) for b in np.argwhere(comm_mask)]
        self.commercial = [
            b for b in self.commercial if self.use[b] == 0 and not self.retail_block[b]
        ]
        if not self.commercial:
            self.commercial = self._choose_blocks(1, maj_adj)
        for b in self.commercial:
            self.use[b] = _COMMERCIAL
        self.schools = self._choose_blocks(max(1, int(rng.poisson(area / 1.5))))
        for b in self.schools:
            self.use[b] = _SCHOOL
        self.kinder = self._choose_blocks(max(1, int(rng.poisson(area * 0.8))))
        for b in self.kinder:
            self.use[b] = _KINDER
        self.parks = self._choose_blocks(max(1, int(rng.poisson(area * 1.0))))
        for b in self.parks:
            self.use[b] = _PARK
        self.playgrounds = self._choose_blocks(int(rng.poisson(area * 0.4)))
        for b in self.playgrounds:
            self.use[b] = _PLAY

    def _plan_retail(self) -> None:
        """Choose block frontages along arterials for retail strips."""
        lay, pr = self.lay, self.pr
        self.retail: list[tuple[int, int, int, int, int]] = []  # (k0, k1, block j, block i, side)
        nx = lay.nx
        for j in np.flatnonzero(lay.row_cls >= _SEC).tolist():
            for i in np.flatnonzero(lay.h_on[j]).tolist():
                for bj, side in ((j - 1, -1), (j, 1)):
                    if 0 <= bj < lay.ny - 1 and self.use[bj, i] == 0 and pr.random() < _P_RETAIL:
                        self.retail.append((j * nx + i, j * nx + i + 1, bj, i, side))
                        self.retail_block[bj, i] = True
        for i in np.flatnonzero(lay.col_cls >= _SEC).tolist():
            for j in np.flatnonzero(lay.v_on[i]).tolist():
                for bi, side in ((i - 1, 1), (i, -1)):
                    if 0 <= bi < lay.nx - 1 and self.use[j, bi] == 0 and pr.random() < _P_RETAIL:
                        self.retail.append((j * nx + i, (j + 1) * nx + i, j, bi, side))
                        self.retail_block[j, bi] = True
        if not self.retail:  # always at least one strip, on the first arterial side found
            j = int(np.flatnonzero(lay.row_cls >= _SEC)[0])
            i = int(np.flatnonzero(lay.h_on[j])[0])
            bj = j if j < lay.ny - 1 else j - 1
            self.retail.append((j * nx + i, j * nx + i + 1, bj, i, 1 if bj == j else -1))
            self.retail_block[bj, i] = True

    # ----- streets ------------------------------------------------------------------------
    def _segment_flags(self) -> None:
        """Decide crossings, shape nodes and driveways of every block side in bulk."""
        lay, rng = self.lay, self.rng
        rc, cc, nbr, keep = lay.row_cls, lay.col_cls, lay.nbr, lay.keep
        rr = rc[:, None]
        cm = cc[None, :]
        major = np.maximum(rr, cm)
        minor = np.minimum(rr, cm)
        signal = (
            keep
            & (nbr >= 3)
            & (
                ((major >= _SEC) & (minor >= _COL))
                | ((major == _COL) & (minor == _COL) & (rng.random(nbr.shape) < 0.3))
            )
        )
        self.signal = signal
        for k in np.flatnonzero(signal.ravel()).tolist():
            self.grid_tags[k] = _SIGNALS
        # arterial x minor-street intersections: some arterial arms get a plain crossing
        plain = keep & (nbr >= 3) & ~signal

        def arm_codes(line_art: np.ndarray, node_plain: np.ndarray, node_sig: np.ndarray):
            shape = node_plain.shape
            p = rng.random(shape) < 0.35
            kind = rng.integers(2, 5, shape).astype(np.int8)
            code = np.where(node_sig, 1, np.where(node_plain & p & line_art, kind, 0))
            return code.astype(np.int8)

        # horizontal sides: lines are rows; node arrays (ny, nx)
        h_code = arm_codes(np.broadcast_to((rc >= _SEC)[:, None], plain.shape), plain, signal)
        self.h_x0 = h_code[:, :-1]
        self.h_x1 = arm_codes(np.broadcast_to((rc >= _SEC)[:, None], plain.shape), plain, signal)[
            :, 1:
        ]
        pt, st = plain.T, signal.T
        v_art = np.broadcast_to((cc >= _SEC)[:, None], pt.shape)
        self.v_x0 = arm_codes(v_art, pt, st)[:, :-1]
        self.v_x1 = arm_codes(v_art, pt, st)[:, 1:]
        # schools: a marked crossing in the middle of each side and a school-zone tag
        self.h_school = np.zeros(lay.h_on.shape, bool)
        self.v_school = np.zeros(lay.v_on.shape, bool)
        for j, i in self.schools:
            self.h_school[j, i] = self.h_school[j + 1, i] = True
            self.v_school[i, j] = self.v_school[i + 1, j] = True
        self.h_school &= lay.h_on
        self.v_school &= lay.v_on

        def shapes(line_cls: np.ndarray, shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
            c = np.broadcast_to(line_cls[:, None], shape)
            curved = np.where(c == _RES, 0.3, np.where(c == _COL, 0.15, 0.0))
            n = np.where(rng.random(shape) < curved, rng.integers(1, 4, shape), 0)
            amp = rng.normal(0.0, np.where(c == _RES, 4.0, 2.0))
            return n.astype(np.int8), amp

        self.h_nshape, self.h_amp = shapes(rc, lay.h_on.shape)
        self.v_nshape, self.v_amp = shapes(cc, lay.v_on.shape)

        def driveways(line_cls: np.ndarray, on: np.ndarray) -> np.ndarray:
            c = np.broadcast_to(line_cls[:, None], on.shape)
            t = rng.uniform(0.25, 0.75, on.shape)
            t[~(on & (c == _RES) & (rng.random(on.shape) < 0.025))] = np.nan
            return t

        self.h_drive = driveways(rc, lay.h_on)
        self.v_drive = driveways(cc, lay.v_on)
        self.h_break = rng.random(lay.h_on.shape) < _P_BREAK
        self.v_break = rng.random(lay.v_on.shape) < _P_BREAK

    def _street_tags(self, cls: int, name: str, oneway: bool, school: bool) -> dict[str, str]:
        pr = self.pr
        hw = _HIGHWAY[cls]
        if cls == _RES and not oneway and pr.random() < 0.03:
            hw = "living_street"
        tags = {"highway": hw}
        if not (cls == _RES and pr.random() < 0.03):
            tags["name"] = name
        speed = _pick(pr, *_MAXSPEED[hw])
        if speed is not None:
            tags["maxspeed"] = speed
        if oneway:
            tags["oneway"] = "yes"
        if cls >= _SEC:
            lanes = ("2", "3") if oneway else ("4", "2", "3")
            probs = (0.6, 0.4) if oneway else (0.55, 0.35, 0.10)
            tags["lanes"] = _pick(pr, lanes, probs)
            tags["sidewalk"] = "separate" if pr.random() < 0.25 else "both"
        elif cls == _COL:
            if pr.random() < 0.5:
                tags["lanes"] = "2"
            tags["sidewalk"] = "both"
        else:
            sw = _pick(pr, ("both", "no", None, "left"), (0.5, 0.15, 0.3, 0.05))
            if sw is not None:
                tags["sidewalk"] = sw
        if school:
            tags["hazard"] = "school_zone"
            if pr.random() < 0.6:
                tags["maxspeed:conditional"] = _SCHOOL_CONDITIONAL
        return tags

    def _side_nodes(
        self, ka: int, kb: int, nshape: int, amp: float, x0: int, x1: int, school: bool, dt: float
    ) -> list[int]:
        """Create the intermediate nodes of one block side from node ``ka`` to ``kb``."""
        ax, ay, bx, by = self.xl[ka], self.yl[ka], self.xl[kb], self.yl[kb]
        dx, dy = bx - ax, by - ay
        length = math.hypot(dx, dy)
        if nshape == 0 and not (x0 or x1 or school) and dt != dt:
            return []
        nxv, nyv = -dy / length, dx / length
        pts: list[tuple[float, dict[str, str] | None, bool]] = [
            (q / (nshape + 1), None, False) for q in range(1, nshape + 1)
        ]
        off = min(_CROSS_OFFSET / length, 0.2)
        if x0:
            pts.append((off, _CROSS_TAGS[x0], False))
        if x1:
            pts.append((1.0 - off, _CROSS_TAGS[x1], False))
        if school:
            pts.append((0.42, _CROSS_TAGS[5 if self.pr.random() < 0.5 else 3], False))
        elif dt == dt:
            pts.append((dt, None, True))
        pts.sort(key=lambda p: p[0])
        ids = []
        for t, tags, drive in pts:
            o = amp * math.sin(math.pi * t)
            px, py = ax + dx * t + nxv * o, ay + dy * t + nyv * o
            nid = self.out.node(px, py, tags or None)
            ids.append(nid)
            if tags:
                self.out.count("crossing")
            if drive:
                side = 1.0 if self.pr.random() < 0.5 else -1.0
                dlen = self.pr.uniform(20.0, 30.0)
                tip = self.out.node(px + nxv * side * dlen, py + nyv * side * dlen)
                self.out.way([nid, tip], {"highway": "service", "service": "driveway"})
                self.out.count("driveway")
        return ids

    def streets(self) -> None:
        """Emit every street way: grid lines, stubs and diagonals."""
        lay = self.lay
        nx, ny = lay.nx, lay.ny
        for j in range(ny):
            ks = [j * nx + i for i in range(nx)]
            self._line(ks, int(lay.row_cls[j]), self.row_names[j], lay.h_on[j], lay.h_ow[j],
                       self.h_break[j], self.h_nshape[j], self.h_amp[j], self.h_x0[j],
                       self.h_x1[j], self.h_school[j], self.h_drive[j])  # fmt: skip
        for i in range(nx):
            ks = [j * nx + i for j in range(ny)]
            self._line(ks, int(lay.col_cls[i]), self.col_names[i], lay.v_on[i], lay.v_ow[i],
                       self.v_break[i], self.v_nshape[i], self.v_amp[i], self.v_x0[i],
                       self.v_x1[i], self.v_school[i], self.v_drive[i])  # fmt: skip
        self._stubs()
        self._diagonals()

    def _line(self, ks: list[int], cls: int, name: str, *arrays: np.ndarray) -> None:
        on, ow, brk, nshape, amp, x0, x1, school, drive = (a.tolist() for a in arrays)
        m = len(on)
        i = 0
        while i < m:
            if not on[i]:
                i += 1
                continue
            start, d = i, ow[i]
            i += 1
            while i < m and on[i] and ow[i] == d and not brk[i]:
                i += 1
            refs = [ks[start] + 1]
            for s in range(start, i):
                refs.extend(
                    self._side_nodes(
                        ks[s], ks[s + 1], nshape[s], amp[s], x0[s], x1[s], school[s], drive[s]
                    )  # fmt: skip
                )
                refs.append(ks[s + 1] + 1)
            if d < 0:
                refs.reverse()
            zone = any(school[start:i])
            self.out.way(refs, self._street_tags(cls, name, d != 0, zone))
            self.out.count(f"way_{_HIGHWAY[cls]}")

    def _stubs(self) -> None:
        lay, pr, nx = self.lay, self.pr, self.lay.nx
        for stub, is_h in ((lay.h_stub, True), (lay.v_stub, False)):
            for p, q in np.argwhere(stub.any(axis=2)).tolist():
                if is_h:
                    ka, kb, name = p * nx + q, p * nx + q + 1, self.row_names[p]
                else:
                    ka, kb, name = q * nx + p, (q + 1) * nx + p, self.col_names[p]
                for end, (k0, k1) in enumerate(((ka, kb), (kb, ka))):
                    if not stub[p, q, end]:
                        continue
                    f = pr.uniform(0.28, 0.4)
                    tx = self.xl[k0] + (self.xl[k1] - self.xl[k0]) * f
                    ty = self.yl[k0] + (self.yl[k1] - self.yl[k0]) * f
                    tip_tags = {"highway": "turning_circle"} if pr.random() < 0.3 else None
                    tip = self.out.node(tx, ty, tip_tags)
                    tags = {"highway": "residential", "name": name}
                    if pr.random() < 0.6:
                        tags["maxspeed"] = "25 mph"
                    self.out.way([k0 + 1, tip], tags)
                    self.out.count("stub")

    def _diagonals(self) -> None:
        lay, pr, nx = self.lay, self.pr, self.lay.nx
        for j, i in np.argwhere(lay.d_on).tolist():
            if lay.d_dir[j, i] == 0:
                ka, kb = j * nx + i, (j + 1) * nx + i + 1
            else:
                ka, kb = j * nx + i + 1, (j + 1) * nx + i
            ax, ay, bx, by = self.xl[ka], self.yl[ka], self.xl[kb], self.yl[kb]
            dx, dy = bx - ax, by - ay
            length = math.hypot(dx, dy)
            amp = pr.gauss(0.0, 10.0)
            n = pr.randrange(2, 4)
            refs = [ka + 1]
            for q in range(1, n + 1):
                t = q / (n + 1)
                o = amp * math.sin(math.pi * t)
                px, py = ax + dx * t - dy / length * o, ay + dy * t + dx / length * o
                refs.append(self.out.node(px, py))
            refs.append(kb + 1)
            tags = {"highway": "residential", "name": f"{self.names.word()} Crescent"}
            if pr.random() < 0.5:
                tags["maxspeed"] = "25 mph"
            self.out.way(refs, tags)
            self.out.count("diagonal")

    # ----- sources ------------------------------------------------------------------------
    def sources(self) -> None:
        """Emit the polygons and nodes of every exposure source, then footways and land use."""
        out, pr, names = self.out, self.pr, self.names
        for j, i, h, w in self.campuses:
            pts = _inset(self._block_corners(j, i, h, w), 14.0)
            out.polygon(pts, {"amenity": "university", "name": f"University of {names.word()}"})
            out.count("university")
        for j, i in self.colleges:
            out.polygon(_inset(self._block_corners(j, i), 14.0),
                        {"amenity": "college", "name": f"{names.word()} College"})  # fmt: skip
            out.count("college")
        for j, i in self.hospitals:
            out.polygon(
                _inset(self._block_corners(j, i), 12.0),
                {"amenity": "hospital", "healthcare": "hospital", "emergency": "yes",
                 "name": f"{names.word()} General Hospital"},
            )  # fmt: skip
            out.count("hospital")
        for j, i in self.commercial:
            out.polygon(_inset(self._block_corners(j, i), 10.0), {"landuse": "commercial"})
            out.count("commercial")
        kinds = ("Primary School", "School", "High School", "Middle School")
        for j, i in self.schools:
            tags = {"amenity": "school", "name": f"{names.word()} {kinds[pr.randrange(4)]}"}
            out.polygon(_inset(self._block_corners(j, i), 12.0), tags)
            out.count("school")
        for j, i in self.kinder:
            tags = {"amenity": "kindergarten", "name": f"{names.word()} Kindergarten"}
            c = self._block_corners(j, i)
            if pr.random() < 0.5:
                cx, cy = _inset(c, 30.0)[0]
                out.polygon([(cx, cy), (cx + 35, cy), (cx + 35, cy + 30), (cx, cy + 30)], tags)
            else:
                cx = sum(p[0] for p in c) / 4
                cy = sum(p[1] for p in c) / 4
                out.node(cx, cy, tags)
            out.count("kindergarten")
        self._parks()
        for j, i in self.playgrounds:
            c = self._block_corners(j, i)
            out.node(sum(p[0] for p in c) / 4, sum(p[1] for p in c) / 4, {"leisure": "playground"})
            out.count("playground")
        self._retail()
        self._bus_stops()
        self._sidewalks()
        self._residential_landuse()

    def _parks(self) -> None:
        out, pr, lay = self.out, self.pr, self.lay
        nx = lay.nx
        for j, i in self.parks:
            corners = self._block_corners(j, i)
            tags = {"leisure": "park", "name": f"{self.names.word()} Park"}
            out.polygon(_inset(corners, 8.0), tags)
            out.count("park")
            cx = sum(p[0] for p in corners) / 4
            cy = sum(p[1] for p in corners) / 4
            if pr.random() < 0.4:
                x0, y0 = cx + 10, cy + 10
                pts = [(x0, y0), (x0 + 25, y0), (x0 + 25, y0 + 20), (x0, y0 + 20)]
                out.polygon(pts, {"leisure": "playground"})
                out.count("playground")
            # a footpath across the park from corner to corner, joined to the streets
            ka, kb = j * nx + i, (j + 1) * nx + i + 1
            ends = []
            for k, p in ((ka, corners[0]), (kb, corners[2])):
                ends.append(k + 1 if lay.keep.flat[k] else out.node(*p))
            mid = out.node(cx + pr.gauss(0, 5), cy + pr.gauss(0, 5))
            out.way([ends[0], mid, ends[1]], {"highway": "footway"})
            out.count("footway")

    def _retail(self) -> None:
        out, pr = self.out, self.pr
        for k0, k1, bj, bi, side in self.retail:
            ax, ay, bx, by = self.xl[k0], self.yl[k0], self.xl[k1], self.yl[k1]
            dx, dy = bx - ax, by - ay
            length = math.hypot(dx, dy)
            ux, uy = dx / length, dy / length
            nxv, nyv = -uy * side, ux * side  # unit normal pointing into the block
            # make sure the normal points towards the block centre
            c = self._block_corners(bj, bi)
            cx, cy = sum(p[0] for p in c) / 4, sum(p[1] for p in c) / 4
            if (cx - ax) * nxv + (cy - ay) * nyv < 0:
                nxv, nyv = -nxv, -nyv
            a0, a1 = 12.0, length - 12.0

            def at(s: float, d: float) -> tuple[float, float]:
                return ax + ux * s + nxv * d, ay + uy * s + nyv * d  # noqa: B023

            tags = {"landuse": "retail"}
            out.polygon([at(a0, 8.0), at(a1, 8.0), at(a1, 45.0), at(a0, 45.0)], tags)
            out.count("retail")
            n = pr.randrange(1, 5)
            for q in range(n):
                s = a0 + (a1 - a0) * (q + 0.5) / n
                shop, label = _SHOPS[pr.randrange(len(_SHOPS))]
                stags = {"shop": shop}
                if pr.random() < 0.4:
                    stags["name"] = f"{self.names.word()} {label}"
                out.node(*at(s, 25.0), stags)
                out.count("shop")

    def _bus_stops(self) -> None:
        lay, pr, out = self.lay, self.pr, self.out
        nx, ny = lay.nx, lay.ny
        lines = [("h", j) for j in np.flatnonzero(lay.row_cls >= _SEC).tolist()]
        lines += [("v", i) for i in np.flatnonzero(lay.col_cls >= _SEC).tolist()]
        for kind, idx in lines:
            if kind == "h":
                ks = [idx * nx + i for i in range(nx)]
                on, ow, name = lay.h_on[idx], int(lay.row_ow[idx]), self.row_names[idx]
                cross_names = self.col_names
            else:
                ks = [j * nx + idx for j in range(ny)]
                on, ow, name = lay.v_on[idx], int(lay.col_ow[idx]), self.col_names[idx]
                cross_names = self.row_names
            px = [self.xl[k] for k in ks]
            py = [self.yl[k] for k in ks]
            seg = [math.hypot(px[q + 1] - px[q], py[q + 1] - py[q]) for q in range(len(ks) - 1)]
            cum = [0.0, *np.cumsum(seg).tolist()]
            s = pr.uniform(100.0, 300.0)
            while s < cum[-1]:
                q = min(bisect_right(cum, s) - 1, len(seg) - 1)
                if on[q]:
                    t = (s - cum[q]) / seg[q]
                    ux, uy = (px[q + 1] - px[q]) / seg[q], (py[q + 1] - py[q]) / seg[q]
                    bx, by = px[q] + ux * seg[q] * t, py[q] + uy * seg[q] * t
                    near = q if t < 0.5 else q + 1
                    stop_name = f"{name} / {cross_names[near]}"
                    # right-hand side of travel: (uy, -ux) for travel along increasing index
                    sides = (1, -1) if ow == 0 else ((1,) if ow > 0 else (-1,))
                    for sd in sides:
                        tags = {"highway": "bus_stop", "name": stop_name, "bus": "yes"}
                        if pr.random() < 0.7:
                            tags["public_transport"] = "platform"
                        out.node(bx + uy * 10.0 * sd, by - ux * 10.0 * sd, tags)
                        out.count("bus_stop")
                s += pr.uniform(350.0, 450.0)

    def _sidewalks(self) -> None:
        """Draw separate sidewalks beside some arterial sides (not joined to the streets)."""
        lay, rng, nx = self.lay, self.rng, self.lay.nx
        for j in np.flatnonzero(lay.row_cls >= _SEC).tolist():
            for i in np.flatnonzero(lay.h_on[j] & (rng.random(nx - 1) < 0.12)).tolist():
                self._sidewalk_pair(j * nx + i, j * nx + i + 1)
        for i in np.flatnonzero(lay.col_cls >= _SEC).tolist():
            for j in np.flatnonzero(lay.v_on[i] & (rng.random(lay.ny - 1) < 0.12)).tolist():
                self._sidewalk_pair(j * nx + i, (j + 1) * nx + i)

    def _sidewalk_pair(self, ka: int, kb: int) -> None:
        ax, ay, bx, by = self.xl[ka], self.yl[ka], self.xl[kb], self.yl[kb]
        dx, dy = bx - ax, by - ay
        length = math.hypot(dx, dy)
        ux, uy = dx / length, dy / length
        for sd in (1.0, -1.0):
            ox, oy = -uy * 9.0 * sd, ux * 9.0 * sd
            a = self.out.node(ax + ux * 14 + ox, ay + uy * 14 + oy)
            b = self.out.node(bx - ux * 14 + ox, by - uy * 14 + oy)
            self.out.way([a, b], {"highway": "footway", "footway": "sidewalk"})
            self.out.count("footway")

    def _residential_landuse(self) -> None:
        """Cover some neighbourhoods between the main streets with landuse=residential."""
        lay, pr = self.lay, self.pr
        cols = [0, *np.flatnonzero(lay.col_cls >= _COL).tolist(), lay.nx - 1]
        rows = [0, *np.flatnonzero(lay.row_cls >= _COL).tolist(), lay.ny - 1]
        for r0, r1 in zip(rows[:-1], rows[1:], strict=True):
            for c0, c1 in zip(cols[:-1], cols[1:], strict=True):
                if r1 - r0 >= 2 and c1 - c0 >= 2 and pr.random() < 0.6:
                    pts = _inset(self._block_corners(r0, c0, r1 - r0, c1 - c0), 12.0)
                    self.out.polygon(pts, {"landuse": "residential"})
                    self.out.count("landuse_residential")


def _validate(
    path: str | Path, edges: int, seed: int, centre: tuple[float, float]
) -> tuple[Path, str]:
    p = Path(path)
    name = p.name.lower()
    if name.endswith(".osm.pbf") or name.endswith(".pbf"):
        fmt = "pbf"
    elif name.endswith(".osm"):
        fmt = "osm"
    else:
        raise OptionError("the output must end in .osm.pbf or .osm", path=p, field="path")
    if isinstance(edges, bool) or not isinstance(edges, int | np.integer):
        raise OptionError(f"must be an integer, got {edges!r}", field="edges")
    if not MIN_EDGES <= edges <= MAX_EDGES:
        raise OptionError(
            f"must be between {MIN_EDGES} and {MAX_EDGES}, got {edges}", field="edges"
        )
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise OptionError(f"must be a non-negative integer, got {seed!r}", field="seed")
    try:
        lat, lon = (float(v) for v in centre)
    except (TypeError, ValueError):
        raise OptionError(f"must be (lat, lon), got {centre!r}", field="centre") from None
    if not (math.isfinite(lat) and math.isfinite(lon) and -80 <= lat <= 80 and -180 <= lon < 180):
        raise OptionError(
            f"must be a finite (lat, lon) with |lat| <= 80, got {centre!r}", field="centre"
        )
    return p, fmt


class _LonLat:
    """Rotate local metres by ``angle`` and place them around ``centre`` in a UTM zone."""

    def __init__(self, *, centre: tuple[float, float], angle: float, epsg: int) -> None:
        from pyproj import Transformer

        lat0, lon0 = centre
        fwd = Transformer.from_crs("EPSG:4326", f"EPSG:{epsg}", always_xy=True)
        self.e0, self.n0 = fwd.transform(lon0, lat0)
        self.cos, self.sin = math.cos(angle), math.sin(angle)
        self.inv = Transformer.from_crs(f"EPSG:{epsg}", "EPSG:4326", always_xy=True)

    def __call__(self, x: np.ndarray, y: np.ndarray) -> tuple[list[float], list[float]]:
        xe = self.e0 + x * self.cos - y * self.sin
        yn = self.n0 + x * self.sin + y * self.cos
        lon, lat = self.inv.transform(xe, yn)
        return np.asarray(lon).tolist(), np.asarray(lat).tolist()


def _chunks(
    ids: np.ndarray, x: np.ndarray, y: np.ndarray, lonlat: _LonLat, size: int = 1 << 16
) -> Iterator[tuple[list[int], list[float], list[float]]]:
    """Yield node ids with longitudes and latitudes a slice at a time (bounded memory)."""
    for s in range(0, len(ids), size):
        lon, lat = lonlat(x[s : s + size], y[s : s + size])
        yield ids[s : s + size].tolist(), lon, lat


def utm_epsg(lat: float, lon: float) -> int:
    """Return the EPSG code of the UTM zone holding (``lat``, ``lon``)."""
    zone = int((lon + 180.0) // 6.0) % 60 + 1
    return (32600 if lat >= 0 else 32700) + zone


def write_city(
    path: str | Path,
    *,
    edges: int,
    seed: int = 0,
    centre: tuple[float, float] = DEFAULT_CENTRE,
    force: bool = True,
) -> dict[str, Any]:
    """Write an invented city of about ``edges`` directed drivable edges as OSM data.

    Parameters
    ----------
    path
        Output file; ``.osm.pbf`` (or ``.pbf``) writes PBF, ``.osm`` writes OSM XML. Written
        atomically: a half-written file never sits at ``path``.
    edges
        Requested number of directed drivable edges after topology simplification
        (between 500 and 5,000,000); the result is usually within 2 % of it.
    seed
        Seed of every random choice; the same seed and size give a byte-identical file.
    centre
        (lat, lon) of the city centre; the default lies in open ocean.
    force
        Replace an existing ``path``; when False an existing file raises an error.

    Returns
    -------
    dict
        Summary: ``nodes``, ``ways``, ``drive_edges`` (exact count of directed drivable
        edges after simplification), ``sources`` (per exposure category), ``features``
        (finer counts), ``grid``, ``extent_m``, ``area_km2``, ``crs``, ``bytes`` and the inputs.

    Raises
    ------
    OptionError
        An option is out of range or the file name has an unknown extension.
    OutputExistsError
        ``path`` exists and ``force`` is False.
    """
    import osmium
    from osmium.osm import mutable

    target, fmt = _validate(path, edges, seed, centre)
    target = check_target(target, force=force)
    edges, seed = int(edges), int(seed)
    lat0, lon0 = float(centre[0]), float(centre[1])
    lay = _choose_layout(edges, seed)
    city = _City(lay, seed)
    city.plan_blocks()
    city._segment_flags()
    city.streets()
    city.sources()
    out = city.out

    epsg = utm_epsg(lat0, lon0)
    angle = math.radians(float(np.random.default_rng([seed, lay.nx, lay.ny, 3]).uniform(-10, 10)))
    kept = np.flatnonzero(lay.keep.ravel())
    lonlat = _LonLat(centre=(lat0, lon0), angle=angle, epsg=epsg)
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

    c = out.counts
    sources = {
        "school": c.get("school", 0) + c.get("kindergarten", 0),
        "campus": c.get("university", 0) + c.get("college", 0),
        "retail": c.get("retail", 0) + c.get("shop", 0),
        "commercial": c.get("commercial", 0),
        "transit": c.get("bus_stop", 0),
        "park": c.get("park", 0) + c.get("playground", 0),
        "hospital": c.get("hospital", 0),
    }
    features = dict(sorted(c.items()))
    features["traffic_signals"] = len(city.grid_tags)
    width = float(lay.gx[-1] - lay.gx[0])
    height = float(lay.gy[-1] - lay.gy[0])
    summary = {
        "path": str(target),
        "format": "pbf" if fmt == "pbf" else "xml",
        "edges_requested": edges,
        "drive_edges": lay.drive_edges,
        "seed": seed,
        "centre": [lat0, lon0],
        "crs": f"EPSG:{epsg}",
        "grid": [lay.nx, lay.ny],
        "extent_m": [round(width, 1), round(height, 1)],
        "area_km2": round(city.area_km2, 3),
        "nodes": int(len(kept) + len(out.xs)),
        "ways": len(out.wtags),
        "sources": sources,
        "features": features,
        "bytes": target.stat().st_size,
    }
    log.info(
        "write_city wrote %s: %d nodes, %d ways, %d drivable edges (requested %d)",
        target, summary["nodes"], summary["ways"], lay.drive_edges, edges,
    )  # fmt: skip
    return summary

"""The invented city's state: invented names, the output buffer, and the plan of its blocks.

:class:`City` holds the grid layout, the seeded generators and the :class:`Out` buffer that
street and source geometry is emitted into; :func:`plan_blocks` allocates blocks to campuses,
colleges, hospitals, retail strips, commercial land, schools, kindergartens, parks and
playgrounds. All names are made up from invented syllables or numbers.
"""

from __future__ import annotations

import math
import random
from array import array
from bisect import bisect_right
from collections.abc import Sequence
from itertools import chain
from typing import Any

import numpy as np

from routerisk.testing.grid import COL, PRI, RES, SEC, Layout

_P_RETAIL = 0.2  # share of arterial block frontages with a retail strip

_BLOCKED, _SCHOOL, _KINDER, _CAMPUS, _COLLEGE, _HOSPITAL, _PARK, _COMMERCIAL, _PLAY = range(1, 10)

_ONSETS = (
    "b", "br", "d", "dr", "f", "g", "gr", "k", "kr", "l", "m", "n", "p", "qu", "r", "s",
    "sk", "t", "tr", "v", "vr", "z", "zh", "th",
)  # fmt: skip
_VOWELS = ("a", "e", "i", "o", "u", "ai", "eo", "ua", "y", "ae")
_CODAS = ("", "", "", "n", "r", "l", "s", "sk", "rn", "lv", "x", "m")


class Names:
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


class Out:
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
        """Add a node at local (``x``, ``y``) metres and return its OSM id."""
        self.xs.append(x)
        self.ys.append(y)
        self.ntags.append(tags)
        return self.first + len(self.xs) - 1

    def way(self, refs: Sequence[int], tags: dict[str, str]) -> None:
        """Add a way through the node ids ``refs``."""
        self.refs.extend(refs)
        self.offs.append(len(self.refs))
        self.wtags.append(tuple(chain.from_iterable(tags.items())))

    def polygon(self, pts: Sequence[tuple[float, float]], tags: dict[str, str]) -> None:
        """Add a closed way through new nodes at the local points ``pts``."""
        ids = [self.node(px, py) for px, py in pts]
        self.way([*ids, ids[0]], tags)

    def count(self, what: str, n: int = 1) -> None:
        """Add ``n`` to the feature count ``what``."""
        self.counts[what] = self.counts.get(what, 0) + n


def pick(pr: random.Random, values: tuple[Any, ...], probs: tuple[float, ...]) -> Any:
    """Return one of ``values`` drawn with the weights ``probs``."""
    cum = _CUMULATIVE.get(probs)
    if cum is None:
        cum = _CUMULATIVE[probs] = tuple(np.cumsum(probs) / sum(probs))
    return values[min(bisect_right(cum, pr.random()), len(values) - 1)]


_CUMULATIVE: dict[tuple[float, ...], tuple[float, ...]] = {}


def inset(pts: list[tuple[float, float]], margin: float) -> list[tuple[float, float]]:
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


class City:
    """Place sources on blocks, then emit street and source geometry into an ``Out``.

    The block plan (``campuses``, ``colleges``, ``hospitals``, ``retail``, ``commercial``,
    ``schools``, ``kinder``, ``parks``, ``playgrounds``) is set by :func:`plan_blocks`, the
    per-side flags (``h_*`` / ``v_*`` arrays, ``signal``) by
    :func:`routerisk.testing.streets.segment_flags`.
    """

    def __init__(self, lay: Layout, seed: int) -> None:
        self.lay = lay
        # numpy for draws in bulk, the standard library's generator for single draws (faster)
        self.rng = np.random.default_rng([seed, lay.nx, lay.ny, 1])
        # seeded generators for reproducible benchmark cities, not for secrets
        self.pr = random.Random(((seed * 1_000_003) + lay.nx) * 100_003 + lay.ny)  # noqa: S311
        self.names = Names(
            random.Random(  # noqa: S311
                ((seed * 1_000_033) + lay.nx) * 100_019 + lay.ny
            )
        )
        self.out = Out(lay.nx * lay.ny + 1)
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
            RES: ("Street", "Lane", "Way", "Court", "Place", "Row"),
            COL: ("Road", "Drive", "Street"),
            SEC: ("Avenue", "Road", "Boulevard"),
            PRI: ("Boulevard", "Avenue"),
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
                self.row_names.append(name(cls, j + 1 if cls == RES else None))

    # ----- block plan ---------------------------------------------------------------------
    def block_corners(self, j: int, i: int, h: int = 1, w: int = 1) -> list[tuple[float, float]]:
        """Return the corners of the ``h`` x ``w`` blocks from block row ``j``, column ``i``."""
        nx, xl, yl = self.lay.nx, self.xl, self.yl
        ks = (j * nx + i, j * nx + i + w, (j + h) * nx + i + w, (j + h) * nx + i)
        return [(xl[k], yl[k]) for k in ks]

    def _free_blocks(self, mask: np.ndarray | None = None) -> np.ndarray:
        free = (self.use == 0) & ~self.retail_block
        if mask is not None:
            free &= mask
        return np.flatnonzero(free)

    def choose_blocks(self, n: int, mask: np.ndarray | None = None) -> list[tuple[int, int]]:
        """Draw up to ``n`` free blocks (within ``mask`` when any is free there)."""
        cand = self._free_blocks(mask)
        if len(cand) == 0 and mask is not None:
            cand = self._free_blocks()
        n = min(n, len(cand))
        picks = self.rng.choice(cand, n, replace=False) if n else np.array([], np.int64)
        bx = self.lay.nx - 1
        return [(int(p // bx), int(p % bx)) for p in np.sort(picks)]


def plan_blocks(city: City) -> None:
    """Allocate blocks to campuses, hospitals, retail, commercial, schools and parks."""
    lay, rng, pr, area = city.lay, city.rng, city.pr, city.area_km2
    rc, cc = lay.row_cls, lay.col_cls
    art_adj = (
        (rc[:-1] >= SEC)[:, None]
        | (rc[1:] >= SEC)[:, None]
        | (cc[:-1] >= SEC)[None, :]
        | (cc[1:] >= SEC)[None, :]
    )
    maj_adj = (
        (rc[:-1] >= COL)[:, None]
        | (rc[1:] >= COL)[:, None]
        | (cc[:-1] >= COL)[None, :]
        | (cc[1:] >= COL)[None, :]
    )
    city.campuses: list[tuple[int, int, int, int]] = []
    for _ in range(max(1, int(rng.poisson(area / 20.0)))):
        for _attempt in range(40):
            h, w = pr.randrange(2, 4), pr.randrange(2, 4)
            if lay.ny - 1 - h <= 0 or lay.nx - 1 - w <= 0:
                break
            j = pr.randrange(0, lay.ny - 1 - h + 1)
            i = pr.randrange(0, lay.nx - 1 - w + 1)
            inner_major = (lay.row_cls[j + 1 : j + h] >= SEC).any() or (
                lay.col_cls[i + 1 : i + w] >= SEC
            ).any()
            if not inner_major and (city.use[j : j + h, i : i + w] == 0).all():
                city.use[j : j + h, i : i + w] = _CAMPUS
                city.campuses.append((j, i, h, w))
                break
    city.colleges = city.choose_blocks(int(rng.poisson(area / 40.0)))
    for b in city.colleges:
        city.use[b] = _COLLEGE
    city.hospitals = city.choose_blocks(max(1, int(rng.poisson(area / 30.0))), art_adj)
    for b in city.hospitals:
        city.use[b] = _HOSPITAL
    _plan_retail(city)
    comm_mask = maj_adj & (rng.random(city.use.shape) < 0.08)
    city.commercial = [tuple(map(int, b)) for b in np.argwhere(comm_mask)]
    city.commercial = [b for b in city.commercial if city.use[b] == 0 and not city.retail_block[b]]
    if not city.commercial:
        city.commercial = city.choose_blocks(1, maj_adj)
    for b in city.commercial:
        city.use[b] = _COMMERCIAL
    city.schools = city.choose_blocks(max(1, int(rng.poisson(area / 1.5))))
    for b in city.schools:
        city.use[b] = _SCHOOL
    city.kinder = city.choose_blocks(max(1, int(rng.poisson(area * 0.8))))
    for b in city.kinder:
        city.use[b] = _KINDER
    city.parks = city.choose_blocks(max(1, int(rng.poisson(area * 1.0))))
    for b in city.parks:
        city.use[b] = _PARK
    city.playgrounds = city.choose_blocks(int(rng.poisson(area * 0.4)))
    for b in city.playgrounds:
        city.use[b] = _PLAY


def _plan_retail(city: City) -> None:
    """Choose block frontages along arterials for retail strips."""
    lay, pr = city.lay, city.pr
    city.retail: list[tuple[int, int, int, int, int]] = []  # (k0, k1, block j, block i, side)
    nx = lay.nx
    for j in np.flatnonzero(lay.row_cls >= SEC).tolist():
        for i in np.flatnonzero(lay.h_on[j]).tolist():
            for bj, side in ((j - 1, -1), (j, 1)):
                if 0 <= bj < lay.ny - 1 and city.use[bj, i] == 0 and pr.random() < _P_RETAIL:
                    city.retail.append((j * nx + i, j * nx + i + 1, bj, i, side))
                    city.retail_block[bj, i] = True
    for i in np.flatnonzero(lay.col_cls >= SEC).tolist():
        for j in np.flatnonzero(lay.v_on[i]).tolist():
            for bi, side in ((i - 1, 1), (i, -1)):
                if 0 <= bi < lay.nx - 1 and city.use[j, bi] == 0 and pr.random() < _P_RETAIL:
                    city.retail.append((j * nx + i, (j + 1) * nx + i, j, bi, side))
                    city.retail_block[j, bi] = True
    if not city.retail:  # always at least one strip, on the first arterial side found
        j = int(np.flatnonzero(lay.row_cls >= SEC)[0])
        i = int(np.flatnonzero(lay.h_on[j])[0])
        bj = j if j < lay.ny - 1 else j - 1
        city.retail.append((j * nx + i, j * nx + i + 1, bj, i, 1 if bj == j else -1))
        city.retail_block[bj, i] = True

"""The grid of the invented city: line classes, block sides, pruning and the exact edge count.

The layout is drawn with numpy in bulk from a seed and the grid size. Collectors (tertiary)
run every 4 to 6 lines, arterials (secondary or primary, some as one-way pairs) every 10 to 15;
some residential block sides are left out (a few kept as dead-end stubs), a few all-residential
blocks get a diagonal. Only the largest strongly connected part is kept, and the number of
directed drivable edges after osmnx's topology simplification is counted exactly, so that
:func:`choose_layout` can refine the grid size until it is close to a requested count.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.sparse import csgraph

# road classes of grid lines
RES, COL, SEC, PRI = 0, 1, 2, 3
HIGHWAY = {RES: "residential", COL: "tertiary", SEC: "secondary", PRI: "primary"}

_ASPECT = 1.25  # grid columns / rows
_EDGES_PER_NODE = 3.6  # first guess, refined by the exact count
_P_DROP = 0.07  # share of residential block sides left out
_P_STUB = 0.4  # share of left-out block sides kept as two dead-end stubs
_P_ONEWAY = 0.03  # share of residential block sides made one-way
_P_DIAGONAL = 0.012  # share of all-residential blocks crossed by a diagonal street


@dataclass
class Layout:
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
        cls[a] = PRI if rng.random() < 0.45 else SEC
    anchors = [0, *arts, n - 1]
    for lo, hi in zip(anchors[:-1], anchors[1:], strict=True):
        p = lo + int(rng.integers(4, 7))
        while p <= hi - 3:
            cls[p] = COL
            p += int(rng.integers(4, 7))
    for a in arts:
        if a + 1 <= n - 2 and cls[a + 1] == RES and rng.random() < 0.3:
            d = 1 if rng.random() < 0.5 else -1
            cls[a + 1] = cls[a]
            ow[a], ow[a + 1] = d, -d
    return cls, ow


def _make_layout(nx: int, ny: int, seed: int) -> Layout:
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
    straight_col = np.where(col_cls >= SEC, 0.2, 1.0)[None, :]
    straight_row = np.where(row_cls >= SEC, 0.2, 1.0)[:, None]
    jx = np.clip(rng.normal(0.0, 4.0, (ny, nx)), -10.0, 10.0) * straight_col
    jy = np.clip(rng.normal(0.0, 4.0, (ny, nx)), -10.0, 10.0) * straight_row
    x = x0 + amp_x * np.sin(2 * math.pi * y0 / wl_x + ph_x) + jx
    y = y0 + amp_y * np.sin(2 * math.pi * x0 / wl_y + ph_y) + jy

    def sides(line_cls: np.ndarray, line_ow: np.ndarray, n_seg: int) -> tuple[np.ndarray, ...]:
        shape = (len(line_cls), n_seg)
        res = np.broadcast_to((line_cls == RES)[:, None], shape)
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
        (row_cls[:-1] == RES)[:, None]
        & (row_cls[1:] == RES)[:, None]
        & (col_cls[:-1] == RES)[None, :]
        & (col_cls[1:] == RES)[None, :]
    )
    d_on = all_res & (rng.random((ny - 1, nx - 1)) < _P_DIAGONAL)
    d_dir = rng.integers(0, 2, (ny - 1, nx - 1)).astype(np.int8)

    lay = Layout(
        nx, ny, gx, gy, x, y, col_cls, row_cls, col_ow, row_ow, h_on, h_ow, v_on, v_ow,
        h_stub, v_stub, d_on, d_dir, np.ones((ny, nx), bool), np.zeros((ny, nx), np.int32), 0,
    )  # fmt: skip
    _prune_to_strong_component(lay)
    lay.drive_edges = _count_simplified(lay)
    return lay


def _side_pairs(lay: Layout) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
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


def _prune_to_strong_component(lay: Layout) -> None:
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


def _touched(lay: Layout) -> np.ndarray:
    a, b, _ = _side_pairs(lay)
    t = np.zeros(lay.nx * lay.ny, bool)
    t[a] = True
    t[b] = True
    return t.reshape(lay.ny, lay.nx)


def _count_simplified(lay: Layout) -> int:
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


def choose_layout(edges: int, seed: int) -> Layout:
    """Refine the grid size until the simplified edge count is close to ``edges``."""
    n_nodes = edges / _EDGES_PER_NODE
    best: Layout | None = None
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

"""What every part of the matcher shares: its tuning constants, the edge type, the result.

:class:`MatchedRoute` is what joining and matching return: the ordered edges ``(u, v, key)``
driven, the share of each edge driven (the first and last edges are usually partial), and the
total length and time. The constants carry their source: [published] (Newson and Krumm 2009)
or [practice].
"""

from __future__ import annotations

from collections.abc import Hashable
from dataclasses import dataclass
from typing import Any

import numpy as np

#: Standard deviation of GPS noise, Newson and Krumm (2009) [published].
SIGMA_Z_M = 4.07
#: Farthest a planned waypoint may lie from a drivable edge (m) [practice].
MAX_SNAP_M = 60.0
#: Traces whose median point spacing is below this are matched, not joined (m) [practice].
DENSE_SPACING_M = 60.0
#: Traces whose median time step is at most this are matched, not joined (s) [practice].
DENSE_INTERVAL_S = 10.0
#: Extra driving allowed between consecutive fixes beyond their straight distance (m) [practice].
MAX_DETOUR_M = 200.0
#: Candidates of a fix farther than this many sigma_z beyond its nearest road (in quadrature)
#: are dropped: their emission is below exp(-18) of the nearest's [practice].
PRUNE_SIGMAS = 6.0
#: At most this many candidate geometries per fix, the nearest (both directions count once).
MAX_CANDIDATE_GEOMETRIES = 5
#: A step back along one edge of at most this many sigma_z is GPS jitter, not reversing: the
#: along-edge difference of two fixes has a standard deviation of sqrt(2) sigma_z, so 3 of
#: those cover 99.7 % of it [practice].
_HOLD_SIGMAS = 4.25
#: Default transition scale beta as a multiple of sigma_z [practice].
_BETA_PER_SIGMA = 0.5
#: Waypoint snapping keeps every edge within this of the nearest one and lets routing choose (m).
_TIE_M = 2.0
#: Median absolute deviation to standard deviation of a normal law (common practice).
_MAD_TO_SIGMA = 1.4826
_EPS = 1e-9
#: Graphs with more nodes than this run bounded Dijkstra on the part a route can reach.
_SUBGRAPH_MIN_NODES = 20_000
#: Grid cell of the candidate search (m), grown so that the grid has at most _MAX_CELLS cells.
_CELL_M = 50.0
_MAX_CELLS = 4_000_000
#: Dijkstra limits are rounded up to these steps, so that sources share runs.
_LIMIT_STEPS = np.concatenate([15.0 * 2.0 ** np.arange(12), [np.inf]])
#: Entries of one Dijkstra output block (sources x nodes), bounding memory.
_BLOCK_ENTRIES = 4_000_000
#: Routes are decoded in groups of about this many points, bounding memory.
_GROUP_POINTS = 60_000

Edge = tuple[Hashable, Hashable, Hashable]


@dataclass(frozen=True, eq=False)
class MatchedRoute:
    """Edges driven by one route, in order.

    Attributes
    ----------
    name, source
        The route's name and file.
    method
        ``"join"`` (waypoints joined by fastest paths) or ``"match"`` (HMM map matching).
    edges
        ``(u, v, key)`` of each edge driven, in driving order (an edge can appear twice).
    fractions
        Share of each edge's length driven, 0..1 (1 except usually at the two ends and at
        breaks).
    start_offset, end_offset
        Position (share of the edge from u) where driving starts on the first edge and ends
        on the last edge.
    length_m, time_s
        Sums of share x ``length`` and share x ``travel_time`` over the edges.
    piece_starts
        Indices into ``edges`` where a connected piece begins: ``(0,)`` unless the matcher
        broke the chain, in which case ``edges[i - 1]`` does not lead to ``edges[i]``.
    breaks
        Indices of the route points where the chain was restarted (no plausible route from
        the previous kept point).
    point_edge
        For each route point, the index into ``edges`` it was placed on, or -1 when the point
        was dropped (within 2 sigma_z of the previous kept fix, or no road within reach).
    point_offset
        For each route point, its position (share from u) on that edge, NaN when dropped.
    sigma_z, beta
        Emission and transition parameters used by the matcher (m), None for joins.
    """

    name: str
    source: str
    method: str
    edges: tuple[Edge, ...]
    fractions: np.ndarray
    start_offset: float
    end_offset: float
    length_m: float
    time_s: float
    piece_starts: tuple[int, ...]
    breaks: tuple[int, ...]
    point_edge: np.ndarray
    point_offset: np.ndarray
    sigma_z: float | None = None
    beta: float | None = None

    def __len__(self) -> int:
        """Return the number of edges."""
        return len(self.edges)

    def rows(self, index: Any) -> np.ndarray:
        """Return the row position of each driven edge in a network edge table's index.

        ``index`` is the ``(u, v, key)`` MultiIndex of the table (``net.edges.index``); an
        edge not in it gets -1 (the evidence and early-warning drives are looked up so).
        """
        import pandas as pd

        mi = pd.MultiIndex.from_tuples(list(self.edges), names=index.names)
        return np.asarray(index.get_indexer(mi))

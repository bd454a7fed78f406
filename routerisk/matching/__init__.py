"""Turn routes into driven edges: join planned waypoints, match recorded traces.

Build one :class:`RoadIndex` per road graph (an STRtree of the edge geometries, CSR matrices
of the graph weighted by travel time and by length, node id arrays and the WGS84 -> graph CRS
transformer) and pass it to the functions here:

- :func:`join_waypoints` snaps each planned waypoint to the nearest edge position (the middle of
  an edge is fine: the edge is split at the projection) and joins consecutive waypoints by the
  fastest path (travel time, Dijkstra on the CSR matrix);
- :func:`match_trace` matches a recorded, noisy trace with a hidden Markov model decoded by
  Viterbi, after Newson, P. and Krumm, J. (2009), "Hidden Markov map matching through noise and
  sparseness", ACM SIGSPATIAL GIS '09, pp. 336-343 [published];
- :func:`to_edges` picks one of the two per route (see :func:`is_dense_trace`).

Each has a ``*_many`` form taking a list of routes, which is much faster for many routes: the
work is done for all of them at once (one candidate search, one Dijkstra per distinct source
node, one Viterbi decoding). All return :class:`MatchedRoute`: the ordered edges
``(u, v, key)`` driven, the share of each edge driven (the first and last edges are usually
partial), and the total length and time.

Submodules
----------
- :mod:`~routerisk.matching.common`: tuning constants, the edge type and :class:`MatchedRoute`;
- :mod:`~routerisk.matching.index`: :class:`RoadIndex` (candidate search, bounded Dijkstra);
- :mod:`~routerisk.matching.decode`: the layered decoder (Viterbi as a shortest path through
  the layered graph of candidates) shared by joining and matching;
- :mod:`~routerisk.matching.join`: :func:`join_waypoints`, :func:`join_many`;
- :mod:`~routerisk.matching.hmm`: :func:`match_trace`, :func:`match_many`;
- :mod:`~routerisk.matching.choose`: :func:`is_dense_trace`, :func:`to_edges`,
  :func:`to_edges_many`.

Each submodule imports its siblings directly (``common`` <- ``index`` <- ``decode`` <-
``join`` / ``hmm`` <- ``choose``), never this package, so there is no import cycle. This file
only re-exports the public names, so ``matching.RoadIndex`` and ``from routerisk.matching
import match_trace`` keep working.
"""

from routerisk.matching.choose import is_dense_trace, to_edges, to_edges_many
from routerisk.matching.common import (
    DENSE_INTERVAL_S,
    DENSE_SPACING_M,
    MAX_DETOUR_M,
    MAX_SNAP_M,
    SIGMA_Z_M,
    MatchedRoute,
)
from routerisk.matching.hmm import match_many, match_trace
from routerisk.matching.index import RoadIndex
from routerisk.matching.join import join_many, join_waypoints

__all__ = [
    "DENSE_INTERVAL_S",
    "DENSE_SPACING_M",
    "MAX_DETOUR_M",
    "MAX_SNAP_M",
    "SIGMA_Z_M",
    "MatchedRoute",
    "RoadIndex",
    "is_dense_trace",
    "join_many",
    "join_waypoints",
    "match_many",
    "match_trace",
    "to_edges",
    "to_edges_many",
]

"""Lower-exposure alternatives to a planned route: the travel-time / risk trade-off.

The supported points of the bi-objective (time, risk) Pareto front are found exactly by the
dichotomic weighted-sum search (Aneja, Y.P. and Nair, K.P.K. (1979), "Bicriteria
transportation problem", Management Science 25(1):73-78): between two known points the weight
is set so both have equal weighted cost, and a new point is kept if it lies strictly below that
line. Diversity comes from a penalty method: the edges of chosen paths cost more in the next
searches, so later alternatives differ from earlier ones. Every shortest path is a Dijkstra run
of ``scipy.sparse.csgraph`` on arrays; networkx is not on the hot path.

The search runs on the part of the network that can lie on a path within the time bound: an
edge ``(u, v)`` of a leg from ``a`` to ``b`` is kept when the fastest time ``a -> u``, plus the
edge, plus the fastest time ``v -> b`` fits the leg's share of the bound (two Dijkstra runs
bounded by that time, one on the reversed network). No path within the bound is lost, and on a
city graph the kept part is a small ellipse around the plan. Only when nothing within the
bounds lowers the risk is the search repeated on a wider part (three times the plan's time) to
show the best candidate that breaks the fewest bounds.

The edge risk used during the search is evaluated at the time the vehicle is expected to reach
the edge (the fastest arrival from the start, plus the route's own earlier legs); every
candidate is then checked exactly edge by edge (entry time from its own cumulative travel
time), and a candidate that breaks a hard rule at the time it drives an edge is repaired by
closing that edge and searching again, never returned as rule-abiding. The chosen
alternatives are scored in full with :class:`routerisk.analysis.scoring.Scorer`.

Modules: :mod:`~routerisk.analysis.alternatives.search` (array Dijkstra and the front of one
leg), :mod:`~routerisk.analysis.alternatives.suggester` (the search over legs, repairs,
diversity), :mod:`~routerisk.analysis.alternatives.explain` (why nothing met the bounds, next
steps, rule-free departures) and :mod:`~routerisk.analysis.alternatives.result` (the objects
returned).
"""

from routerisk.analysis.alternatives.explain import RELAXED_TIME_FACTOR
from routerisk.analysis.alternatives.result import (
    HARD_RULES,
    Alternative,
    Suggestion,
    edges_frame,
)
from routerisk.analysis.alternatives.search import (
    EPS,
    Arcs,
    Leg,
    RouteGraph,
    front_by_brute_force,
)
from routerisk.analysis.alternatives.suggester import (
    MAX_REPAIRS,
    PENALTY,
    SHORTER_CAVEAT,
    Suggester,
    suggest_routes,
    via_nodes,
)

__all__ = [
    "EPS",
    "HARD_RULES",
    "MAX_REPAIRS",
    "PENALTY",
    "RELAXED_TIME_FACTOR",
    "SHORTER_CAVEAT",
    "Alternative",
    "Arcs",
    "Leg",
    "RouteGraph",
    "Suggester",
    "Suggestion",
    "edges_frame",
    "front_by_brute_force",
    "suggest_routes",
    "via_nodes",
]

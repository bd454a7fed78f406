"""Score routes at their departure times, and suggest lower-exposure alternatives."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from routerisk._params import parameters
from routerisk.api._common import Departure, check_share, departures
from routerisk.errors import OptionError
from routerisk.results import ScoreResult, SuggestResult

if TYPE_CHECKING:
    from routerisk.io.routes import PlannedRoute
    from routerisk.network.folder import Network


def score_routes(
    network: Network,
    routes: Sequence[PlannedRoute],
    *,
    departs: Sequence[Departure] | Departure = (),
) -> ScoreResult:
    """Score routes or recorded drives at their departure times.

    The same numbers as ``routerisk score``: each edge is scored at the time the vehicle
    reaches it; sparse waypoints are joined by the fastest path, dense traces map-matched.

    Parameters
    ----------
    network
        The tagged network.
    routes
        Routes from :func:`read_routes` (or :class:`routerisk.io.routes.PlannedRoute` objects).
    departs
        Departure times to compare (each route is scored at each); without any, each
        route's own ``depart``. Text or naive datetimes are read in the network's zone.

    Returns
    -------
    ScoreResult
        ``to_frame()`` ranks the routes; ``to_geodataframe()`` gives the scored segments.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> routes = rr.read_routes(rr.datasets.get_path("routes"), timezone=net.timezone)
    >>> scores = rr.score_routes(net, routes, departs=["2027-03-09T08:05"])
    >>> list(scores.to_frame().columns[:3])
    ['rank', 'name', 'depart']
    """
    from routerisk.analysis.scoring import score_routes as _score

    times = departures(network, departs)
    with parameters({"--depart": "departs"}):
        return ScoreResult(tuple(_score(network, list(routes), times)), network)


def suggest_routes(
    network: Network,
    routes: Sequence[PlannedRoute],
    *,
    departs: Sequence[Departure] | Departure = (),
    count: int = 3,
    max_extra_time: float = 0.25,
    max_extra_length: float | None = None,
    min_difference: float = 0.3,
    keep_every: int | None = None,
) -> SuggestResult:
    """Suggest lower-exposure alternatives within a time bound, keeping the via points.

    The same numbers as ``routerisk suggest``; the plan is scored as :func:`score_routes`
    scores it.

    Parameters
    ----------
    network
        The tagged network.
    routes
        Planned routes from :func:`read_routes`.
    departs
        Departure times (default: each route's own ``depart``).
    count
        Alternatives per route and departure (at least 1).
    max_extra_time
        Bound on extra travel time as a share of the plan's (0.25 = 25 %).
    max_extra_length
        Optional bound on extra length as a share of the plan's.
    min_difference
        Share of length by which alternatives differ from the plan and each other.
    keep_every
        Also keep every Nth waypoint as a required via point.

    Returns
    -------
    SuggestResult
        ``to_frame()`` lists plan and alternatives; ``to_map()`` draws them.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> routes = rr.read_routes(rr.datasets.get_path("routes"), timezone=net.timezone)
    >>> alts = rr.suggest_routes(net, routes[:1], departs="2027-03-09T08:05", count=2)
    >>> alts.to_frame()["option"].iloc[0]
    'planned'
    """
    from routerisk.analysis.alternatives import suggest_routes as _suggest

    if not isinstance(count, int) or count < 1:
        raise OptionError(f"must be a whole number of at least 1, got {count!r}", field="count")
    if keep_every is not None and (not isinstance(keep_every, int) or keep_every < 1):
        raise OptionError(
            f"must be a whole number of at least 1, got {keep_every!r}", field="keep_every"
        )
    check_share(max_extra_time, "max_extra_time")
    check_share(max_extra_length, "max_extra_length")
    check_share(min_difference, "min_difference")
    times = departures(network, departs)
    with parameters({"--depart": "departs"}):
        found = _suggest(
            network,
            list(routes),
            times,
            count=count,
            max_extra_time=max_extra_time,
            max_extra_length=max_extra_length,
            min_difference=min_difference,
            keep_every=keep_every,
        )
    return SuggestResult(tuple(found), network)

"""Review areas: exposure of every street block, hot spots and what-if scenarios."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from routerisk._params import parameters
from routerisk.errors import OptionError
from routerisk.results import Areas, ReviewResult

if TYPE_CHECKING:
    from routerisk.network.folder import Network


def review_areas(
    network: Network,
    areas: Areas,
    *,
    at: str | None = None,
    what_ifs: Sequence[Sequence[str]] = (),
    top: int = 10,
    high_from: str | None = None,
) -> ReviewResult:
    """Review proposed test areas: exposure, hot spots, closures under the hard rules.

    The same figures as ``routerisk review``.

    Parameters
    ----------
    network
        The tagged network (its profile is the one reported).
    areas
        Areas from :func:`read_areas`, read with ``crs=network.crs``.
    at
        A time of the week (``"wed 08:15"``) at which to report the connectivity too.
    what_ifs
        Scenarios, each a list of changes such as ``["rule:school surroundings at school
        hours=off"]`` or ``["weight:school=5", "weight:retail=0"]``.
    top
        Hot spots per area (>= 0).
    high_from
        Lowest band counted as high for clusters (default: the upper half of the bands).

    Returns
    -------
    ReviewResult
        ``to_frame()`` compares the areas; ``to_map()`` draws them.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> areas = rr.read_areas(rr.datasets.get_path("area"), crs=net.crs)
    >>> review = rr.review_areas(net, areas, at="wed 08:15")
    >>> list(review.to_frame()["area"])
    ['corvane-main', 'corvane-northwest']
    """
    import pyproj

    from routerisk.analysis import review

    if not isinstance(top, int) or top < 0:
        raise OptionError(f"must be a whole number >= 0, got {top!r}", field="top")
    if isinstance(what_ifs, str) or any(isinstance(w, str) for w in what_ifs):
        raise OptionError(
            "must be a list of scenarios, each a list of changes (e.g. [['weight:school=5']])",
            field="what_ifs",
        )
    if pyproj.CRS.from_user_input(areas.crs) != pyproj.CRS.from_user_input(network.crs):
        raise OptionError(
            "the areas are in another CRS than the network; read them with "
            "read_areas(path, crs=network.crs)",
            field="areas",
        )
    minute = None
    if at is not None:
        minute = review.parse_time(at, option="at")
    with parameters({"--high-from": "high_from", "--what-if": "what_ifs"}):
        high = review.high_bands_from(network.profile, high_from) if high_from else None
        scenarios = [review.parse_what_if(list(specs), network.profile) for specs in what_ifs]
        found = review.review_areas(
            network, list(areas), at=minute, what_ifs=scenarios, top=top, high_bands=high
        )
    return ReviewResult(found)

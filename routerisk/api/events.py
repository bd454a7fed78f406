"""Watch safety events: early warnings by street block and period."""

from __future__ import annotations

from typing import TYPE_CHECKING, Literal

from routerisk._params import parameters
from routerisk.errors import OptionError
from routerisk.results import Events, Routes, WatchResult

if TYPE_CHECKING:
    from routerisk.network.folder import Network


def watch_events(
    network: Network,
    events: Events,
    drives: Routes,
    *,
    fdr: float = 0.1,
    shift: float = 2.0,
    arl0: float = 500.0,
    group: Literal["street", "band", "hour"] = "street",
    unit: Literal["block", "segment"] = "block",
    test: Literal["auto", "negbin", "poisson"] = "auto",
    expected: Literal["modelled", "distance"] = "modelled",
    arl0_family: float | None = None,
) -> WatchResult:
    """Flag segments and groups where logged safety events run ahead of the miles driven.

    The same figures as ``routerisk watch``: events placed on the edges driven at their
    times, empirical Bayes rates, Benjamini-Hochberg flags and a Poisson CUSUM per group.

    Parameters
    ----------
    network
        The tagged network.
    events
        The event log from :func:`read_events`.
    drives
        The recorded drives (with times) from :func:`read_drives`.
    fdr
        False discovery rate for the segment flags, in (0, 1).
    shift
        Rate ratio the CUSUM is tuned to detect (> 1).
    arl0
        In-control average run length of the CUSUM, in days (> 1).
    group
        CUSUM groups: ``"street"``, ``"band"`` or ``"hour"`` (of the week).
    unit
        Unit of discovery: ``"block"`` (both directions of a street block, merged between
        intersections) or ``"segment"`` (each directed edge).
    test
        P-values: ``"auto"`` (negative binomial when the counts are over-dispersed),
        ``"negbin"`` or ``"poisson"``.
    expected
        Expected counts by ``"modelled"`` exposure or by ``"distance"`` driven only.
    arl0_family
        In-control run length of the whole family of CUSUM charts, in days (optional).

    Returns
    -------
    WatchResult
        ``to_frame()`` lists the driven segments; ``to_map()`` draws the flagged ones.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> events = rr.read_events(rr.datasets.get_path("events"), timezone=net.timezone)
    >>> drives = rr.read_drives(rr.datasets.get_path("drives"), timezone=net.timezone)
    >>> rr.watch_events(net, events, drives).to_dict()["events_matched"] > 0
    True
    """
    from routerisk.analysis import watch

    with parameters({"--fdr": "fdr", "--drives": "drives", "--arl0-family": "arl0_family"}):
        watch.check_settings(
            q=fdr,
            shift=shift,
            arl0=arl0,
            arl0_family=arl0_family,
            group=group,
            unit=unit,
            test=test,
            expected=expected,
        )
        if not len(drives):
            raise OptionError("holds no drive", field="drives")
        matched = watch.match_drives(network, list(drives))
        found = watch.watch_matched(
            network,
            events.events,
            events.rejected,
            matched,
            q=fdr,
            shift=shift,
            arl0=arl0,
            arl0_family=arl0_family,
            group=group,
            unit=unit,
            test=test,
            expected=expected,
        )
    return WatchResult(found, network)

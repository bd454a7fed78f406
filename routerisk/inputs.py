"""Reading the inputs of the top-level functions: routes, drives, events, areas, runs.

Each reader is a thin wrapper over the reader the commands use and returns an object of
:mod:`routerisk.results`; the names are re-exported by :mod:`routerisk.api` and
:mod:`routerisk`.
"""

from __future__ import annotations

from datetime import tzinfo
from pathlib import Path
from typing import TYPE_CHECKING

from routerisk._params import parameters
from routerisk.results import Areas, Events, Routes, Runs

if TYPE_CHECKING:
    import pyproj

__all__ = ["read_routes", "read_drives", "read_events", "read_areas", "read_runs", "TimeZone"]

#: A time zone: an IANA name such as ``"Etc/GMT+3"`` or a tzinfo (``net.timezone``).
TimeZone = str | tzinfo


def read_routes(path: str | Path, *, timezone: TimeZone | None = None) -> Routes:
    """Read the routes of a GeoJSON, GPX or CSV file.

    Parameters
    ----------
    path
        GeoJSON lines (``name``, optional ``depart`` and ``required``), GPX tracks and routes,
        or CSV ``route,lat,lon[,time][,required]``.
    timezone
        The zone of times written without an offset; pass the network's ``net.timezone``.
        Without it such times are an error.

    Returns
    -------
    Routes
        A sequence of :class:`routerisk.io.routes.PlannedRoute`, in file order.

    Examples
    --------
    >>> import routerisk as rr
    >>> routes = rr.read_routes(rr.datasets.get_path("routes"), timezone="Etc/GMT+3")
    >>> len(routes) > 0
    True
    """
    from routerisk.io import routes

    return Routes(routes.read_routes(path, default_tz=timezone))


def read_drives(folder: str | Path, *, timezone: TimeZone | None = None) -> Routes:
    """Read every recorded drive (GPX, GeoJSON or CSV with times) in a folder.

    Parameters
    ----------
    folder
        The drives folder; its ``.gpx``, ``.geojson`` and ``.csv`` files are read in name
        order.
    timezone
        The zone of times written without an offset (pass ``net.timezone``).

    Returns
    -------
    Routes
        The drives, named by their route name; their ``source`` is the file.

    Examples
    --------
    >>> import routerisk as rr
    >>> drives = rr.read_drives(rr.datasets.get_path("drives"), timezone="Etc/GMT+3")
    >>> all(d.times is not None for d in drives)
    True
    """
    from routerisk.io import routes
    from routerisk.io.drives import drive_files

    with parameters({"--drives": "folder"}):
        files = drive_files(folder)
    return Routes([r for f in files for r in routes.read_routes(f, default_tz=timezone)])


def read_events(path: str | Path, *, timezone: TimeZone | None = None) -> Events:
    """Read an event log (CSV ``time,lat,lon,type[,vehicle,severity]`` or GeoJSON points).

    Parameters
    ----------
    path
        The event log.
    timezone
        The zone of times written without an offset (pass ``net.timezone``); without it
        such rows are rejected.

    Returns
    -------
    Events
        The accepted events and the rejected records with their reasons.

    Examples
    --------
    >>> import routerisk as rr
    >>> events = rr.read_events(rr.datasets.get_path("events"), timezone="Etc/GMT+3")
    >>> len(events) > 0
    True
    """
    from routerisk.io.events import read_events as _read

    good, bad = _read(path, tz=timezone)
    return Events(good, bad, str(path))


def read_areas(path: str | Path, *, crs: str | int | pyproj.CRS) -> Areas:
    """Read the polygons of a proposed test area file (GeoJSON or GeoPackage).

    Parameters
    ----------
    path
        Polygon or MultiPolygon features in any CRS; the ``name`` property names each area.
    crs
        The CRS to project to: pass the network's ``net.crs``.

    Returns
    -------
    Areas
        The areas in file order.

    Examples
    --------
    >>> import routerisk as rr
    >>> areas = rr.read_areas(rr.datasets.get_path("area"), crs="EPSG:32624")
    >>> [a.name for a in areas]
    ['corvane-main', 'corvane-northwest']
    """
    import pyproj

    from routerisk.io.areas import read_areas as _read

    target = pyproj.CRS.from_user_input(crs)
    return Areas(_read(path, crs=target), target)


def read_runs(path: str | Path) -> Runs:
    """Read the runs of a test day (YAML or CSV) for :func:`plan_day`.

    Parameters
    ----------
    path
        The runs file; route files it names are resolved against its folder.

    Returns
    -------
    Runs
        The validated runs, in file order.

    Examples
    --------
    >>> import routerisk as rr
    >>> runs = rr.read_runs(rr.datasets.get_path("runs"))
    >>> len(runs) > 0
    True
    """
    from routerisk.analysis.planning import read_runs as _read

    return Runs(_read(path))

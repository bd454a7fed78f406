"""Build a tagged road network from an OpenStreetMap file, or load a saved network folder."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from routerisk._params import parameters
from routerisk.api._common import profile_of

if TYPE_CHECKING:
    from routerisk.network.folder import Network
    from routerisk.profile import Profile


def build_network(
    source: str | Path,
    *,
    profile: Profile | str | Path | None = None,
    timezone: str | None = None,
    largest_component: bool = True,
) -> Network:
    """Build a tagged road network from an OpenStreetMap file, offline.

    The same as ``routerisk build SOURCE`` (without writing the folder; save it with
    :func:`routerisk.network.folder.save_network`).

    Parameters
    ----------
    source
        An ``.osm``, ``.osm.bz2``, ``.osm.gz`` or ``.osm.pbf`` file.
    profile
        The exposure profile, or a YAML/TOML file of one (default: the bundled profile).
    timezone
        The area's IANA time zone (default: looked up offline from the extract's location).
    largest_component
        Keep only the largest strongly connected part.

    Returns
    -------
    Network
        Edges, nodes, sources and crossings (GeoDataFrames in the local UTM zone) and the
        profile; ``to_geodataframe()`` gives the edges, ``to_map()`` the exposure map.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> net.summary()["edges"] > 0
    True
    """
    from routerisk.io.timezones import check_timezone
    from routerisk.network import folder as network

    with parameters({"--timezone": "timezone"}):
        zone = None if timezone is None else check_timezone(timezone)
        return network.build_network(
            source, profile=profile_of(profile), timezone=zone, largest_component=largest_component
        )


def load_network(
    folder: str | Path,
    *,
    profile: Profile | str | Path | None = None,
    overlay: str | Path | None = None,
) -> Network:
    """Load a network folder written by ``routerisk build``.

    Parameters
    ----------
    folder
        The network folder (``network.gpkg``, ``meta.json``, ``profile.yaml``).
    profile
        Re-tag the network with this profile (or profile file); default: its own.
    overlay
        An overlay file from ``routerisk watch --out`` (extra weight or closures).

    Returns
    -------
    Network
        The tagged network, as every command uses it.

    Examples
    --------
    >>> import routerisk as rr
    >>> from routerisk.network.folder import save_network
    >>> built = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> folder = save_network(built, "corvane-net")  # what routerisk build --out writes
    >>> rr.load_network(folder).summary() == built.summary()
    True
    """
    from routerisk.network.folder import load_network as _load

    net = _load(folder, profile=profile_of(profile))
    if overlay is not None:
        from routerisk.network.overlay import apply_overlay

        with parameters():
            net = apply_overlay(net, overlay)
    return net

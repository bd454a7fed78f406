"""Argument helpers shared by the sub-commands (parsing only, no logic).

Import-light: the library modules are imported inside the helpers that use them, so that
``--help`` never loads geopandas and friends.
"""

from __future__ import annotations

import argparse
import contextlib
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from routerisk.errors import OptionError

if TYPE_CHECKING:
    from routerisk.network.folder import Network
    from routerisk.profile import Profile


def add_network(parser: argparse.ArgumentParser) -> None:
    """Add ``--network DIR`` and ``--profile FILE``."""
    parser.add_argument(
        "--network",
        required=True,
        type=Path,
        metavar="DIR",
        help="network folder written by 'routerisk build'",
    )
    add_profile(parser, "profile to score with (default: the one the network was built with)")
    parser.add_argument(
        "--overlay",
        type=Path,
        metavar="FILE",
        help="overlay from 'routerisk watch' (extra weight or closures)",
    )


def add_profile(parser: argparse.ArgumentParser, text: str) -> None:
    """Add ``--profile FILE``."""
    parser.add_argument("--profile", type=Path, metavar="FILE", help=text)


def profile_of(args: argparse.Namespace) -> Profile | None:
    """Return the profile named by ``--profile`` or None."""
    if not getattr(args, "profile", None):
        return None
    from routerisk.profile import load_profile

    return load_profile(args.profile)


def network_of(args: argparse.Namespace) -> Network:
    """Load ``--network`` (re-tagged with ``--profile``, with ``--overlay`` applied)."""
    from routerisk.network.folder import load_network

    net = load_network(args.network, profile=profile_of(args))
    if getattr(args, "overlay", None):
        from routerisk.network.overlay import apply_overlay

        net = apply_overlay(net, args.overlay)
    return net


def add_cluster(parser: argparse.ArgumentParser, work: str) -> None:
    """Add ``--workers``, ``--scheduler`` and ``--tile-m`` (the work named by ``work``)."""
    parser.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help=f"{work} on a local Dask cluster of N worker processes, tile by "
        "tile (needs the 'scale' extra: dask, distributed, dask-geopandas)",
    )
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help=f"{work} on a running Dask scheduler instead, e.g. "
        "tcp://10.0.0.5:8786 (its workers need routerisk installed)",
    )
    parser.add_argument(
        "--tile-m",
        type=float,
        metavar="M",
        help="tile side in metres for --workers / --scheduler (default 3000; "
        "results do not depend on it)",
    )


@contextlib.contextmanager
def cluster_of(args: argparse.Namespace) -> Iterator[tuple[Any, float] | None]:
    """Yield (Dask client, tile side) when ``--workers`` or ``--scheduler`` is given, else None.

    The cluster is closed on leaving the block.
    """
    if args.workers is None and args.scheduler is None:
        if args.tile_m is not None:
            raise OptionError("--tile-m needs --workers or --scheduler", field="--tile-m")
        yield None
        return
    from routerisk import parallel as partition

    tile_m = partition.DEFAULT_TILE_M if args.tile_m is None else args.tile_m
    partition.check_tile(tile_m)
    with partition.cluster(workers=args.workers, scheduler=args.scheduler) as client:
        yield client, tile_m


def add_map_options(parser: argparse.ArgumentParser) -> None:
    """Add ``--tiles SOURCE`` and ``--bands fixed|quantiles`` (map options, both optional)."""
    parser.add_argument(
        "--tiles",
        metavar="SOURCE",
        help="optional background tiles: an .mbtiles file (embedded), a "
        "folder of z/x/y tiles, or a URL template with {z}/{x}/{y} "
        "(online); the maps never need them",
    )
    parser.add_argument(
        "--bands",
        choices=("fixed", "quantiles"),
        default="fixed",
        help="map classes: the profile's fixed bands (default; comparable "
        "across areas) or quantiles of the streets shown",
    )


def tiles_of(args: argparse.Namespace) -> Any:
    """Return the checked ``--tiles`` source (None without one); a bad one is an error."""
    if getattr(args, "tiles", None) is None:
        return None
    from routerisk.render.mapview import tile_source

    return tile_source(args.tiles)

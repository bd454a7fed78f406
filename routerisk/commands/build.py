"""``routerisk build``: OSM file -> tagged network folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from .. import network
from .._io import check_target, dumps_json
from ..errors import OptionError
from ._common import add_profile, profile_of

HELP = "build a tagged road network folder from an OpenStreetMap file (offline)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``build``."""
    parser.add_argument("source", nargs="?", type=Path, metavar="SOURCE",
                        help="OSM file: .osm, .osm.bz2, .osm.gz or .osm.pbf")
    parser.add_argument("--out", required=True, type=Path, metavar="DIR",
                        help="network folder to write")
    add_profile(parser, "exposure profile (default: the bundled default profile)")
    parser.add_argument("--timezone", default="UTC", metavar="TZ",
                        help="the area's local time zone, IANA name (default UTC)")
    parser.add_argument("--all-parts", action="store_true",
                        help="keep every connected part, not only the largest")
    parser.add_argument("--place", metavar="QUERY",
                        help="download the roads for a place name instead (needs internet)")
    parser.add_argument("--workers", type=int, metavar="N",
                        help="tag on a local Dask cluster of N worker processes, tile by tile "
                             "(needs the 'scale' extra: dask, distributed, dask-geopandas)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="tag on a running Dask scheduler instead, e.g. "
                             "tcp://10.0.0.5:8786 (its workers need routerisk installed)")
    parser.add_argument("--tile-m", type=float, metavar="M",
                        help="tile side in metres for --workers / --scheduler (default 3000; "
                             "results do not depend on it)")
    parser.add_argument("--force", action="store_true", help="replace an existing folder")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")


def run(args: argparse.Namespace) -> int:
    """Run ``build``."""
    if args.place:
        from ..loader import graph_from_place

        graph_from_place(args.place)  # raises OfflineError without a connection
        raise OptionError("--place builds are not supported yet beyond a connection check",
                          field="--place")
    if args.source is None:
        raise OptionError("give an OSM file (or --place)", field="SOURCE")
    check_target(args.out, force=args.force, folder=True)  # refuse before the work
    timezone = network.check_timezone(args.timezone)
    if args.workers is None and args.scheduler is None:
        if args.tile_m is not None:
            raise OptionError("--tile-m needs --workers or --scheduler", field="--tile-m")
        net = network.build_network(args.source, profile=profile_of(args), timezone=timezone,
                                    largest_component=not args.all_parts)
    else:
        from .. import partition

        tile_m = partition.DEFAULT_TILE_M if args.tile_m is None else args.tile_m
        partition.check_tile(tile_m)
        with partition.cluster(workers=args.workers, scheduler=args.scheduler) as client:
            net = network.build_network(
                args.source, profile=profile_of(args), timezone=timezone,
                largest_component=not args.all_parts,
                tagger=partition.tagger(client=client, tile_m=tile_m))
    network.save_network(net, args.out, force=args.force)
    summary = net.summary()
    if args.json:
        print(dumps_json(summary))
    else:
        srcs = ", ".join(f"{k} {v}" for k, v in summary["sources"].items())
        print(f"wrote {args.out}: {summary['nodes']} nodes, {summary['edges']} edges, "
              f"{summary['length_km']:.1f} km of directed road; sources: {srcs}; "
              f"profile {summary['profile']}")
    return 0

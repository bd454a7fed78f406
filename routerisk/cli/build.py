"""``routerisk build``: OSM file -> tagged network folder."""

from __future__ import annotations

import argparse
from pathlib import Path

from routerisk.cli.common import add_cluster, add_profile, cluster_of, profile_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json

HELP = "build a tagged road network folder from an OpenStreetMap file (offline)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``build``."""
    parser.add_argument(
        "source",
        nargs="?",
        type=Path,
        metavar="SOURCE",
        help="OSM file: .osm, .osm.bz2, .osm.gz or .osm.pbf",
    )
    parser.add_argument(
        "--out", required=True, type=Path, metavar="DIR", help="network folder to write"
    )
    add_profile(parser, "exposure profile (default: the bundled default profile)")
    parser.add_argument(
        "--timezone",
        default=None,
        metavar="TZ",
        help="the area's local time zone, IANA name (default: looked up "
        "offline from the extract's location)",
    )
    parser.add_argument(
        "--all-parts", action="store_true", help="keep every connected part, not only the largest"
    )
    parser.add_argument(
        "--place",
        metavar="QUERY",
        help="download the roads for a place name instead (needs internet)",
    )
    add_cluster(parser, "tag")
    parser.add_argument("--force", action="store_true", help="replace an existing folder")
    parser.add_argument("--json", action="store_true", help="print the summary as JSON")


def run(args: argparse.Namespace) -> int:
    """Run ``build``."""
    from routerisk.io.timezones import check_timezone, zone_label
    from routerisk.network import folder as network

    if args.place:
        from routerisk.network.loader import graph_from_place

        graph_from_place(args.place)  # raises OfflineError without a connection
        raise OptionError(
            "--place builds are not supported yet beyond a connection check", field="--place"
        )
    if args.source is None:
        raise OptionError("give an OSM file (or --place)", field="SOURCE")
    check_target(args.out, force=args.force, folder=True)  # refuse before the work
    timezone = None if args.timezone is None else check_timezone(args.timezone)
    with cluster_of(args) as tiles:
        tagger = None
        if tiles is not None:
            from routerisk import parallel as partition

            tagger = partition.tagger(client=tiles[0], tile_m=tiles[1])
        net = network.build_network(
            args.source,
            profile=profile_of(args),
            timezone=timezone,
            largest_component=not args.all_parts,
            tagger=tagger,
        )
    network.save_network(net, args.out, force=args.force)
    summary = net.summary()
    if args.json:
        print(dumps_json(summary))
    else:
        srcs = ", ".join(f"{k} {v}" for k, v in summary["sources"].items())
        print(
            f"wrote {args.out}: {summary['nodes']} nodes, {summary['edges']} edges, "
            f"{summary['length_km']:.1f} km of directed road; sources: {srcs}; "
            f"profile {summary['profile']}"
        )
        zone = net.meta["timezone"]
        how = "given" if net.meta["timezone_source"] == "given" else "looked up from the location"
        label = zone_label(zone)
        shown = zone if label == zone else f"{label} ({zone})"
        print(
            f"local time zone: {shown}, {how}; times without an offset are read in it "
            "(change with --timezone)"
        )
    return 0

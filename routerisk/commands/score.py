"""``routerisk score``: pedestrian-exposure risk of planned routes or recorded drives."""

from __future__ import annotations

import argparse
from pathlib import Path

from .. import CAUTION
from .._io import check_target, dumps_json, provenance
from ._common import add_network, network_of

HELP = "score planned routes or recorded drives (GeoJSON, GPX, CSV) at departure times"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``score``."""
    parser.add_argument("routes", type=Path, metavar="ROUTES",
                        help="route file: GeoJSON lines, GPX tracks/routes or CSV waypoints")
    add_network(parser)
    parser.add_argument("--depart", action="append", metavar="DATETIME",
                        help="departure, ISO 8601 (no offset = the area's local time); "
                             "repeat to compare times")
    parser.add_argument("--json", action="store_true", help="print the scores as JSON")
    parser.add_argument("--out", type=Path, metavar="DIR",
                        help="write routes.csv, segments.geojson and map.html here")
    parser.add_argument("--force", action="store_true", help="replace an existing --out")
    parser.add_argument("--tiles", metavar="URL", help="online background tiles (optional)")


def run(args: argparse.Namespace) -> int:
    """Run ``score``."""
    from .. import routes, scoring

    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    net = network_of(args)
    departs = [scoring.parse_depart(d, net.timezone) for d in (args.depart or [])]
    planned = routes.read_routes(args.routes, default_tz=net.timezone)
    scores = scoring.score_routes(net, planned, departs)
    if args.out:
        from ..routemap import write_outputs

        write_outputs(net, scores, args.out, force=args.force, tiles=args.tiles,
                               inputs={"routes": args.routes})
    if args.json:
        print(dumps_json({"routes": [s.to_dict() for s in scores],
                          "profile": net.profile.fingerprint,
                          "made_from": provenance(profile=net.profile.fingerprint, network=net,
                                                  inputs={"routes": args.routes})}))
    else:
        from ..routemap import ranking_table

        table = ranking_table(scores)
        cols = ["rank", "name", "depart", "length_km", "duration_min", "risk", "risk_per_km",
                "relative_index", "rule_breaks"]
        print(table[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
        for s in scores:
            for b in s.rule_breaks:
                print(f"rule broken: {s.name}: {b['rule']} on {b['street'] or 'unnamed street'}"
                      f" at {b['time']}")
        if args.out:
            print(f"wrote {args.out}")
        print(CAUTION)
    return 0

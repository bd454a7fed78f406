"""``routerisk score``: pedestrian-exposure risk of planned routes or recorded drives."""

from __future__ import annotations

import argparse
from pathlib import Path

from .. import CAUTION, routemap, routes, scoring
from .._io import check_target, dumps_json, provenance
from ..errors import OptionError
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
    parser.add_argument("--uncertainty", type=int, metavar="N",
                        help="also draw the weights N times (from the profile's uncertainty "
                             "block or weight ranges): median and 90 %% interval per route, "
                             "pairwise probability of lower risk, Sobol indices")
    parser.add_argument("--seed", type=int, metavar="S",
                        help="seed of the --uncertainty draws (default 1; recorded)")


def run(args: argparse.Namespace) -> int:
    """Run ``score``."""
    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    if args.seed is not None and args.uncertainty is None:
        raise OptionError("--seed needs --uncertainty", field="--seed")
    if args.uncertainty is not None:
        from .. import uncertainty

        uncertainty.check_draws(args.uncertainty)
    net = network_of(args)
    if args.uncertainty is not None:
        uncertainty.weight_law(net.profile)  # refuse a profile with nothing to draw
    departs = [scoring.parse_depart(d, net.timezone) for d in (args.depart or [])]
    planned = routes.read_routes(args.routes, default_tz=net.timezone)
    scores = scoring.score_routes(net, planned, departs)
    unc = None
    if args.uncertainty is not None:
        seed = uncertainty.DEFAULT_SEED if args.seed is None else args.seed
        unc = uncertainty.summarise(net, scores, args.uncertainty, seed,
                                    same_depart_only=bool(departs))
    if args.out:
        routemap.write_outputs(net, scores, args.out, force=args.force, tiles=args.tiles,
                               inputs={"routes": args.routes})
    if args.json:
        doc = {"routes": [s.to_dict() for s in scores], "profile": net.profile.fingerprint,
               "made_from": provenance(profile=net.profile.fingerprint, network=net,
                                       inputs={"routes": args.routes})}
        if unc is not None:
            doc["uncertainty"] = unc
            doc["made_from"]["uncertainty_seed"] = unc["seed"]
        print(dumps_json(doc))
    else:
        table = routemap.ranking_table(scores)
        cols = ["rank", "name", "depart", "length_km", "duration_min", "risk", "risk_per_km",
                "relative_index", "rule_breaks"]
        print(table[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
        for s in scores:
            for b in s.rule_breaks:
                print(f"rule broken: {s.name}: {b['rule']} on {b['street'] or 'unnamed street'}"
                      f" at {b['time']}")
        if unc is not None:
            print("\n".join(uncertainty.text_lines(unc)))
        if args.out:
            print(f"wrote {args.out}")
        print(CAUTION)
    return 0

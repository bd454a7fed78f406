"""``routerisk score``: pedestrian-exposure risk of planned routes or recorded drives."""

from __future__ import annotations

import argparse
import textwrap
from pathlib import Path

from routerisk import CAUTION
from routerisk.cli.common import add_map_options, add_network, network_of, tiles_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json, provenance

#: the text table's headings (short, so a row fits a terminal; meanings printed below)
SHORT_HEADINGS = [
    "rank",
    "route",
    "departs",
    "km",
    "min",
    "risk",
    "risk/km",
    "rel. index",
    "rule breaks",
]
#: what the text table's figures mean, printed under it
RISK_WORDS = (
    "risk: pedestrian exposure weighted by the chance a struck pedestrian dies at "
    "the street's speed, summed along the route (points, comparable only under the "
    "same profile); rank 1 = lowest total risk."
)

HELP = "score planned routes or recorded drives (GeoJSON, GPX, CSV) at departure times"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``score``."""
    parser.add_argument(
        "routes",
        type=Path,
        metavar="ROUTES",
        help="route file: GeoJSON lines, GPX tracks/routes or CSV waypoints",
    )
    add_network(parser)
    parser.add_argument(
        "--depart",
        action="append",
        metavar="DATETIME",
        help="departure, ISO 8601 (no offset = the area's local time); repeat to compare times",
    )
    parser.add_argument("--json", action="store_true", help="print the scores as JSON")
    parser.add_argument(
        "--out",
        type=Path,
        metavar="DIR",
        help="write routes.csv, segments.geojson and map.html here",
    )
    parser.add_argument("--force", action="store_true", help="replace an existing --out")
    add_map_options(parser)
    parser.add_argument(
        "--uncertainty",
        type=int,
        metavar="N",
        help="also draw the weights N times (from the profile's uncertainty "
        "block or weight ranges): median and 90 %% interval per route, "
        "pairwise probability of lower risk, Sobol indices",
    )
    parser.add_argument(
        "--seed",
        type=int,
        metavar="S",
        help="seed of the --uncertainty draws (default 1; recorded)",
    )


def run(args: argparse.Namespace) -> int:
    """Run ``score``."""
    from routerisk.analysis import scoring
    from routerisk.io import routes
    from routerisk.io.timezones import zone_label

    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    tiles = tiles_of(args)
    if args.seed is not None and args.uncertainty is None:
        raise OptionError("--seed needs --uncertainty", field="--seed")
    if args.uncertainty is not None:
        from routerisk.analysis import uncertainty

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
        unc = uncertainty.summarise(
            net, scores, args.uncertainty, seed, same_depart_only=bool(departs)
        )
    if args.out:
        from routerisk.render.routemap import write_outputs

        write_outputs(
            net,
            scores,
            args.out,
            force=args.force,
            tiles=tiles,
            bands=args.bands,
            inputs={"routes": args.routes},
            uncertainty=unc,
        )
    if args.json:
        doc = {
            "routes": [s.to_dict() for s in scores],
            "profile": net.profile.fingerprint,
            "model": scoring.model_note(net.profile),
            "relative_index_note": scoring.RELATIVE_INDEX_NOTE,
            "made_from": provenance(
                profile=net.profile.fingerprint, network=net, inputs={"routes": args.routes}
            ),
        }
        if unc is not None:
            doc["uncertainty"] = unc
            doc["made_from"]["uncertainty_seed"] = unc["seed"]
        print(dumps_json(doc))
    else:
        from routerisk.render import words
        from routerisk.render.routemap import ranking_table

        table = ranking_table(scores)
        cols = [
            "rank",
            "name",
            "depart",
            "length_km",
            "duration_min",
            "risk",
            "risk_per_km",
            "relative_index",
            "rule_breaks",
        ]
        shown = table[cols].copy()
        shown["depart"] = [words.when(t) for t in shown["depart"]]
        shown.columns = SHORT_HEADINGS
        print(shown.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
        print(textwrap.fill(f"times in {zone_label(net.timezone.key)}; " + RISK_WORDS, 100))
        blocks = words.Blocks(net.edges) if any(s.rule_breaks for s in scores) else None
        for s in scores:
            for b in s.rule_breaks:
                where = blocks.label(*b["edge"]) if blocks else b["street"]
                print(
                    f"rule broken: {s.name}: {b['rule']} on {where or 'unnamed street'}"
                    f" at {words.when(b['time'])}"
                )
        if unc is not None:
            print("\n".join(uncertainty.text_lines(unc)))
        if args.out:
            print(f"wrote {args.out}")
        print(f"{scoring.RELATIVE_INDEX_NOTE}.")
        print(f"{scoring.model_note(net.profile)}.")
        print(CAUTION)
    return 0

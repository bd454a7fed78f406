"""``routerisk suggest``: lower-exposure alternatives that keep what the test needs."""

from __future__ import annotations

import argparse
from pathlib import Path

from routerisk import CAUTION
from routerisk.cli.common import add_map_options, add_network, network_of, tiles_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json, provenance

HELP = "suggest lower-exposure alternatives to planned routes within a time bound"


_MAX_SHARE = 5.0  # a share above this is almost surely a percentage typed as such


def _share(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        v = float("nan")
    if not 0.0 <= v <= _MAX_SHARE:
        hint = (
            f"; it is a fraction: 0.25 means 25 % (did you mean {v / 100:g}?)"
            if _MAX_SHARE < v <= 1000
            else ""
        )
        raise argparse.ArgumentTypeError(
            f"must be a share between 0 and {_MAX_SHARE:g}, got {text!r}{hint}"
        )
    return v


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``suggest``."""
    parser.add_argument("routes", type=Path, metavar="ROUTES", help="planned route file")
    add_network(parser)
    parser.add_argument(
        "--depart",
        action="append",
        metavar="DATETIME",
        help="departure, ISO 8601 (no offset = area local time)",
    )
    parser.add_argument(
        "--max-extra-time",
        type=_share,
        default=0.25,
        metavar="SHARE",
        help="bound on extra travel time as a share of the plan's (0.25)",
    )
    parser.add_argument(
        "--max-extra-length",
        type=_share,
        default=None,
        metavar="SHARE",
        help="optional bound on extra length as a share of the plan's",
    )
    parser.add_argument(
        "--min-difference",
        type=_share,
        default=0.3,
        metavar="SHARE",
        help="share of length alternatives differ by (0.3)",
    )
    parser.add_argument("--count", type=int, default=3, help="alternatives per route (3)")
    parser.add_argument(
        "--keep-every",
        type=int,
        default=None,
        metavar="N",
        help="also keep every Nth waypoint as a required via point",
    )
    parser.add_argument("--map", type=Path, metavar="FILE", help="write the HTML map here")
    parser.add_argument("--force", action="store_true", help="replace an existing --map")
    add_map_options(parser)
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.add_argument(
        "--uncertainty",
        type=int,
        metavar="N",
        help="also draw the weights N times: each alternative's 90 %% "
        "interval and probability of being lower-risk than the plan",
    )
    parser.add_argument(
        "--seed",
        type=int,
        metavar="S",
        help="seed of the --uncertainty draws (default 1; recorded)",
    )


def run(args: argparse.Namespace) -> int:
    """Run ``suggest``."""
    from routerisk.analysis import scoring
    from routerisk.analysis.alternatives import suggest_routes
    from routerisk.io import routes
    from routerisk.io.timezones import zone_label

    if args.count < 1:
        raise OptionError("must be at least 1", field="--count")
    if args.keep_every is not None and args.keep_every < 1:
        raise OptionError("must be at least 1", field="--keep-every")
    if args.seed is not None and args.uncertainty is None:
        raise OptionError("--seed needs --uncertainty", field="--seed")
    if args.uncertainty is not None:
        from routerisk.analysis import uncertainty

        uncertainty.check_draws(args.uncertainty)
    if args.map:
        check_target(args.map, force=args.force, folder=False)  # before any work
    tiles = tiles_of(args)
    net = network_of(args)
    if args.uncertainty is not None:
        uncertainty.weight_law(net.profile)  # refuse a profile with nothing to draw
    departs = [scoring.parse_depart(d, net.timezone) for d in (args.depart or [])]
    planned = routes.read_routes(args.routes, default_tz=net.timezone)
    result = suggest_routes(
        net,
        planned,
        departs,
        count=args.count,
        max_extra_time=args.max_extra_time,
        max_extra_length=args.max_extra_length,
        min_difference=args.min_difference,
        keep_every=args.keep_every,
    )
    unc = None
    if args.uncertainty is not None:
        unc = uncertainty.versus_plan(
            net,
            result,
            args.uncertainty,
            uncertainty.DEFAULT_SEED if args.seed is None else args.seed,
        )
    if args.map:
        from routerisk.render import mapview, routemap

        mapview.save(
            routemap.suggestion_map(
                net,
                result,
                tiles=tiles,
                bands=args.bands,
                inputs={"routes": args.routes},
                uncertainty=unc,
            ),
            args.map,
            force=args.force,
        )
    if args.json:
        # the same record as score's JSON and the map: tool version, profile, input checksums
        doc = {
            "routes": [s.to_dict() for s in result],
            "profile": net.profile.fingerprint,
            "made_from": provenance(
                profile=net.profile.fingerprint, network=net, inputs={"routes": args.routes}
            ),
        }
        if unc is not None:
            doc["uncertainty"] = unc
            doc["made_from"]["uncertainty_seed"] = unc["seed"]
        print(dumps_json(doc))
        return 0
    from routerisk.render import words

    print(f"times in {zone_label(net.timezone.key)}")
    for k, s in enumerate(result):
        p = s.planned
        print(
            f"{s.name} at {words.when(p.depart)}: planned risk {p.risk:.3f}, "
            f"{p.duration_min:.1f} min, {len(p.rule_breaks)} rule break(s)"
        )
        for a in s.alternatives:
            print(
                f"  {a.label}: risk {a.score.risk:.3f} ({a.risk_change_pct:+.1f} %), "
                f"{a.score.duration_min:.1f} min ({a.time_change_pct:+.1f} %), "
                f"{len(a.score.rule_breaks)} rule break(s)"
            )
            if unc is not None:
                u = unc["routes"][k]["alternatives"][s.alternatives.index(a)]
                print(
                    f"    {int(unc['level'] * 100)} % interval {u['low']:.3f} - "
                    f"{u['high']:.3f}; lower-risk than the plan in "
                    f"{100 * u['p_lower_than_plan']:.1f} % of {unc['draws']} weight draws"
                )
            for c in a.caveats:
                print(f"    caveat: {c}")
        if s.note:
            print(f"  note: {s.note}")
        for r in s.reasons:
            print(f"  why: {r}")
        for r in s.next_steps:
            print(f"  next step: {r}")
    if unc is not None:
        print(
            f"weight draws: {unc['draws']} (seed {unc['seed']}) of "
            f"{', '.join(unc['weights_varied'])}"
        )
    if args.map:
        print(f"wrote {args.map}")
    print(CAUTION)
    return 0

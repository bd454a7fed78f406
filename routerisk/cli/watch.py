"""``routerisk watch``: segments and groups where logged events run ahead of the miles."""

from __future__ import annotations

import argparse
from pathlib import Path

from routerisk import CAUTION
from routerisk._cli_text import WATCH_EXPECTED, WATCH_GROUPS, WATCH_TESTS, WATCH_UNITS
from routerisk.cli.common import network_of
from routerisk.io.atomic import check_target, dumps_json, provenance

HELP = "flag segments and streets where logged safety events exceed what exposure explains"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``watch``."""
    parser.add_argument(
        "events",
        type=Path,
        metavar="EVENTS",
        help="event log: CSV time,lat,lon,type[,vehicle,severity] or GeoJSON",
    )
    parser.add_argument(
        "--drives",
        required=True,
        type=Path,
        metavar="DIR",
        help="folder of the recorded drives (GPX with times)",
    )
    parser.add_argument("--network", required=True, type=Path, metavar="DIR")
    parser.add_argument("--profile", type=Path, metavar="FILE")
    parser.add_argument(
        "--fdr", type=float, default=0.1, help="false discovery rate for segment flags (0.1)"
    )
    parser.add_argument(
        "--shift", type=float, default=2.0, help="rate ratio the CUSUM is tuned to detect (2.0)"
    )
    parser.add_argument(
        "--arl0",
        type=float,
        default=500.0,
        help="in-control average run length of each CUSUM chart alone, in days (500)",
    )
    parser.add_argument(
        "--arl0-family",
        type=float,
        metavar="DAYS",
        help="in-control run length of the whole family of charts, in days: "
        "each chart is designed at DAYS x the number of charts",
    )
    parser.add_argument(
        "--group",
        default="street",
        choices=WATCH_GROUPS,
        help="CUSUM groups: street, band or hour (of week)",
    )
    parser.add_argument(
        "--unit",
        default="block",
        choices=WATCH_UNITS,
        help="unit of discovery: block (both directions and the run between "
        "intersections) or segment (each direction); default block",
    )
    parser.add_argument(
        "--test",
        default="auto",
        choices=WATCH_TESTS,
        help="p-values: poisson, negbin (negative binomial prior predictive) "
        "or auto (negbin when over-dispersion is significant); auto",
    )
    parser.add_argument(
        "--expected",
        default="modelled",
        choices=WATCH_EXPECTED,
        help="expected counts from km weighted by modelled exposure, or from "
        "km alone (distance); both are computed and compared",
    )
    parser.add_argument(
        "--baseline-until",
        metavar="DATE",
        help="CUSUM in-control rate from the days up to DATE (YYYY-MM-DD); "
        "the charts watch the days after",
    )
    parser.add_argument(
        "--baseline-rate",
        type=float,
        metavar="RATE",
        help="CUSUM in-control rate, events per (weighted) km",
    )
    parser.add_argument(
        "--close",
        action="store_true",
        help="the overlay closes flagged segments (a hard rule) instead of only weighting them",
    )
    parser.add_argument("--json", action="store_true")
    parser.add_argument(
        "--out",
        type=Path,
        metavar="DIR",
        help="write overlay.yaml, segments.csv, map.html and report.html",
    )
    parser.add_argument("--force", action="store_true")


def run(args: argparse.Namespace) -> int:
    """Run ``watch``."""
    from routerisk.analysis import watch
    from routerisk.render.watch_report import write_outputs

    args.overlay = None
    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    net = network_of(args)
    result = watch.watch(
        net,
        args.events,
        args.drives,
        q=args.fdr,
        shift=args.shift,
        arl0=args.arl0,
        arl0_family=args.arl0_family,
        group=args.group,
        unit=args.unit,
        test=args.test,
        expected=args.expected,
        baseline_until=args.baseline_until,
        baseline_rate=args.baseline_rate,
    )
    if args.out:
        write_outputs(
            net,
            result,
            args.out,
            force=args.force,
            close=args.close,
            inputs={"events": args.events, "drives": args.drives},
        )
    if args.json:
        print(
            dumps_json(
                {
                    **result.to_dict(),
                    "made_from": provenance(
                        profile=net.profile.fingerprint,
                        network=net,
                        inputs={"events": args.events, "drives": args.drives},
                    ),
                }
            )
        )
        return 0
    flagged = result.segments[result.segments["flagged"]]
    print(
        f"{len(result.matched)} events matched to driven segments, "
        f"{len(result.rejected)} left out; {len(flagged)} {result.unit}(s) flagged at FDR "
        f"{result.q:g}"
    )
    for line in result.method_lines():
        print(f"  {line}")
    for r in flagged.itertuples(index=False):
        print(
            f"  {r.street or 'unnamed street'} ({result.unit} {r.unit}): {r.events} events "
            f"({r.events_forward} one way, {r.events_backward} the other) over {r.km:.2f} km, "
            f"{r.expected:.2f} expected, p = {r.p_value:.2g}"
        )
    for r in result.segments[result.segments["disagree"]].itertuples(index=False):
        print(
            f"  disagree: {r.street or 'unnamed street'} ({r.unit}) flagged "
            f"{'modelled' if r.flagged_modelled else 'distance'} only"
        )
    for r in result.alerts.itertuples(index=False):
        print(f"alert: {r.group} since {r.period} (CUSUM {r.statistic:.2f} > {r.h:.2f})")
    for r in result.rejected.itertuples(index=False):
        print(f"left out: event row {r.row}: {r.reason}")
    if args.out:
        print(f"wrote {args.out}")
    print(watch.LIMITS)
    print(CAUTION)
    return 0

"""``routerisk watch``: segments and groups where logged events run ahead of the miles."""

from __future__ import annotations

import argparse
from pathlib import Path

from .. import CAUTION
from .._cli_text import WATCH_GROUPS
from .._io import check_target, dumps_json, provenance
from ._common import network_of

HELP = "flag segments and streets where logged safety events exceed what exposure explains"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``watch``."""
    parser.add_argument("events", type=Path, metavar="EVENTS",
                        help="event log: CSV time,lat,lon,type[,vehicle,severity] or GeoJSON")
    parser.add_argument("--drives", required=True, type=Path, metavar="DIR",
                        help="folder of the recorded drives (GPX with times)")
    parser.add_argument("--network", required=True, type=Path, metavar="DIR")
    parser.add_argument("--profile", type=Path, metavar="FILE")
    parser.add_argument("--fdr", type=float, default=0.1,
                        help="false discovery rate for segment flags (0.1)")
    parser.add_argument("--shift", type=float, default=2.0,
                        help="rate ratio the CUSUM is tuned to detect (2.0)")
    parser.add_argument("--arl0", type=float, default=500.0,
                        help="in-control average run length of the CUSUM, in days (500)")
    parser.add_argument("--group", default="street", choices=WATCH_GROUPS,
                        help="CUSUM groups: street, band or hour (of week)")
    parser.add_argument("--no-exposure", action="store_true",
                        help="expected counts from km driven only, not weighted by exposure")
    parser.add_argument("--close", action="store_true",
                        help="the overlay closes flagged segments (a hard rule) instead of "
                             "only weighting them")
    parser.add_argument("--json", action="store_true")
    parser.add_argument("--out", type=Path, metavar="DIR",
                        help="write overlay.yaml, segments.csv, map.html and report.html")
    parser.add_argument("--force", action="store_true")


def run(args: argparse.Namespace) -> int:
    """Run ``watch``."""
    from .. import watch

    args.overlay = None
    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    net = network_of(args)
    result = watch.watch(net, args.events, args.drives, q=args.fdr, shift=args.shift,
                         arl0=args.arl0, group=args.group, use_exposure=not args.no_exposure)
    if args.out:
        watch.write_outputs(net, result, args.out, force=args.force, close=args.close,
                            inputs={"events": args.events, "drives": args.drives})
    if args.json:
        print(dumps_json({**result.to_dict(), "made_from": provenance(
            profile=net.profile.fingerprint, network=net,
            inputs={"events": args.events, "drives": args.drives})}))
        return 0
    flagged = result.segments[result.segments["flagged"]]
    print(f"{len(result.matched)} events matched to driven segments, "
          f"{len(result.rejected)} left out; {len(flagged)} segment(s) flagged at FDR "
          f"{result.q:g}")
    for r in flagged.itertuples(index=False):
        print(f"  {r.street or 'unnamed street'} ({r.u}-{r.v}): {r.events} events over "
              f"{r.km:.2f} km, {r.expected:.2f} expected, p = {r.p_value:.2g}")
    for r in result.alerts.itertuples(index=False):
        print(f"alert: {r.group} since {r.period} (CUSUM {r.statistic:.2f} > {r.h:.2f})")
    for r in result.rejected.itertuples(index=False):
        print(f"left out: event row {r.row}: {r.reason}")
    if args.out:
        print(f"wrote {args.out}")
    print(CAUTION)
    return 0

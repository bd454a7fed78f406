"""``routerisk evidence``: how many test miles a safety claim needs."""

from __future__ import annotations

import argparse
import sys

from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json, provenance

HELP = "plan how much test driving a statistical safety claim needs"

_JSON_NOTE = (
    "JSON keys miles_no_failure, years_no_failure, miles_power, years_power (exact Poisson "
    "test), miles_power_normal_approx, upper_rate, target_rate, shown, warnings; distances in "
    "the chosen unit (km with --units km), rates per --per."
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``routerisk evidence``."""
    parser.epilog = _JSON_NOTE
    add = parser.add_argument
    add("--benchmark", metavar="R", help="benchmark rate: R events per --per distance (required)")
    add("--per", metavar="N", help="distance the benchmark is stated per, e.g. 1e9 (required)")
    add(
        "--improvement",
        default="0.2",
        metavar="SHARE",
        help="share by which the fleet should beat the benchmark, in [0, 1) (default 0.2); "
        "with 0 only the no-event figures are defined",
    )
    add("--confidence", default="0.95", help="confidence level in (0, 1) (default 0.95)")
    add("--power", default="0.8", help="power in (0, 1) (default 0.8)")
    add("--units", default="mi", metavar="{mi,km}", help="distance unit (default mi)")
    add("--fleet", default="100", metavar="VEHICLES", help="vehicles in the fleet (default 100)")
    add(
        "--hours-per-day",
        default="24",
        metavar="H",
        help="hours a day each vehicle drives, in (0, 24] (default 24)",
    )
    add(
        "--speed",
        default="25",
        metavar="V",
        help="average speed in the chosen unit per hour (default 25)",
    )
    add("--observed", metavar="M", help="distance driven so far (with --events)")
    add("--events", metavar="K", help="events seen in the --observed distance")
    add(
        "--allowed-events",
        nargs="+",
        metavar="K",
        default=None,
        help="event counts of the 'k events allowed' table (default 0 1 2 3)",
    )
    add(
        "--drives",
        metavar="DIR",
        help="folder of recorded drives (GPX) to map-match and split by exposure (needs --network)",
    )
    add("--network", metavar="DIR", help="network folder for --drives")
    add(
        "--segments",
        metavar="FILE.geojson",
        help="scored segments (routerisk score --out) to split the evidence by exposure",
    )
    add("--chart", metavar="FILE.png", help="write a chart of the upper limit against distance")
    add("--force", action="store_true", help="replace an existing --chart")
    add("--json", action="store_true", help="print JSON instead of sentences")


def _number(text: str | None, option: str, *, required: bool = False) -> float | None:
    if text is None:
        if required:
            raise OptionError("is required", field=option)
        return None
    try:
        return float(text)
    except ValueError:
        raise OptionError(f"is not a number: {text!r}", field=option) from None


def _numbers(tokens: list[str], option: str) -> list[float]:
    out = []
    for token in tokens:
        for part in token.split(","):
            if part.strip():
                value = _number(part.strip(), option)
                assert value is not None
                out.append(value)
    return out


def run(args: argparse.Namespace) -> int:
    """Run ``routerisk evidence``; return the exit status."""
    from routerisk.analysis import evidence

    if args.chart is not None and not args.chart.lower().endswith(".png"):
        raise OptionError(f"must name a .png file, got {args.chart!r}", field="--chart")
    if args.chart is not None:
        check_target(args.chart, force=args.force, folder=False)  # before any work
    kwargs = {
        name: _number(getattr(args, name), option, required=True)
        for name, option in (
            ("benchmark", "--benchmark"),
            ("per", "--per"),
            ("improvement", "--improvement"),
            ("confidence", "--confidence"),
            ("power", "--power"),
            ("fleet", "--fleet"),
            ("hours_per_day", "--hours-per-day"),
            ("speed", "--speed"),
        )
    }
    inputs = evidence.EvidenceInputs(
        **kwargs,  # type: ignore[arg-type]
        units=args.units,
        observed=_number(args.observed, "--observed"),
        events=_number(args.events, "--events"),  # type: ignore[arg-type]
        allowed_events=tuple(  # type: ignore[arg-type]
            _numbers(args.allowed_events, "--allowed-events")
            if args.allowed_events is not None
            else (0, 1, 2, 3)
        ),
    )
    plan = evidence.plan_evidence(inputs)
    net = None
    if args.segments is not None and args.drives is not None:
        raise OptionError("give --segments or --drives, not both", field="--drives")
    if args.drives is not None:
        if args.network is None:
            raise OptionError("--drives needs --network DIR", field="--network")
        from routerisk.network.folder import load_network

        net = load_network(args.network)
        frame = evidence.segments_from_drives(net, args.drives)
        exposure = evidence.distance_by_exposure(
            frame, needed=plan.miles_no_failure, units=inputs.units, path=args.drives
        )
        plan = plan.with_exposure(exposure)
    if args.segments is not None:
        frame = evidence.read_segments(args.segments)
        exposure = evidence.distance_by_exposure(
            frame, needed=plan.miles_no_failure, units=inputs.units, path=args.segments
        )
        plan = plan.with_exposure(exposure)
    made_from = provenance(
        profile=net.profile.fingerprint if net is not None else None,
        network=net,
        inputs={"drives": args.drives, "segments": args.segments},
    )
    if args.chart is not None:
        evidence.plot_upper_limit(plan, args.chart, force=args.force, made_from=made_from)
    for warning in plan.warnings:
        print(f"routerisk: warning: {warning}", file=sys.stderr)
    if args.json:
        print(dumps_json({**plan.to_json(), "made_from": made_from}))
    else:
        lines = evidence.describe(plan)  # ends with the caution
        if args.chart is not None:
            lines.insert(-1, f"Chart written to {args.chart}.")
        print("\n".join(lines))
    return 0

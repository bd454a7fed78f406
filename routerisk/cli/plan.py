"""``routerisk plan``: schedule a day's test runs over vehicles and hours at least risk."""

from __future__ import annotations

import argparse
import datetime as dt
from pathlib import Path

from routerisk import CAUTION
from routerisk.cli.common import add_network, network_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json

HELP = "schedule a day's test runs over vehicles and start times at the least exposure"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``plan``."""
    parser.add_argument("runs", type=Path, metavar="RUNS", help="runs file (YAML or CSV)")
    add_network(parser)
    parser.add_argument("--date", required=True, metavar="YYYY-MM-DD", help="the day to plan")
    parser.add_argument(
        "--vehicles",
        type=int,
        default=2,
        help="number of vehicles, named av-1, av-2, ... (default 2)",
    )
    parser.add_argument(
        "--step",
        type=int,
        default=15,
        metavar="MIN",
        help="step between candidate start times (15 min)",
    )
    parser.add_argument(
        "--turnaround",
        type=float,
        default=15.0,
        metavar="MIN",
        help="gap a vehicle needs between runs (15 min)",
    )
    parser.add_argument("--json", action="store_true")
    parser.add_argument(
        "--out",
        type=Path,
        metavar="DIR",
        help="write schedule.csv, plan.json, map.html and report.html",
    )
    parser.add_argument("--force", action="store_true")


def run(args: argparse.Namespace) -> int:
    """Run ``plan``."""
    from routerisk.analysis import dayplan, planning

    try:
        date = dt.date.fromisoformat(args.date)
    except ValueError as exc:
        raise OptionError(f"not a date YYYY-MM-DD: {args.date!r}", field="--date") from exc
    if args.out:
        check_target(args.out, force=args.force, folder=True)  # before any work
    net = network_of(args)
    runs = planning.read_runs(args.runs)
    plan = dayplan.plan_day(
        net, runs, date, vehicles=args.vehicles, step_min=args.step, turnaround_min=args.turnaround
    )
    if args.out:
        dayplan.write_outputs(net, plan, args.out, force=args.force, inputs={"runs": args.runs})
    if args.json:
        print(dumps_json(plan.to_dict()))
        return 0
    d = plan.to_dict()
    print(
        f"plan for {d['date']}: status {d['status']}, total risk {d['total_risk']:.3f} "
        f"(naive plan {d['naive_total_risk']:.3f})"
    )
    for r in d["runs"]:
        print(
            f"  {r['vehicle']}  {r['start'][11:16]}-{r['end'][11:16]}  {r['name']}"
            f" #{r['repetition']}  {r['route']}  risk {r['risk']:.3f}"
        )
    for u in d["unplaced"]:
        print(f"  not placed: {u['name']} #{u['repetition']}: {u['reason']}")
    if args.out:
        print(f"wrote {args.out}")
    print(CAUTION)
    return 0

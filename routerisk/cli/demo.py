"""``routerisk demo``: run every stage on the invented sample town."""

from __future__ import annotations

import argparse
from pathlib import Path

HELP = "run every stage on the bundled invented town of Corvane and write maps and reports"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``demo``."""
    parser.add_argument(
        "--out",
        required=True,
        type=Path,
        metavar="DIR",
        help="folder to write the demo outputs into",
    )
    parser.add_argument("--force", action="store_true", help="replace an existing folder")


def run(args: argparse.Namespace) -> int:
    """Run ``demo``."""
    from routerisk.cli.demo_run import run_demo

    run_demo(args.out, force=args.force, echo=print)
    print(f"demo outputs in {args.out}")
    return 0

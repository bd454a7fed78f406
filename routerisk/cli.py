"""Command line of routerisk: parse, call the library, print. No logic lives here.

Each sub-command is a module in :mod:`routerisk.commands` with ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys
from collections.abc import Sequence

from . import __version__
from .errors import RouteriskError

COMMANDS = ("build", "score", "suggest", "review", "plan", "evidence", "watch", "demo")


def _available() -> dict[str, object]:
    mods = {}
    for name in COMMANDS:
        try:
            mods[name] = importlib.import_module(f"routerisk.commands.{name}")
        except ModuleNotFoundError as exc:  # a command not written yet is simply absent
            if exc.name != f"routerisk.commands.{name}":
                raise
    return mods


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser with every available sub-command."""
    parser = argparse.ArgumentParser(
        prog="routerisk",
        description="Pedestrian-exposure scoring of automated-vehicle test routes.",
    )
    parser.add_argument("--version", action="version", version=f"routerisk {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks and debug logs")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name, mod in _available().items():
        p = sub.add_parser(name, help=mod.HELP, description=mod.HELP)  # type: ignore[attr-defined]
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help=argparse.SUPPRESS)
        mod.add_arguments(p)  # type: ignore[attr-defined]
        p.set_defaults(_run=mod.run)  # type: ignore[attr-defined]
    return parser



def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (2 on bad input)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.DEBUG if args.debug else logging.WARNING,
        format="%(levelname)s %(name)s: %(message)s",
    )
    try:
        return int(args._run(args))
    except RouteriskError as exc:
        if args.debug:
            raise
        print(f"routerisk: error: {exc.one_line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("routerisk: interrupted; no output was left half-written", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

"""Command line of routerisk: parse, call the library, print. No logic lives here.

Each sub-command is a module in :mod:`routerisk.cli` with ``HELP`` (one line),
``add_arguments(parser)`` and ``run(args) -> int``; add its name to ``COMMANDS``. Every
command module is imported for ``--help``, so it imports the library (numpy, geopandas ...)
inside ``run``, not at the top (tests/test_startup.py checks).
"""

from __future__ import annotations

import argparse
import difflib
import importlib
import logging
import os
import sys
import typing
from collections.abc import Sequence

from routerisk import __version__
from routerisk.errors import RouteriskError

COMMANDS = (
    "build",
    "score",
    "suggest",
    "review",
    "plan",
    "evidence",
    "watch",
    "calibrate",
    "demo",
    "serve",
)


def _available() -> dict[str, object]:
    mods = {}
    for name in COMMANDS:
        try:
            mods[name] = importlib.import_module(f"routerisk.cli.{name}")
        except ModuleNotFoundError as exc:  # a command not written yet is simply absent
            if exc.name != f"routerisk.cli.{name}":
                raise
    return mods


class _UsageError(Exception):
    """A command line argparse refused (the message is one line)."""


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line (raised, turned into exit status 2).

    In a sub-command an unknown option is named first (with the nearest known one), before
    any other complaint such as a required option it may be a typo of.
    """

    _argv: list[str] = []

    def error(self, message: str) -> typing.NoReturn:
        """Raise the complaint as one line (an unknown option, if any, comes first)."""
        if self._subparsers is None:
            unknown = _unknown(self, self._argv)
            if unknown:
                message = unknown
        command = self.prog.partition(" ")[2]
        text = " ".join(message.split())
        if "did you mean" not in text:
            text += " (see --help)"
        raise _UsageError(f"{command}: {text}" if command else text)

    def parse_known_args(self, args=None, namespace=None):  # type: ignore[no-untyped-def]
        """Parse as argparse does; in a sub-command, anything left over is an error."""
        self._argv = list(sys.argv[1:] if args is None else args)
        ns, extra = super().parse_known_args(args, namespace)
        if extra and self._subparsers is None:
            self.error(_unknown(self, extra) or f"unexpected argument {extra[0]!r}")
        return ns, extra


def _unknown(parser: argparse.ArgumentParser, argv: list[str]) -> str | None:
    """Return "unknown option --x (did you mean --y?)" for the first unknown option, or None."""
    known = {o for a in parser._actions for o in a.option_strings}
    for token in argv:
        if token == "--":  # noqa: S105 - a command-line token, not a password
            break
        if not token.startswith("-") or len(token) == 1 or token[1] in "0123456789.":
            continue
        name = token.split("=", 1)[0]
        if name in known:
            continue
        shown = [
            o for a in parser._actions for o in a.option_strings if a.help != argparse.SUPPRESS
        ]
        close = difflib.get_close_matches(name, shown, n=1)
        return f"unknown option {name}" + (f" (did you mean {close[0]}?)" if close else "")
    return None


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser with every available sub-command."""
    parser = _Parser(
        prog="routerisk",
        description="Pedestrian-exposure scoring of automated-vehicle test routes.",
        allow_abbrev=False,
    )
    parser.add_argument("--version", action="version", version=f"routerisk {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks and debug logs")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name, mod in _available().items():
        p = sub.add_parser(
            name,
            help=mod.HELP,
            description=mod.HELP,  # type: ignore[attr-defined]
            allow_abbrev=False,
        )
        p.add_argument(
            "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
        )
        mod.add_arguments(p)  # type: ignore[attr-defined]
        p.set_defaults(_run=mod.run)  # type: ignore[attr-defined]
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (2 on bad input)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except _UsageError as exc:
        print(f"routerisk: error: {exc}", file=sys.stderr)
        return 2
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
    except BrokenPipeError:
        # the reader (e.g. `| head`) went away: stop quietly; Python would otherwise complain
        # again when it flushes stdout at exit
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

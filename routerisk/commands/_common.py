"""Argument helpers shared by the sub-commands (parsing only, no logic)."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..network import Network, load_network
from ..profile import Profile, load_profile


def add_network(parser: argparse.ArgumentParser) -> None:
    """Add ``--network DIR`` and ``--profile FILE``."""
    parser.add_argument("--network", required=True, type=Path, metavar="DIR",
                        help="network folder written by 'routerisk build'")
    add_profile(parser, "profile to score with (default: the one the network was built with)")
    parser.add_argument("--overlay", type=Path, metavar="FILE",
                        help="overlay from 'routerisk watch' (extra weight or closures)")


def add_profile(parser: argparse.ArgumentParser, text: str) -> None:
    """Add ``--profile FILE``."""
    parser.add_argument("--profile", type=Path, metavar="FILE", help=text)


def profile_of(args: argparse.Namespace) -> Profile | None:
    """Return the profile named by ``--profile`` or None."""
    return load_profile(args.profile) if getattr(args, "profile", None) else None


def network_of(args: argparse.Namespace) -> Network:
    """Load ``--network`` (re-tagged with ``--profile``, with ``--overlay`` applied)."""
    net = load_network(args.network, profile=profile_of(args))
    if getattr(args, "overlay", None):
        from ..overlay import apply_overlay

        net = apply_overlay(net, args.overlay)
    return net

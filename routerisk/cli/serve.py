"""``routerisk serve``: the local planning page (score, alternatives, review, plan, compare)."""

from __future__ import annotations

import argparse
from pathlib import Path

from routerisk.errors import OptionError

HELP = "open a local planning page: score, alternatives, area review, day plan, compare"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``serve``."""
    parser.add_argument(
        "--network", type=Path, metavar="DIR", help="network folder written by 'routerisk build'"
    )
    parser.add_argument(
        "--demo",
        action="store_true",
        help="serve the bundled sample town (built in memory) instead",
    )
    parser.add_argument(
        "--profile",
        type=Path,
        metavar="FILE",
        help="profile to score with (default: the one the network was built with)",
    )
    parser.add_argument(
        "--overlay",
        type=Path,
        metavar="FILE",
        help="overlay from 'routerisk watch' (extra weight or closures)",
    )
    parser.add_argument(
        "--host",
        default="127.0.0.1",
        help="address to listen on (default 127.0.0.1, this machine only)",
    )
    parser.add_argument("--port", type=int, default=8765, help="port (default 8765)")
    parser.add_argument(
        "--token",
        metavar="VALUE",
        help="secret every request must carry; needed with a non-loopback --host",
    )
    parser.add_argument("--open", action="store_true", help="open the page in the browser")
    parser.add_argument(
        "--max-upload-mb",
        type=float,
        default=5.0,
        metavar="MB",
        help="largest request or uploaded file (default 5 MB)",
    )
    parser.add_argument(
        "--workers",
        type=int,
        default=4,
        metavar="N",
        help="requests computed at once; others wait (default 4)",
    )


def run(args: argparse.Namespace) -> int:
    """Run ``serve``: check the options, load the network once, serve until interrupted."""
    from routerisk.serve.app import is_loopback

    if not is_loopback(args.host) and not args.token:
        raise OptionError(
            f"{args.host!r} is not a loopback address; listening there needs "
            "--token VALUE, which every request must then carry",
            field="--host",
        )
    if args.token is not None and len(args.token) < 8:
        raise OptionError("must be at least 8 characters", field="--token")
    if not 0 < args.port < 65536:
        raise OptionError(f"must be between 1 and 65535, got {args.port}", field="--port")
    if not 0 < args.max_upload_mb <= 1024:
        raise OptionError("must be more than 0 and at most 1024", field="--max-upload-mb")
    if args.workers < 1:
        raise OptionError("must be at least 1", field="--workers")
    if bool(args.network) == bool(args.demo):
        raise OptionError("give --network DIR or --demo (one of them)", field="--network")

    import uvicorn

    from routerisk import CAUTION
    from routerisk.cli.common import network_of
    from routerisk.serve.app import create_app

    if args.demo:
        from routerisk import datasets
        from routerisk.cli.demo_run import TOWN_TIMEZONE
        from routerisk.network.folder import build_network
        from routerisk.profile import load_profile

        net = build_network(
            datasets.get_path("town"),
            timezone=TOWN_TIMEZONE,
            profile=load_profile(args.profile) if args.profile else None,
        )
        if args.overlay:
            from routerisk.network.overlay import apply_overlay

            net = apply_overlay(net, args.overlay)
    else:
        net = network_of(args)
    loopback = is_loopback(args.host)
    app = create_app(
        net,
        token=args.token,
        loopback=loopback,
        max_upload=int(args.max_upload_mb * 1024 * 1024),
        workers=args.workers,
    )
    host = f"[{args.host}]" if ":" in args.host else args.host
    url = f"http://{host}:{args.port}/" + (f"?token={args.token}" if args.token else "")
    print(f"routerisk serve: {url} (Ctrl-C stops it)", flush=True)
    print(CAUTION, flush=True)
    if args.open:
        import threading
        import webbrowser

        threading.Timer(1.0, webbrowser.open, args=(url,)).start()
    uvicorn.run(app, host=args.host, port=args.port, log_level="warning")
    return 0

"""Save screenshots of each pane of ``routerisk serve`` on the sample town, for people to look at.

    python scripts/screenshot_serve.py [--out DIR]

Builds the sample town in memory, serves the planning page on a free loopback port, and
drives Debian's chromium through every pane (three clicked points, a school-hours departure,
alternatives, an area): route.png, week.png, area.png, plan.png and compare.png in DIR
(default ``serve_shots``). Run from a source checkout (it uses ``tests/_live_browser.py``).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

# the sample town's school run (lat, lon): start, a via point, end; and an area's corners
POINTS = [(38.503153, -38.0143295), (38.5067564, -38.0103172), (38.5090085, -38.0022927)]
CORNERS = [(38.5010, -38.0160), (38.5010, -38.0040), (38.5085, -38.0040), (38.5085, -38.0160)]
DEPART = ("2027-03-09", "08:10")  # a Tuesday at school arrival


def main() -> int:
    """Serve the sample town, walk through every pane, save the screenshots."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path("serve_shots"))
    args = ap.parse_args()
    from tests._browser import CHROMIUM
    from tests._live_browser import LiveServer, Session, walk_through

    if CHROMIUM is None:
        print("screenshot_serve: Debian's chromium is not installed", file=sys.stderr)
        return 2
    from routerisk import datasets
    from routerisk.cli.demo_run import TOWN_TIMEZONE
    from routerisk.network.folder import build_network
    from routerisk.serve.app import create_app

    net = build_network(datasets.get_path("town"), timezone=TOWN_TIMEZONE)
    args.out.mkdir(parents=True, exist_ok=True)
    with (
        tempfile.TemporaryDirectory() as dl,
        LiveServer(create_app(net)) as server,
        Session(downloads=Path(dl)) as s,
    ):
        seen = walk_through(
            s,
            server.url,
            points=POINTS,
            corners=CORNERS,
            depart=DEPART,
            plan_files=[datasets.get_path("runs"), datasets.get_path("routes")],
            plan_date=DEPART[0],
            shots=args.out,
        )
        problems = s.seen()
    print(
        f"score {seen['score']}, picked {seen['picked_label']} {seen['picked']}, "
        f"area {seen['area_km']} km; {seen.get('plan_summary')}; "
        f"console errors: {len(problems['errors'])}"
    )
    for name in ("route", "week", "area", "plan", "compare"):
        print(args.out / f"{name}.png")
    return 0


if __name__ == "__main__":
    sys.exit(main())

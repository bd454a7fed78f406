"""Save screenshots of the demo's HTML pages with headless Debian chromium, for people to look at.

    python scripts/screenshot_maps.py DEMO_OUT [--out DIR]

Every ``*.html`` under DEMO_OUT is opened offline (no network) and saved as a PNG beside
it (or under --out). Needs Debian's ``chromium`` package.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--no-first-run", "--disable-component-update", "--disable-sync", "--disable-quic",
         "--remote-allow-origins=*", "--virtual-time-budget=4000"]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("folder", type=Path)
    ap.add_argument("--out", type=Path)
    ap.add_argument("--size", default="1400,1000")
    args = ap.parse_args()
    chromium = shutil.which("chromium")
    if chromium is None:
        print("screenshot_maps: Debian's chromium is not installed", file=sys.stderr)
        return 2
    pages = sorted(args.folder.rglob("*.html"))
    for page in pages:
        target = (args.out / page.relative_to(args.folder)).with_suffix(".png") if args.out \
            else page.with_suffix(".png")
        target.parent.mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryDirectory() as profile:
            subprocess.run([chromium, *FLAGS, f"--user-data-dir={profile}",
                            f"--window-size={args.size}", f"--screenshot={target}",
                            page.resolve().as_uri()], check=True, capture_output=True,
                           timeout=120)
        print(f"{page} -> {target}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

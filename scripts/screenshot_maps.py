"""Save screenshots of the demo's HTML pages with headless Debian chromium, for people to look at.

    python scripts/screenshot_maps.py DEMO_OUT [--out DIR]

Every ``*.html`` under DEMO_OUT is opened offline (no network) and saved as a PNG beside
it (or under --out). A report's maps (embedded as ``<iframe srcdoc>``) are also saved on their
own, as ``NAME.map1.png`` and so on, so each map is seen whole. Needs Debian's ``chromium``.
"""

from __future__ import annotations

import argparse
import html
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--no-first-run",
    "--disable-component-update",
    "--disable-sync",
    "--disable-quic",
    "--remote-allow-origins=*",
    "--virtual-time-budget=4000",
]


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
    pages = sorted(p for p in args.folder.rglob("*.html") if ".map" not in p.suffixes)
    with tempfile.TemporaryDirectory() as work:
        for page in pages:
            target = (
                (args.out / page.relative_to(args.folder)).with_suffix(".png")
                if args.out
                else page.with_suffix(".png")
            )
            target.parent.mkdir(parents=True, exist_ok=True)
            _shot(chromium, page, target, args.size)
            maps = re.findall(r'<iframe[^>]*srcdoc="([^"]*)"', page.read_text(encoding="utf-8"))
            for i, doc in enumerate(maps, 1):
                inner = Path(work) / f"{page.stem}.map{i}.html"
                inner.write_text(html.unescape(doc), encoding="utf-8")
                _shot(chromium, inner, target.with_suffix(f".map{i}.png"), args.size)
    return 0


def _shot(chromium: str, page: Path, target: Path, size: str) -> None:
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run(
            [
                chromium,
                *FLAGS,
                f"--user-data-dir={profile}",
                f"--window-size={size}",
                f"--screenshot={target}",
                page.resolve().as_uri(),
            ],
            check=True,
            capture_output=True,
            timeout=120,
        )
    print(f"{page} -> {target}")


if __name__ == "__main__":
    sys.exit(main())

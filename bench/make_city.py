"""Write an invented city for benchmarks and scale tests.

Usage::

    python bench/make_city.py --edges 100000 --seed 1 --out city.osm.pbf

Prints the summary of :func:`routerisk.testing.synthetic.write_city` as JSON, with the seconds taken.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Sequence
from pathlib import Path

try:
    from routerisk.errors import RouteriskError
    from routerisk.io.atomic import dumps_json
    from routerisk.testing import synthetic
except ModuleNotFoundError:  # run from a checkout without installing the package
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from routerisk.errors import RouteriskError
    from routerisk.io.atomic import dumps_json
    from routerisk.testing import synthetic


def _centre(text: str) -> tuple[float, float]:
    try:
        lat, lon = (float(v) for v in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected LAT,LON, got {text!r}") from None
    return lat, lon


def main(argv: Sequence[str] | None = None) -> int:
    """Parse the options, write the city and print its summary."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--edges", type=int, required=True,
                        help="directed drivable edges after simplification (about)")  # fmt: skip
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--out", required=True, help="output file, .osm.pbf or .osm")
    parser.add_argument(
        "--centre", type=_centre, default=synthetic.DEFAULT_CENTRE, metavar="LAT,LON",
        help="city centre (default 30,-45: open ocean)",
    )  # fmt: skip
    parser.add_argument("--force", action="store_true", help="replace an existing file")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    try:
        summary = synthetic.write_city(
            args.out, edges=args.edges, seed=args.seed, centre=args.centre, force=args.force
        )
    except RouteriskError as exc:
        print(f"error: {exc.one_line()}", file=sys.stderr)
        return 2
    summary["seconds"] = round(time.perf_counter() - start, 2)
    print(dumps_json(summary))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Write an invented city for benchmarks and scale tests.

Usage::

    python bench/make_city.py --edges 100000 --seed 1 --out city.osm.pbf
    python bench/make_city.py --edges 100000 --seed 1 --copies 1000 --out copies.osm

``--copies N`` (.osm only) also copies N roads over their own nodes, three in four of them
one-way roads, the rest two-way roads copied as one-way (``routerisk.testing.copies``), as
duplicate digitising leaves them. Prints the summary of
:func:`routerisk.testing.synthetic.write_city` as JSON, with the seconds taken.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Sequence
from pathlib import Path

try:
    from routerisk.errors import RouteriskError
    from routerisk.io.atomic import check_target, dumps_json
    from routerisk.testing import copies, synthetic
except ModuleNotFoundError:  # run from a checkout without installing the package
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from routerisk.errors import RouteriskError
    from routerisk.io.atomic import check_target, dumps_json
    from routerisk.testing import copies, synthetic


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
    parser.add_argument("--copies", type=int, default=0,
                        help="roads to copy over their own nodes (.osm only; default 0)")  # fmt: skip
    args = parser.parse_args(argv)
    if args.copies and not args.out.endswith(".osm"):
        parser.error("--copies needs an .osm output")
    start = time.perf_counter()
    try:
        city = args.out
        if args.copies:  # the city goes next to out first: no copy-less file at out
            check_target(args.out, force=args.force, folder=False)
            city = f"{args.out}.city.osm"
        summary = synthetic.write_city(
            city, edges=args.edges, seed=args.seed, centre=args.centre, force=args.force
        )
        if args.copies:
            oneway = args.copies * 3 // 4
            summary["copies"] = copies.write_with_copies(
                city, args.out, oneway=oneway, twoway=args.copies - oneway, seed=args.seed
            )
            Path(city).unlink()
    except RouteriskError as exc:
        print(f"error: {exc.one_line()}", file=sys.stderr)
        return 2
    summary["seconds"] = round(time.perf_counter() - start, 2)
    print(dumps_json(summary))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

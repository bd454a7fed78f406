"""``routerisk calibrate``: fit a profile's scale and weights to pedestrian counts."""

from __future__ import annotations

import argparse
from pathlib import Path

from routerisk import CAUTION
from routerisk.cli.common import add_profile, network_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json, provenance

HELP = "fit the profile's category weights to pedestrian counts (with intervals)"

_EPILOG = (
    "COUNTS is a CSV with the columns site,lat,lon,start,end,count (one row per counting "
    "period; times ISO 8601, without offset read in the network's local time) or GeoJSON "
    "points with the same properties. Each site is placed on the nearest street; sites "
    "farther than --snap-limit metres are named and left out. The fit keeps radii, decays, "
    "time profiles and the street baseline as the profile gives them and fits the scale "
    "and the non-negative weights by maximum likelihood (Poisson, or negative binomial "
    "when the counts are over-dispersed). --out writes the calibrated profile with an "
    "'uncertainty' block (the weights' covariance from the observed information)."
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``calibrate``."""
    parser.epilog = _EPILOG
    parser.add_argument(
        "counts", type=Path, metavar="COUNTS", help="pedestrian counts: CSV or GeoJSON points"
    )
    parser.add_argument(
        "--network",
        required=True,
        type=Path,
        metavar="DIR",
        help="network folder written by 'routerisk build'",
    )
    add_profile(parser, "profile to calibrate (default: the one the network was built with)")
    parser.add_argument(
        "--out", required=True, type=Path, metavar="FILE.yaml", help="calibrated profile to write"
    )
    parser.add_argument(
        "--report",
        type=Path,
        metavar="FILE.html",
        help="write the self-contained HTML report of the fit",
    )
    parser.add_argument(
        "--snap-limit",
        type=float,
        default=30.0,
        metavar="M",
        help="farthest a site may be from a street, metres (default 30)",
    )
    parser.add_argument(
        "--model",
        default="auto",
        choices=("auto", "poisson", "negative-binomial"),
        help="count model (default auto: chosen by the dispersion test)",
    )
    parser.add_argument(
        "--fit-baseline",
        action="store_true",
        help="also fit the street baseline of each road class (the class "
        "with the most sites stays fixed and sets the units)",
    )
    parser.add_argument("--json", action="store_true", help="print the fit as JSON")
    parser.add_argument("--force", action="store_true", help="replace existing outputs")


def _table(summary: dict) -> list[str]:
    lines = [
        f"model: {summary['model']} (dispersion test p = "
        f"{summary['dispersion_test']['p_value']:.3g}, alpha {summary['alpha']:.4g}); "
        f"{summary['sites']} sites, {summary['periods']} periods; scale "
        f"{summary['scale']['estimate']:.4g} +/- {summary['scale']['se']:.3g} "
        f"{summary['scale']['unit']}",
        f"{'category':<14}{'judged':>9}{'fitted':>9}{'95% interval':>22}  sites near",
    ]
    for w in summary["weights"]:
        if not w["fitted"]:
            iv = "not fitted (no site)"
        elif w["at_zero"]:
            iv = "at zero (bound)"
        else:
            iv = f"{w['low']:.3f} - {w['high']:.3f}"
        lines.append(
            f"{w['category']:<14}{w['judged']:>9.3f}{w['weight']:>9.3f}{iv:>22}  {w['sites_near']}"
        )
    for b in summary["baselines"]:
        lines.append(
            f"baseline {b['road_class']}: "
            + (
                f"{b['judged']:.3f} -> {b['baseline']:.3f} ({b['low']:.3f} - {b['high']:.3f})"
                if b["fitted"]
                else f"{b['judged']:.3f} (held, sets the units)"
            )
        )
    cv = summary["cross_validation"]
    lines.append(
        f"leave-one-site-out RMSE: fitted {cv['rmse_fitted']:.2f}, judged "
        f"{cv['rmse_judged']:.2f} pedestrians per period; mean deviance fitted "
        f"{cv['deviance_fitted']:.3f}, judged {cv['deviance_judged']:.3f}"
    )
    for s in summary["left_out"]:
        lines.append(
            f"left out: site {s['site']} is {s['distance_m']:.1f} m from the nearest street"
        )
    lines += [f"note: {n}" for n in summary["notes"]]
    return lines


def run(args: argparse.Namespace) -> int:
    """Run ``calibrate``."""
    from routerisk.analysis import calibration

    check_target(args.out, force=args.force, folder=False)
    if args.report:
        check_target(args.report, force=args.force, folder=False)
        if Path(args.report).resolve() == Path(args.out).resolve():
            raise OptionError("--report and --out name the same file", field="--report")
    net = network_of(args)
    cal = calibration.calibrate(
        net, args.counts, limit_m=args.snap_limit, family=args.model, fit_baseline=args.fit_baseline
    )
    # everything is computed before anything is written
    made_from = provenance(
        profile=net.profile.fingerprint, network=net, inputs={"counts": args.counts}
    )
    doc_text = calibration.profile_text(cal, args.out, made_from)
    page = None
    if args.report:
        from routerisk.render import calibration_report

        page = calibration_report.render(cal, net, made_from)
    calibration.write_text(args.out, doc_text, force=args.force)
    if page is not None:
        from routerisk.render.report import write_report

        write_report(args.report, page, force=args.force)
    summary = cal.summary()
    if args.json:
        print(dumps_json({**summary, "made_from": made_from}))
    else:
        print("\n".join(_table(summary)))
        print(f"wrote {args.out}" + (f" and {args.report}" if args.report else ""))
        print(CAUTION)
    return 0

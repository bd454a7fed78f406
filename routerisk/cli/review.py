"""``routerisk review``: what share of a proposed test area runs past vulnerable pedestrians."""

from __future__ import annotations

import argparse
from typing import Any

from routerisk import CAUTION
from routerisk._cli_text import WHAT_IF_HELP
from routerisk.cli.common import add_cluster, add_map_options, cluster_of, tiles_of
from routerisk.errors import OptionError
from routerisk.io.atomic import check_target, dumps_json

HELP = "review proposed test areas: exposure, hot spots, closures under the hard rules"

_EPILOG = (
    "AREA is a GeoJSON or GeoPackage of Polygon/MultiPolygon features in any CRS (the file's "
    "CRS is read; GeoJSON without one is WGS 84); the 'name' property names each area "
    "(default area-<n>). Errors name the feature as features[i] (from 0). "
    "Lengths: network_km and every km figure count directed edges (each direction of a "
    "two-way street once); centreline_km counts each street once. Hours: 0 = Monday "
    "00:00-01:00 in the network's local time; an edge is closed in an hour if any rule "
    "covering it is in force at any minute of it. "
    f"What-if SPECs: {WHAT_IF_HELP} "
    "Example: --what-if 'rule:school surroundings at school hours=off' "
    "--what-if weight:school=5 weight:retail=0. "
    "Give AREA before --what-if (a --what-if takes every SPEC that follows it). "
    "--json prints {areas: [{name, network_km, km_by_band, km_in_influence, sources, "
    "closed_km_by_hour (168), allowed_parts, hotspots, ...}], profile: fingerprint, "
    "what_if: [...]}. --out DIR writes areas.csv, areas.json and report.html."
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``routerisk review``."""
    parser.epilog = _EPILOG
    add = parser.add_argument
    add("area", metavar="AREA", help="GeoJSON or GeoPackage of the area polygons")
    add(
        "--network",
        required=True,
        metavar="DIR",
        help="network folder written by 'routerisk build'",
    )
    add(
        "--profile",
        metavar="FILE",
        help="profile (YAML or TOML) to re-tag the network with (default: the network's own)",
    )
    add("--json", action="store_true", help="print the figures as JSON")
    add("--report", metavar="FILE.html", help="write the self-contained HTML report")
    add("--out", metavar="DIR", help="write areas.csv, areas.json and report.html to DIR")
    add("--force", action="store_true", help="replace existing outputs")
    add(
        "--what-if",
        dest="what_if",
        action="append",
        nargs="+",
        metavar="SPEC",
        help="a scenario of one or more SPECs (rule:<name>=off|on, weight:<category>=<n>); "
        "repeat for several scenarios",
    )
    add(
        "--at",
        metavar="'DAY HH:MM'",
        help="also report the connectivity at this time of the week, e.g. 'wed 08:15'",
    )
    add("--top", type=int, default=10, metavar="N", help="hot spots per area (default 10)")
    add(
        "--high-from",
        dest="high_from",
        metavar="BAND",
        help="lowest band counted as high for clusters (default: upper half of the bands)",
    )
    add_map_options(parser)
    add_cluster(parser, "clip the areas (and re-tag for --profile and weight what-ifs)")
    add(
        "--uncertainty",
        type=int,
        metavar="N",
        help="also draw the weights N times: 90 %% interval of the km in each band",
    )
    add(
        "--seed",
        type=int,
        metavar="S",
        help="seed of the --uncertainty draws (default 1; recorded)",
    )


def _text(doc: dict[str, Any]) -> list[str]:
    lines = []
    for a in doc["areas"]:
        lines.append(
            f"area {a['name']!r}: {a['network_km']:.3f} km of directed edges "
            f"({a['centreline_km']:.3f} km of street centreline)"
        )
        bands = ", ".join(f"{k} {v:.3f}" for k, v in a["km_by_band"].items())
        lines.append(f"  km by band: {bands}")
        infl = ", ".join(
            f"{k} {v:.3f} ({a['share_in_influence'][k]:.0%})"
            for k, v in a["km_in_influence"].items()
            if v > 0
        )
        lines.append(f"  km in influence: {infl or 'none'}")
        pk = a["closed_peak"]
        lines.append(
            f"  closed by the hard rules: at most {pk['km']:.3f} km ({pk['label']}); "
            f"{a['closed_km_hours']:.3f} km-hours a week"
        )
        c = a["connectivity"]["peak"]
        big = c["parts"][0] if c["parts"] else None
        lines.append(
            f"  open network at {c['label']}: {c['parts_count']} strongly connected "
            "part(s)" + (f", largest {big['km']:.3f} km / {big['nodes']} nodes" if big else "")
        )
        if "at" in a["connectivity"]:
            c = a["connectivity"]["at"]
            lines.append(
                f"  open network at {c['label']}: {c['parts_count']} part(s), "
                f"{c['closed_km']:.3f} km closed"
            )
        if a["hotspots"]:
            h = a["hotspots"][0]
            lines.append(
                f"  top hot spot: {h['street'] or '(unnamed)'} ({h['band']}, "
                f"exposure {h['exposure']:.3f})"
            )
    for s in doc["what_if"]:
        for x in s["areas"]:
            lines.append(
                f"what-if {s['label']!r}, area {x['name']!r}: closed km-hours "
                f"{x['closed_km_hours']:.3f} ({x['closed_km_hours_change']:+.3f}), "
                f"exposure {x['exposure']:.3f} ({x['exposure_change']:+.3f})"
            )
    return lines


def run(args: argparse.Namespace) -> int:
    """Run ``routerisk review``; return the exit status."""
    from routerisk.analysis import review
    from routerisk.network.folder import load_network
    from routerisk.profile import load_profile
    from routerisk.render.review_files import write_review

    if args.report is not None and not args.report.lower().endswith((".html", ".htm")):
        raise OptionError(f"must name an .html file, got {args.report!r}", field="--report")
    if args.top < 0:
        raise OptionError(f"must be >= 0, got {args.top}", field="--top")
    if args.seed is not None and args.uncertainty is None:
        raise OptionError("--seed needs --uncertainty", field="--seed")
    if args.uncertainty is not None:
        from routerisk.analysis import uncertainty

        uncertainty.check_draws(args.uncertainty)
    for target, folder in ((args.out, True), (args.report, False)):
        if target is not None:
            check_target(target, force=args.force, folder=folder)
    at = review.parse_time(args.at) if args.at is not None else None
    map_tiles = tiles_of(args)
    profile = load_profile(args.profile) if args.profile else None
    with cluster_of(args) as tiles:
        clipper = tagger = None
        if tiles is not None:
            from routerisk import parallel as partition

            clipper = partition.clipper(client=tiles[0], tile_m=tiles[1])
            tagger = partition.tagger(client=tiles[0], tile_m=tiles[1])
        net = load_network(args.network, profile=profile, tagger=tagger)
        if args.uncertainty is not None:
            uncertainty.weight_law(net.profile)  # refuse a profile with nothing to draw
        high = review.high_bands_from(net.profile, args.high_from) if args.high_from else None
        what_ifs = [review.parse_what_if(specs, net.profile) for specs in (args.what_if or [])]
        areas = review.read_areas(args.area, crs=net.crs)
        result = review.review_areas(
            net,
            areas,
            at=at,
            what_ifs=what_ifs,
            top=args.top,
            high_bands=high,
            clipper=clipper,
            tagger=tagger,
        )
    unc = None
    if args.uncertainty is not None:
        unc = uncertainty.area_bands(
            result, args.uncertainty, uncertainty.DEFAULT_SEED if args.seed is None else args.seed
        )
    written = write_review(
        result,
        out=args.out,
        report_path=args.report,
        force=args.force,
        tiles=map_tiles,
        bands=args.bands,
    )
    doc = result.to_json()
    if unc is not None:
        doc["uncertainty"] = unc
    if args.json:
        print(dumps_json(doc))
    else:
        for line in _text(doc):
            print(line)
        if unc is not None:
            print(
                f"weight draws: {unc['draws']} (seed {unc['seed']}) of "
                f"{', '.join(unc['weights_varied'])}"
            )
            for a in unc["areas"]:
                print(
                    f"  area {a['name']!r}, km by band (90 % interval): "
                    + ", ".join(
                        f"{k} {v['low']:.2f} - {v['high']:.2f}" for k, v in a["km_by_band"].items()
                    )
                )
        for path in written:
            print(f"wrote {path}")
        print(CAUTION)
    return 0

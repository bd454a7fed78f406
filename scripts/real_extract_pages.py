"""Write every page routerisk makes on a real extract, for screenshots (scripts/screenshot_maps.py).

    python scripts/real_extract_pages.py OUT [--pbf FILE]

The extract is pyogrio's bundled test file ``sample.osm.pbf`` (OpenStreetMap data, ODbL 1.0)
unless --pbf names another. Routes, an area, a runs file, drives and events are made from the
network's own streets (seeded, so the pages are the same each time), then the commands are run
as a user would: build, score, suggest, review, plan and watch, plus the network map.
"""

from __future__ import annotations

import argparse
import json
import sys
from importlib import resources
from pathlib import Path

import numpy as np


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--pbf", type=Path)
    ap.add_argument("--bands", default="fixed", choices=("fixed", "quantiles"))
    args = ap.parse_args()
    import geopandas as gpd
    from shapely.geometry import LineString, mapping

    from routerisk.cli import main as cli
    from routerisk.network.folder import load_network
    from routerisk.render import mapview

    pbf = args.pbf or Path(
        str(resources.files("pyogrio") / "tests" / "fixtures" / "sample.osm.pbf")
    )
    out = args.out
    out.mkdir(parents=True, exist_ok=True)
    net_dir = out / "network"
    run = [str(x) for x in ("build", pbf, "--out", net_dir, "--force")]
    if cli(run) != 0:
        return 1
    net = load_network(net_dir)
    mapview.save(mapview.network_map(net, bands=args.bands), out / "network_map.html")
    edges = net.edges.to_crs(4326)
    lines = list(edges.geometry)
    feats = []
    for i, (a, b) in enumerate([(0, len(lines) // 2), (3, len(lines) - 4), (7, len(lines) // 3)]):
        p = lines[a].interpolate(0.3, normalized=True)
        q = lines[b].interpolate(0.7, normalized=True)
        feats.append(
            {
                "type": "Feature",
                "properties": {"name": f"real-{i}", "depart": "2026-07-07T08:30"},
                "geometry": mapping(LineString([p, q])),
            }
        )
    routes = out / "routes.geojson"
    routes.write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    hull = edges.geometry.union_all().convex_hull
    area = out / "area.geojson"
    gpd.GeoDataFrame({"name": ["real-area"]}, geometry=[hull], crs=4326).to_file(
        area, driver="GeoJSON"
    )
    runs = out / "runs.yaml"
    runs.write_text(
        "runs:\n"
        + "".join(
            f"  - name: run-{i}\n    route: routes.geojson\n    route_name: real-{i}\n"
            f'    earliest: "07:00"\n    latest: "18:00"\n'
            for i in range(3)
        )
    )
    drives, events = _drives_and_events(net, out)
    common = ["--network", str(net_dir)]
    steps = [
        [
            "score",
            str(routes),
            *common,
            "--out",
            str(out / "scores"),
            "--force",
            "--bands",
            args.bands,
        ],
        [
            "suggest",
            str(routes),
            *common,
            "--map",
            str(out / "alternatives_map.html"),
            "--force",
            "--bands",
            args.bands,
        ],
        [
            "review",
            str(area),
            "--network",
            str(net_dir),
            "--out",
            str(out / "review"),
            "--force",
            "--bands",
            args.bands,
        ],
        [
            "plan",
            str(runs),
            *common,
            "--date",
            "2026-07-07",
            "--out",
            str(out / "day_plan"),
            "--force",
        ],
        [
            "watch",
            str(events),
            "--drives",
            str(drives),
            "--network",
            str(net_dir),
            "--out",
            str(out / "warnings"),
            "--force",
        ],
    ]
    for step in steps:
        code = cli(step)
        print(f"{step[0]}: exit {code}")
    return 0


def _drives_and_events(net, out: Path) -> tuple[Path, Path]:
    """Write seeded GPX drives along the network's streets and events on them."""
    rng = np.random.default_rng(7)
    edges = net.edges.to_crs(4326)
    d = out / "drives"
    d.mkdir(exist_ok=True)
    rows = ["time,lat,lon,type,vehicle"]
    for k in range(4):
        picks = rng.choice(len(edges), size=min(25, len(edges)), replace=False)
        pts = []
        for i in sorted(picks):
            pts.extend(edges.geometry.iloc[int(i)].coords)
        seg = "".join(
            f'<trkpt lat="{y:.7f}" lon="{x:.7f}"><time>2026-07-0{k + 1}T09:{j // 60:02d}:'
            f"{j % 60:02d}Z</time></trkpt>"
            for j, (x, y) in enumerate(pts[:3000])
        )
        (d / f"drive-{k}.gpx").write_text(
            '<?xml version="1.0"?><gpx version="1.1" creator="routerisk script" '
            f'xmlns="http://www.topografix.com/GPX/1/1"><trk><name>drive-{k}</name><trkseg>'
            f"{seg}</trkseg></trk></gpx>"
        )
        for j in rng.choice(len(pts[:3000]), size=min(6, len(pts)), replace=False):
            x, y = pts[int(j)]
            rows.append(
                f"2026-07-0{k + 1}T09:{int(j) // 60:02d}:{int(j) % 60:02d}Z,"
                f"{y:.7f},{x:.7f},near_miss,veh-{k}"
            )
    events = out / "events.csv"
    events.write_text("\n".join(rows) + "\n")
    return d, events


if __name__ == "__main__":
    sys.exit(main())

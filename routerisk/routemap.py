"""Outputs of route scoring: CSV table, GeoJSON of scored segments, HTML map with a chart."""

from __future__ import annotations

import base64
import io
import json
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
from shapely import LineString
from shapely.ops import substring

from . import CAUTION
from . import _aggplot as plt  # figures on the Agg canvas; the user's backend is left alone
from ._io import dumps_json, write_text_atomic
from ._lazy import lazy_module
from .scoring import RouteScore

mapview = lazy_module("routerisk.mapview")  # folium is imported when a map is drawn

RISK_COLOURS = ("#3f7f6e", "#9bb53f", "#c9a227", "#d2632b", "#8e2a58")


def png_data_uri(fig: Any) -> str:
    """Return a matplotlib figure as a deterministic PNG data URI, and close it."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96, metadata={"Software": None})
    plt.close(fig)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode()


def segment_geometries(net: Any, seg: pd.DataFrame) -> list[LineString]:
    """Return each scored segment's driven geometry (partial first/last edges cut)."""
    geoms = net.edges.geometry.to_numpy()[seg["_pos"].to_numpy()]
    full = net.edges["length"].to_numpy()[seg["_pos"].to_numpy()]
    out = []
    for i, g in enumerate(geoms):
        f = seg["length_m"].iat[i] / full[i] if full[i] else 1.0
        if f < 0.999:
            if i == 0:
                g = substring(g, 1 - f, 1, normalized=True)
            else:
                g = substring(g, 0, f, normalized=True)
        out.append(g)
    return out


def segments_gdf(net: Any, scores: list[RouteScore]) -> gpd.GeoDataFrame:
    """Return every scored segment of every route, in EPSG:4326 (lon, lat)."""
    frames = []
    for s in scores:
        seg = s.segments.copy()
        seg.insert(0, "route", s.name)
        seg.insert(1, "depart", s.depart.isoformat())
        frames.append(gpd.GeoDataFrame(seg, geometry=segment_geometries(net, s.segments),
                                       crs=net.crs))
    gdf = pd.concat(frames, ignore_index=True) if frames else gpd.GeoDataFrame()
    gdf = gpd.GeoDataFrame(gdf, geometry="geometry", crs=net.crs).to_crs("EPSG:4326")
    return gdf.drop(columns=["_pos"])


def _round_floats(df: pd.DataFrame, nd: int = 6) -> pd.DataFrame:
    out = df.copy()
    for c in out.columns:
        if out[c].dtype.kind == "f":
            out[c] = out[c].round(nd)
    return out


def geojson_text(gdf: gpd.GeoDataFrame, meta: dict[str, Any]) -> str:
    """Return a deterministic GeoJSON FeatureCollection (coordinates to 7 decimals)."""
    data = json.loads(_round_floats(gdf).to_json(drop_id=True, to_wgs84=False))
    for f in data["features"]:
        g = f["geometry"]
        if g and g["type"] == "LineString":
            g["coordinates"] = [[round(x, 7), round(y, 7)] for x, y in g["coordinates"]]
    data.pop("crs", None)
    data["routerisk"] = meta
    return dumps_json(data) + "\n"


def ranking_table(scores: list[RouteScore]) -> pd.DataFrame:
    """Return one row per (route, departure), ranked by risk (lowest first)."""
    rows = []
    for s in scores:
        d = s.to_dict()
        row = {k: d[k] for k in ("name", "depart", "length_km", "duration_min", "risk",
                                 "risk_per_km", "relative_index", "crossings", "left_turns")}
        row["rule_breaks"] = len(s.rule_breaks)
        for k, v in d["by_category"].items():
            row[f"risk_{k}"] = v
        rows.append(row)
    df = pd.DataFrame(rows)
    if len(df):
        df = df.sort_values(["risk", "name", "depart"], kind="stable").reset_index(drop=True)
        df.insert(0, "rank", np.arange(1, len(df) + 1))
    return df


def risk_chart(scores: list[RouteScore], title: str = "Risk along the route") -> str:
    """Return a PNG data URI of cumulative risk against distance for each route."""
    fig, ax = plt.subplots(figsize=(6.4, 3.2))
    for i, s in enumerate(scores):
        seg = s.segments
        d = np.concatenate([[0], np.cumsum(seg["length_m"].to_numpy()) / 1000.0])
        r = np.concatenate([[0], np.cumsum(seg["risk"].to_numpy())])
        ax.plot(d, r, color=mapview.ROUTE_COLOURS[i % len(mapview.ROUTE_COLOURS)],
                label=f"{s.name} @ {s.depart.strftime('%a %H:%M')}", lw=1.8)
    ax.set_xlabel("distance driven (km)")
    ax.set_ylabel("cumulative risk")
    ax.set_title(title, fontsize=10)
    ax.grid(alpha=0.3)
    if scores:
        ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    return png_data_uri(fig)


def _risk_colour(values: np.ndarray) -> list[str]:
    if len(values) == 0:
        return []
    per_km = values
    qs = np.quantile(per_km, [0.2, 0.4, 0.6, 0.8])
    idx = np.searchsorted(qs, per_km, side="right")
    return [RISK_COLOURS[i] for i in idx]


def route_map(net: Any, scores: list[RouteScore], *, tiles: str | None = None,
              title: str = "Scored test routes") -> Any:
    """Return a map of the routes coloured by segment risk per km, with chart and caution."""
    import folium

    gdf = segments_gdf(net, scores)
    ll = gdf.total_bounds if len(gdf) else net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), tiles=tiles)
    per_km = np.where(gdf["length_m"] > 0, gdf["risk"] / (gdf["length_m"] / 1000.0), 0.0)
    gdf["risk_per_km"] = per_km
    gdf["_c"] = _risk_colour(per_km)
    fields = {"route": "route", "street": "street", "time": "entered", "risk": "risk",
              "risk_per_km": "risk per km", "band": "exposure band"}
    for c in net.profile.categories:
        fields[f"part_{c.name}"] = f"part: {c.label.lower()}"
    fields["baseline"] = "part: street baseline"
    fields["crossing_part"] = "part: crossings"
    for s in scores:
        key = (gdf["route"] == s.name) & (gdf["depart"] == s.depart.isoformat())
        mapview.add_lines(m, gdf[key].to_crs(net.crs), name=f"{s.name} @ "
                          f"{s.depart.strftime('%a %d %b %H:%M')}", colour_col="_c",
                          fields=fields, weight=6)
    for s in scores:
        for b in s.rule_breaks:
            folium.CircleMarker([b["lat"], b["lon"]], radius=7, color="#000", weight=2,
                                fill=True, fill_color="#ffffff", fill_opacity=1,
                                tooltip=mapview.escape(f"rule broken: {b['rule']} on "
                                                       f"{b['street']} at {b['time']}")
                                ).add_to(m)
    folium.LayerControl(collapsed=False).add_to(m)
    rows = "".join(
        f"<tr><td>{mapview.escape(s.name)}</td><td>{s.depart.strftime('%a %H:%M')}</td>"
        f"<td>{s.risk:.3f}</td><td>{s.relative_index:.2f}</td><td>{len(s.rule_breaks)}</td>"
        "</tr>" for s in sorted(scores, key=lambda s: (s.risk, s.name)))
    table = ("<table style='font-size:11px'><tr><th>route</th><th>depart</th><th>risk</th>"
             f"<th>index</th><th>rule breaks</th></tr>{rows}</table>")
    chart = f'<img alt="risk along distance" style="width:300px" src="{risk_chart(scores)}">'
    items = list(zip(RISK_COLOURS, ["lowest fifth of segments by risk per km", "second fifth",
                                    "middle fifth", "fourth fifth", "highest fifth"],
                     strict=True))
    mapview.add_panel(m, mapview.legend_html(title, items, extra=table + chart +
                                             f"<div>profile {mapview.escape(net.profile.name)}"
                                             f" {mapview.escape(net.profile.fingerprint)}</div>"))
    return m


def output_meta(net: Any, inputs: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return what every output records: tool version, profile, input checksums, caution.

    ``inputs`` maps a role (``routes``) to an input file; the network's OSM source and
    overlay are always recorded.
    """
    from ._io import provenance

    prov = provenance(profile=net.profile.fingerprint, network=net, inputs=inputs)
    return {**prov, "network_source_sha256": net.meta.get("source_sha256"), "caution": CAUTION}


def write_outputs(net: Any, scores: list[RouteScore], out: str | Path, *,
                  force: bool = False, tiles: str | None = None,
                  inputs: dict[str, Any] | None = None) -> Path:
    """Write routes.csv, segments.geojson and map.html into ``out`` atomically.

    Each records the tool version, the profile fingerprint and the input checksums
    (``inputs``: role -> file, e.g. ``{"routes": path}``; the network source always).
    """
    from ._io import atomic_directory, provenance_line

    meta = output_meta(net, inputs)
    table = ranking_table(scores)
    csv_text = (f"# {CAUTION}\n# {provenance_line(meta)}\n"
                + _round_floats(table).to_csv(index=False, lineterminator="\n"))
    geojson = geojson_text(segments_gdf(net, scores), meta)
    m = route_map(net, scores, tiles=tiles)
    mapview.add_provenance(m, {k: meta[k] for k in ("routerisk_version", "profile", "inputs")})
    page = mapview.render(m)
    with atomic_directory(out, force=force) as tmp:
        (tmp / "routes.csv").write_text(csv_text, encoding="utf-8")
        (tmp / "segments.geojson").write_text(geojson, encoding="utf-8")
        (tmp / "map.html").write_text(page, encoding="utf-8")
    return Path(out)


__all__ = ["write_outputs", "route_map", "ranking_table", "segments_gdf", "write_text_atomic"]


def tradeoff_chart(s: Any) -> str:
    """Return a PNG data URI of travel time against risk: plan, alternatives, front."""
    fig, ax = plt.subplots(figsize=(4.6, 3.2))
    if s.front:
        ft, fr = zip(*sorted(s.front), strict=True)
        ax.plot(ft, fr, color="#999999", lw=1, ls="--", marker=".",
                label="trade-off points found")
    ax.scatter([s.planned.duration_min], [s.planned.risk], color="#1d1d1d", marker="s", s=50,
               label="planned", zorder=3)
    for i, a in enumerate(s.alternatives):
        ax.scatter([a.score.duration_min], [a.score.risk], s=50, zorder=3,
                   color=mapview.ROUTE_COLOURS[(i + 1) % len(mapview.ROUTE_COLOURS)],
                   label=a.label)
    ax.set_xlabel("travel time (min)")
    ax.set_ylabel("risk")
    ax.set_title(f"{s.name}: time against risk", fontsize=9)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return png_data_uri(fig)


def suggestion_map(net: Any, suggestions: list[Any], *, tiles: str | None = None,
                   inputs: dict[str, Any] | None = None) -> Any:
    """Return one offline map: network by band, sources, rule zones, plans and alternatives.

    Each planned route and each alternative is its own switchable layer; a side panel lists
    them with their risk and time changes and shows the trade-off chart of each route.
    """
    import folium

    prof = net.profile
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), tiles=tiles)
    edges = net.edges.reset_index()
    edges["_c"] = edges["band"].map(lambda b: mapview.band_colour(prof, b))
    edges["street"] = edges["name"].fillna("")
    mapview.add_lines(m, edges, name="network by exposure band", colour_col="_c",
                      fields={"street": "street", "band": "exposure band",
                              "exposure_km": "exposure per km"}, weight=2, opacity=0.6)
    mapview.add_sources(m, net.sources, labels={c.name: c.label for c in prof.categories})
    zone_cols = [f"rule_{i}" for i in range(len(prof.rules))]
    for i, rule in enumerate(prof.rules):
        part = edges[edges[zone_cols[i]]] if zone_cols[i] in edges else edges.iloc[0:0]
        if len(part):
            part = part.assign(_z="#5a4fcf", rule=rule.name)
            mapview.add_lines(m, part, name=f"hard-rule zone: {rule.name}", colour_col="_z",
                              fields={"street": "street", "rule": "rule"}, weight=7,
                              opacity=0.35)
    fields = {"street": "street", "time": "entered", "risk": "risk", "band": "exposure band"}
    for c in prof.categories:
        fields[f"part_{c.name}"] = f"part: {c.label.lower()}"
    fields["baseline"] = "part: street baseline"
    fields["crossing_part"] = "part: crossings"
    rows_html = []
    for s in suggestions:
        options = [("planned", s.planned, None)] + [(a.label, a.score, a) for a in
                                                     s.alternatives]
        for j, (label, score, alt) in enumerate(options):
            gdf = segments_gdf(net, [score]).to_crs(net.crs)
            gdf["_c"] = "#1d1d1d" if alt is None else mapview.ROUTE_COLOURS[
                (j) % len(mapview.ROUTE_COLOURS)]
            mapview.add_lines(m, gdf, name=f"{s.name}: {label}", colour_col="_c",
                              fields=fields, weight=5 if alt is None else 4,
                              opacity=0.9 if alt is None else 0.75)
            if alt is None:
                change = f"risk {score.risk:.3f}, {score.duration_min:.1f} min"
            else:
                change = (f"risk {alt.risk_change_pct:+.0f} %, time "
                          f"{alt.time_change_pct:+.0f} %, length "
                          f"{alt.length_change_pct:+.0f} %"
                          + ("" if alt.within_bounds else ", outside the bounds")
                          + (f", breaks {len(score.rule_breaks)} rule(s)"
                             if score.rule_breaks else ""))
            notes = "".join(f"<br><small><i>{mapview.escape(c)}</i></small>"
                            for c in (alt.caveats if alt is not None else []))
            rows_html.append(f"<li><b>{mapview.escape(s.name)}</b> {mapview.escape(label)}: "
                             f"{mapview.escape(change)}{notes}</li>")
        if s.note:
            rows_html.append(f"<li><i>{mapview.escape(s.name)}: {mapview.escape(s.note)}</i>"
                             "</li>")
    folium.LayerControl(collapsed=True).add_to(m)
    charts = "".join(f'<img alt="trade-off" style="width:290px" src="{tradeoff_chart(s)}">'
                     for s in suggestions)
    side = (f"<h4>Planned routes and alternatives</h4><ul style='padding-left:16px;margin:0'>"
            f"{''.join(rows_html)}</ul>{charts}")
    mapview.add_panel(m, f"<div style='max-height:80vh;overflow:auto'>{side}</div>",
                      position="topleft", dom_id="rr-side")
    items = [(mapview.band_colour(prof, b.name), f"network: {b.name}") for b in prof.bands]
    items.append(("#1d1d1d", "planned route"))
    items += [(mapview.ROUTE_COLOURS[i], f"alternative {i}") for i in range(1, 4)]
    mapview.add_panel(m, mapview.legend_html("Lower-exposure alternatives", items,
                                             extra=f"<div>profile {mapview.escape(prof.name)} "
                                                   f"{mapview.escape(prof.fingerprint)}</div>"))
    from ._io import provenance

    mapview.add_provenance(m, provenance(profile=prof.fingerprint, network=net, inputs=inputs))
    return m

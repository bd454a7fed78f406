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

from routerisk import CAUTION
from routerisk._lazy import lazy_module
from routerisk.analysis import scoring
from routerisk.analysis.scoring import RouteScore
from routerisk.io.atomic import dumps_json, write_text_atomic
from routerisk.render import (
    aggplot as plt,  # figures on the Agg canvas; the user's backend is left alone
)
from routerisk.render import route_charts

mapview = lazy_module("routerisk.render.mapview")  # folium is imported when a map is drawn


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
        frames.append(
            gpd.GeoDataFrame(seg, geometry=segment_geometries(net, s.segments), crs=net.crs)
        )
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
        row = {
            k: d[k]
            for k in (
                "name",
                "depart",
                "length_km",
                "duration_min",
                "risk",
                "risk_per_km",
                "relative_index",
                "crossings",
                "left_turns",
            )
        }
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
        dash = mapview.ROUTE_DASHES[i % len(mapview.ROUTE_DASHES)]
        style = {"dashes": [float(x) / 2 for x in dash.split()]} if dash else {}
        ax.plot(
            d,
            r,
            color="#333333",
            label=f"{s.name} @ {s.depart.strftime('%a %H:%M')}",
            lw=1.8,
            **style,
        )
    ax.set_xlabel("distance driven (km)")
    ax.set_ylabel("cumulative risk")
    ax.set_title(title, fontsize=10)
    ax.grid(alpha=0.3)
    if scores:
        ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    return png_data_uri(fig)


def _rule_zone_layer(m: Any, net: Any, edges: Any, *, bounds: Any = None) -> list[str]:
    """Draw each hard rule's zone as a wide translucent band; return the rules drawn."""
    prof = net.profile
    drawn = []
    for i, rule in enumerate(prof.rules):
        col = f"rule_{i}"
        part = edges[edges[col]] if col in edges else edges.iloc[0:0]
        if bounds is not None and len(part):
            w, s, e, n = bounds
            ll = part.to_crs("EPSG:4326")
            part = part[ll.intersects(_box(w, s, e, n)).to_numpy()]
        if len(part):
            part = part.assign(_z=mapview.RULE_ZONE_COLOUR, rule=rule.name)
            mapview.add_lines(
                m,
                part,
                name=f"hard-rule zone: {rule.name}",
                colour_col="_z",
                fields={"street": "street", "rule": "rule"},
                weight=12,
                opacity=0.28,
            )
            drawn.append(rule.name)
    return drawn


def _box(w: float, s: float, e: float, n: float) -> Any:
    import shapely

    dx, dy = (e - w) * 0.15 + 2e-4, (n - s) * 0.15 + 2e-4
    return shapely.box(w - dx, s - dy, e + dx, n + dy)


def rule_zone_items(drawn: list[str]) -> list[tuple[str | None, str]]:
    """Return the legend rows of the rule zones drawn."""
    return [
        (
            mapview.line_swatch(mapview.RULE_ZONE_COLOUR, width=10, opacity=0.28),
            f"hard-rule zone: {name}",
        )
        for name in drawn
    ]


def _add_rule_breaks(m: Any, scores: list[RouteScore]) -> int:
    import folium

    n = 0
    svg = mapview.rule_break_svg()
    layer = folium.FeatureGroup(name="rule breaks", show=True)
    for s in scores:
        for b in s.rule_breaks:
            folium.Marker(
                [round(b["lat"], 7), round(b["lon"], 7)],
                icon=folium.DivIcon(
                    html=svg, icon_size=(18, 18), icon_anchor=(9, 9), class_name="rr-symbol"
                ),
                tooltip=mapview.escape(f"rule broken: {b['rule']} on {b['street']} at {b['time']}"),
            ).add_to(layer)
            n += 1
    if n:
        layer.add_to(m)
    return n


def route_map(
    net: Any,
    scores: list[RouteScore],
    *,
    tiles: Any = None,
    title: str = "Scored test routes",
    bands: str = "fixed",
    uncertainty: dict[str, Any] | None = None,
) -> Any:
    """Return a map of the routes coloured by segment risk per km, with chart and caution.

    Segments are classed by their risk per km at the time driven: ``bands="fixed"`` uses
    the profile's band bounds (risk per km is exposure per km scaled by the hour's
    multipliers and the speed's severity, so the bounds keep their meaning), ``quantiles``
    cuts the segments shown by length. The legend prints the thresholds. Each route keeps
    its own dash pattern, so overlapping routes stay apart.
    """
    gdf = segments_gdf(net, scores)
    ll = gdf.total_bounds if len(gdf) else net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), tiles=tiles, context=net)
    per_km = (
        np.where(gdf["length_m"] > 0, gdf["risk"] / (gdf["length_m"] / 1000.0), 0.0)
        if len(gdf)
        else np.zeros(0)
    )
    gdf["risk_per_km"] = per_km
    cls = mapview.classes_for(
        net.profile,
        per_km,
        mode=bands,
        weights=gdf["length_m"] if len(gdf) else None,
        unit="risk per km",
    )
    gdf["_c"] = cls.colour_of(per_km)
    edges = net.edges.reset_index()
    edges["street"] = edges["name"].fillna("")
    zones = _rule_zone_layer(m, net, edges, bounds=tuple(ll))
    fields = {
        "route": "route",
        "street": "street",
        "time": "entered",
        "risk": "risk",
        "risk_per_km": "risk per km",
        "band": "exposure band",
    }
    for c in net.profile.categories:
        fields[f"part_{c.name}"] = f"part: {c.label.lower()}"
    fields["baseline"] = "part: street baseline"
    fields["crossing_part"] = "part: crossings"
    route_items: list[tuple[str | None, str]] = [(None, "routes (one dash pattern each)")]
    for i, s in enumerate(scores):
        key = (gdf["route"] == s.name) & (gdf["depart"] == s.depart.isoformat())
        dash = mapview.ROUTE_DASHES[i % len(mapview.ROUTE_DASHES)]
        label = f"{s.name} @ {s.depart.strftime('%a %d %b %H:%M')}"
        mapview.add_lines(
            m,
            gdf[key].to_crs(net.crs),
            name=label,
            colour_col="_c",
            fields=fields,
            weight=6,
            dash=dash,
            casing="#2b2b2b",
        )
        route_items.append(
            (mapview.line_swatch("#8a8a8a", dash=dash, width=5, casing="#2b2b2b"), label)
        )
    n_breaks = _add_rule_breaks(m, scores)
    mapview.layer_control(m)
    spread = route_charts.intervals(uncertainty)
    pct = "" if uncertainty is None else f"{round(100 * uncertainty['level'])} % interval"
    rows = "".join(
        f"<tr><td>{mapview.escape(s.name)}</td><td>{s.depart.strftime('%a %H:%M')}</td>"
        f"<td>{s.risk:.3f}</td>"
        + (
            f"<td>{spread[(s.name, s.depart.isoformat())]}</td>"
            if (s.name, s.depart.isoformat()) in spread
            else ("<td></td>" if spread else "")
        )
        + f"<td>{s.relative_index:.2f}</td><td>{len(s.rule_breaks)}</td></tr>"
        for s in sorted(scores, key=lambda s: (s.risk, s.name))
    )
    table = (
        "<table style='font-size:11px'><tr><th>route</th><th>depart</th><th>risk</th>"
        + (f"<th>{pct}</th>" if spread else "")
        + f"<th>index</th><th>rule breaks</th></tr>{rows}</table>"
    )
    chart = f'<img alt="risk along distance" style="width:300px" src="{risk_chart(scores)}">'
    if uncertainty is not None:
        chart += (
            f'<img alt="risk under weight draws" style="width:300px" '
            f'src="{route_charts.interval_chart(uncertainty)}">'
            + "".join(
                f"<div style='font-size:11px'>P({mapview.escape(p['a'])} lower than "
                f"{mapview.escape(p['b'])}) = {p['p_a_lower']:.2f}</div>"
                for p in uncertainty["pairs"][:6]
            )
        )
    legend = cls.legend_items()
    items: list[tuple[str | None, str]] = [
        (None, "segment risk per km at the time driven"),
        *legend[1:],
        (None, legend[0][1]),
        *route_items,
    ]
    items += rule_zone_items(zones)
    if n_breaks:
        items.append((mapview.rule_break_svg(14), "hard rule broken here"))
    mapview.add_panel(
        m,
        mapview.collapsible("Routes, risk and chart", table + chart),
        position="topleft",
        dom_id="rr-side",
    )
    mapview.add_panel(
        m,
        mapview.legend_html(
            title,
            items,
            extra=(
                f"<div>profile {mapview.escape(net.profile.name)}"
                f" {mapview.escape(net.profile.fingerprint)}</div>" + _model_html(net.profile)
            ),
            background=mapview.background_of(m),
        ),
    )
    return m


def _model_html(profile: Any) -> str:
    """Return the map panel's lines on the relative index and on what the risk models."""
    return "".join(
        f"<div style='font-size:10px'>{mapview.escape(t)}</div>"
        for t in (scoring.RELATIVE_INDEX_NOTE, scoring.model_note(profile))
    )


def output_meta(net: Any, inputs: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return what every output records: tool version, profile, input checksums, caution.

    ``inputs`` maps a role (``routes``) to an input file; the network's OSM source and
    overlay are always recorded.
    """
    from routerisk.io.atomic import provenance

    prov = provenance(profile=net.profile.fingerprint, network=net, inputs=inputs)
    return {
        **prov,
        "network_source_sha256": net.meta.get("source_sha256"),
        "caution": CAUTION,
        "model": scoring.model_note(net.profile),
        "relative_index_note": scoring.RELATIVE_INDEX_NOTE,
    }


def write_outputs(
    net: Any,
    scores: list[RouteScore],
    out: str | Path,
    *,
    force: bool = False,
    tiles: Any = None,
    inputs: dict[str, Any] | None = None,
    bands: str = "fixed",
    uncertainty: dict[str, Any] | None = None,
) -> Path:
    """Write routes.csv, segments.geojson and map.html into ``out`` atomically.

    With ``uncertainty`` (:func:`routerisk.analysis.uncertainty.summarise`) the table gains each
    route's median and interval under the weight draws, and the map its interval chart.

    Each records the tool version, the profile fingerprint and the input checksums
    (``inputs``: role -> file, e.g. ``{"routes": path}``; the network source always).
    """
    from routerisk.io.atomic import atomic_directory, provenance_line

    meta = output_meta(net, inputs)
    table = ranking_table(scores)
    extra = ""
    if uncertainty is not None:
        by = {(r["name"], r["depart"]): r for r in uncertainty["routes"]}
        keys = list(zip(table["name"], table["depart"], strict=True)) if len(table) else []
        for col in ("median", "low", "high"):
            table[f"risk_{col}"] = [by[k][col] if k in by else np.nan for k in keys]
        extra = (
            f"# risk_median, risk_low, risk_high: {uncertainty['draws']} weight draws "
            f"(seed {uncertainty['seed']}), {round(100 * uncertainty['level'])} % interval\n"
        )
    csv_text = (
        f"# {CAUTION}\n# {provenance_line(meta)}\n"
        f"# {scoring.RELATIVE_INDEX_NOTE}\n# {scoring.model_note(net.profile)}\n"
        + extra
        + _round_floats(table).to_csv(index=False, lineterminator="\n")
    )
    geojson = geojson_text(segments_gdf(net, scores), meta)
    m = route_map(net, scores, tiles=tiles, bands=bands, uncertainty=uncertainty)
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
        ax.plot(ft, fr, color="#999999", lw=1, ls="--", marker=".", label="trade-off points found")
    ax.scatter(
        [s.planned.duration_min],
        [s.planned.risk],
        color="#1d1d1d",
        marker="s",
        s=50,
        label="planned",
        zorder=3,
    )
    for i, a in enumerate(s.alternatives):
        ax.scatter(
            [a.score.duration_min],
            [a.score.risk],
            s=50,
            zorder=3,
            color=mapview.ROUTE_COLOURS[(i + 1) % len(mapview.ROUTE_COLOURS)],
            label=a.label,
        )
    ax.set_xlabel("travel time (min)")
    ax.set_ylabel("risk")
    ax.set_title(f"{s.name}: time against risk", fontsize=9)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return png_data_uri(fig)


def suggestion_map(
    net: Any,
    suggestions: list[Any],
    *,
    tiles: Any = None,
    inputs: dict[str, Any] | None = None,
    bands: str = "fixed",
    uncertainty: dict[str, Any] | None = None,
) -> Any:
    """Return one offline map: network by class, sources, rule zones, plans and alternatives.

    Each planned route and each alternative is its own switchable layer, drawn in its own
    colour and dash pattern (planned: solid ink); a side panel lists them with their risk
    and time changes and shows the trade-off chart of each route.
    """
    prof = net.profile
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), tiles=tiles, context=net)
    edges = net.edges.reset_index()
    cls = mapview.classes_for(prof, edges["exposure_km"], mode=bands, weights=edges["length"])
    edges["_c"] = cls.colour_of(edges["exposure_km"])
    edges["street"] = edges["name"].fillna("")
    mapview.add_lines(
        m,
        edges,
        name="network by exposure",
        colour_col="_c",
        fields={"street": "street", "band": "exposure band", "exposure_km": "exposure per km"},
        weight=2.5,
        opacity=0.8,
    )
    zones = _rule_zone_layer(m, net, edges)
    mapview.add_sources(m, net.sources, labels={c.name: c.label for c in prof.categories})
    fields = {"street": "street", "time": "entered", "risk": "risk", "band": "exposure band"}
    for c in prof.categories:
        fields[f"part_{c.name}"] = f"part: {c.label.lower()}"
    fields["baseline"] = "part: street baseline"
    fields["crossing_part"] = "part: crossings"
    rows_html = []
    n_alt = 0
    for i_s, s in enumerate(suggestions):
        options = [("planned", s.planned, None)] + [(a.label, a.score, a) for a in s.alternatives]
        drawn = None if uncertainty is None else uncertainty["routes"][i_s]
        for j, (label, score, alt) in enumerate(options):
            gdf = segments_gdf(net, [score]).to_crs(net.crs)
            k = j % len(mapview.ROUTE_COLOURS)
            gdf["_c"] = mapview.ROUTE_COLOURS[k]
            n_alt = max(n_alt, j)
            mapview.add_lines(
                m,
                gdf,
                name=f"{s.name}: {label}",
                colour_col="_c",
                fields=fields,
                weight=5 if alt is None else 4,
                opacity=0.95,
                dash=mapview.ROUTE_DASHES[k],
            )
            if alt is None:
                change = f"risk {score.risk:.3f}, {score.duration_min:.1f} min"
            else:
                change = (
                    f"risk {alt.risk_change_pct:+.0f} %, time "
                    f"{alt.time_change_pct:+.0f} %, length "
                    f"{alt.length_change_pct:+.0f} %"
                    + ("" if alt.within_bounds else ", outside the bounds")
                    + (f", breaks {len(score.rule_breaks)} rule(s)" if score.rule_breaks else "")
                )
            if drawn is not None:
                pct = round(100 * uncertainty["level"])  # type: ignore[index]
                if alt is None:
                    iv = drawn["plan"]
                    change += f"; {pct} % interval {iv['low']:.3f} - {iv['high']:.3f}"
                elif j - 1 < len(drawn["alternatives"]):
                    a_u = drawn["alternatives"][j - 1]
                    change += (
                        f"; {pct} % interval {a_u['low']:.3f} - {a_u['high']:.3f}, "
                        f"P(lower than the plan) {a_u['p_lower_than_plan']:.2f}"
                    )
            notes = "".join(
                f"<br><small><i>{mapview.escape(c)}</i></small>"
                for c in (alt.caveats if alt is not None else [])
            )
            sw = mapview.line_swatch(mapview.ROUTE_COLOURS[k], dash=mapview.ROUTE_DASHES[k])
            rows_html.append(
                f"<li>{sw} <b>{mapview.escape(s.name)}</b> "
                f"{mapview.escape(label)}: {mapview.escape(change)}{notes}</li>"
            )
        if s.note:
            rows_html.append(f"<li><i>{mapview.escape(s.name)}: {mapview.escape(s.note)}</i></li>")
        rows_html.extend(
            f"<li><small>{word}: {mapview.escape(t)}</small></li>"
            for word, texts in (("why", s.reasons), ("next step", s.next_steps))
            for t in texts
        )
    n_breaks = _add_rule_breaks(
        m, [x for s in suggestions for x in [s.planned, *(a.score for a in s.alternatives)]]
    )
    mapview.layer_control(m, collapsed=True)
    charts = "".join(
        f'<img alt="trade-off" style="width:290px" src="{tradeoff_chart(s)}">' for s in suggestions
    )
    side = (
        f"<ul style='padding-left:4px;margin:0;list-style:none'>{''.join(rows_html)}</ul>{charts}"
    )
    mapview.add_panel(
        m,
        mapview.collapsible("Planned routes and alternatives", side),
        position="topleft",
        dom_id="rr-side",
    )
    legend = cls.legend_items()
    items: list[tuple[str | None, str]] = [
        (None, "network exposure per km"),
        *legend[1:],
        (None, legend[0][1]),
        (None, "routes (colour and dash pattern)"),
    ]
    items.append((mapview.line_swatch(mapview.ROUTE_COLOURS[0]), "planned route"))
    items += [
        (
            mapview.line_swatch(mapview.ROUTE_COLOURS[i], dash=mapview.ROUTE_DASHES[i]),
            f"alternative {i}",
        )
        for i in range(1, max(n_alt, 1) + 1)
    ]
    items += rule_zone_items(zones)
    if n_breaks:
        items.append((mapview.rule_break_svg(14), "hard rule broken here"))
    items += mapview.category_items(prof, net.sources)
    mapview.add_panel(
        m,
        mapview.legend_html(
            "Lower-exposure alternatives",
            items,
            extra=f"<div>profile {mapview.escape(prof.name)} "
            f"{mapview.escape(prof.fingerprint)}</div>",
            background=mapview.background_of(m),
        ),
    )
    from routerisk.io.atomic import provenance

    mapview.add_provenance(m, provenance(profile=prof.fingerprint, network=net, inputs=inputs))
    return m

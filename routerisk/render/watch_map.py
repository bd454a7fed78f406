"""The map of the flagged units of ``routerisk watch`` (folium)."""

from __future__ import annotations

from typing import Any

from routerisk.analysis.watch.result import WatchResult


def flag_map(net: Any, result: WatchResult, prov: dict[str, Any] | None = None) -> Any:
    """Return the map of the network with the flagged units (folium), with provenance."""
    from routerisk.render import mapview

    seg = result.segments
    flagged = seg[seg["flagged"]]
    mem = result.members
    fl_mem = mem[mem["unit"].isin(set(flagged["unit"]))].merge(
        flagged[["unit", "eb_ratio"]], on="unit"
    )
    edges = net.edges.reset_index()
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = mapview.new_map(tuple(ll), context=net)
    edges["_c"] = "#b9b4a8"
    edges["street"] = edges["name"].fillna("")
    mapview.add_lines(m, edges, name="network", colour_col="_c", fields={}, weight=2, opacity=0.6)
    if len(flagged):
        fl = (
            fl_mem.drop(columns=["street"])
            .merge(
                flagged[["unit", "street", "events", "expected", "eb_rate", "p_value"]].rename(
                    columns={"events": "unit_events"}
                ),
                on="unit",
            )
            .merge(edges[["u", "v", "key", "geometry"]], on=["u", "v", "key"])
        )
        import geopandas as gpd

        fl = gpd.GeoDataFrame(fl, geometry="geometry", crs=net.crs)
        fl["_c"] = "#c1121f"
        mapview.add_lines(
            m,
            fl,
            name=f"flagged {result.unit}s",
            colour_col="_c",
            weight=7,
            fields={
                "street": "street",
                "unit": result.unit,
                "unit_events": "events (both directions)",
                "events": "events (this direction)",
                "expected": "expected",
                "eb_rate": "EB rate per km",
                "p_value": f"p-value ({result.test_used})",
            },
        )
    mapview.layer_control(m)
    mapview.add_panel(
        m,
        mapview.legend_html(
            "Early warnings",
            [
                (
                    "#c1121f",
                    f"{result.unit} flagged (FDR-controlled, {result.test_used} test, "
                    f"{result.expected} expected)",
                ),
                ("#b9b4a8", "network"),
            ],
            background=mapview.background_of(m),
        ),
    )
    if prov is not None:
        mapview.add_provenance(m, prov)
    return m

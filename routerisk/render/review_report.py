"""The self-contained HTML report of an area review (:func:`review_html`)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from routerisk._cli_text import WHAT_IF_HELP  # also shown by review --help
from routerisk.analysis.review.basis import HOUR_BASIS, INFLUENCE_BASIS, LENGTH_BASIS
from routerisk.analysis.review.result import Review, comparison_table
from routerisk.analysis.review.whatif import minute_label
from routerisk.profile import Profile
from routerisk.render import report
from routerisk.render.review_map import review_map


def _fmt_share(x: float | None) -> str:
    return "" if x is None else f"{100.0 * x:.1f} %"


def _area_section(review: Review, a: dict[str, Any], idx: int) -> str:
    prof = review.profile
    labels = {c.name: c.label for c in prof.categories}
    r = report
    parts = []
    parts.append(
        r.pairs_html(
            [
                ("area (km²)", a["area_km2"]),
                (
                    "network km (directed edges: both directions of two-way streets)",
                    a["network_km"],
                ),
                ("centreline km (each street once)", a["centreline_km"]),
                ("street edges in the area", a["edges"]),
                ("exposure (exposure per km x km, time multipliers 1)", a["exposure"]),
                ("exposure per km", a["exposure_per_km"]),
                ("crossings in the area", a["crossings"]),
                ("crossings per centreline km", a["crossings_per_km"]),
            ],
            caption="In figures",
        )
    )
    band_rows = [
        {
            "band": b.name,
            "from": b.lower,
            "km": a["km_by_band"][b.name],
            "centreline_km": a["centreline_km_by_band"][b.name],
            "share": _fmt_share(a["km_by_band"][b.name] / a["network_km"]),
        }
        for b in prof.bands
    ]
    parts.append(
        r.table_html(
            band_rows,
            [
                ("band", "exposure band"),
                ("from", "from (per km)"),
                ("km", "km (directed)"),
                ("centreline_km", "centreline km"),
                ("share", "share"),
            ],
            caption="Length by exposure band",
        )
    )
    from routerisk.render import mapview

    fig = r.bar_chart(
        [b.name for b in prof.bands],
        [a["km_by_band"][b.name] for b in prof.bands],
        title=f"{a['name']}: km by exposure band (directed)",
        xlabel="km",
        colours=[mapview.band_colour(prof, b.name) for b in prof.bands],
    )
    parts.append(r.figure_html(fig, alt=f"km by exposure band in {a['name']}"))
    infl_rows = [
        {
            "category": labels[c],
            "km": a["km_in_influence"][c],
            "share": _fmt_share(a["share_in_influence"][c]),
            "inside": a["sources_inside"][c],
            "near": a["sources"][c],
            "radius": prof.category(c).radius_m,
        }
        for c in prof.category_names
    ]
    parts.append(
        r.table_html(
            infl_rows,
            [
                ("category", "category"),
                ("km", "km in its influence"),
                ("share", "share of network"),
                ("inside", "sources inside"),
                ("near", "sources inside or within radius"),
                ("radius", "radius (m)"),
            ],
            caption="Near vulnerable pedestrians",
            digits={"radius": 0},
        )
    )
    parts.append(r.note_html(INFLUENCE_BASIS))
    parts.append(
        r.table_html(
            [{"speed": k, "km": v} for k, v in a["km_by_speed"].items()],
            [("speed", "speed band"), ("km", "km (directed)")],
            caption="Length by speed",
        )
    )
    hs_rows = [
        {
            "rank": i,
            "street": h["street"] or "(unnamed)",
            "highway": h["highway"],
            "band": h["band"],
            "km": h["km"],
            "exposure_km": h["exposure_km"],
            "exposure": h["exposure"],
            "directions": h["directions"],
            "reasons": "; ".join(
                f"{x['label']} {x['share']:.0%}" + (f" ({x['near']})" if x["near"] else "")
                for x in h["reasons"]
            )
            or "baseline only",
        }
        for i, h in enumerate(a["hotspots"], start=1)
    ]
    parts.append(
        r.table_html(
            hs_rows,
            [
                ("rank", "#"),
                ("street", "street"),
                ("highway", "road class"),
                ("band", "band"),
                ("km", "km in area"),
                ("exposure_km", "exposure per km"),
                ("exposure", "exposure (per direction)"),
                ("directions", "directions"),
                ("reasons", "reasons (share of exposure per km)"),
            ],
            caption="Hot spots",
        )
    )
    cl_rows = [
        {
            "cluster": c["cluster"],
            "km": c["km"],
            "centreline_km": c["centreline_km"],
            "segments": c["segments"],
            "top_band": c["top_band"],
            "exposure": c["exposure"],
            "streets": ", ".join(c["streets"]),
        }
        for c in a["clusters"]
    ]
    parts.append(
        r.table_html(
            cl_rows,
            [
                ("cluster", "#"),
                ("km", "km (directed)"),
                ("centreline_km", "centreline km"),
                ("segments", "segments"),
                ("top_band", "top band"),
                ("exposure", "exposure"),
                ("streets", "streets"),
            ],
            caption=f"Clusters of adjacent streets in the bands {', '.join(a['high_bands'])}",
        )
        if cl_rows
        else r.note_html(f"No street of the area is in the bands {', '.join(a['high_bands'])}.")
    )
    # Hard rules
    series = {"closed by any rule": a["closed_km_by_hour"]}
    if len(prof.rules) > 1:
        series.update({f"rule: {k}": v for k, v in a["closed_km_by_rule"].items()})
    rule_parts = []
    if prof.rules:
        fig = r.week_chart(
            series,
            title=f"{a['name']}: km closed by the hard rules, by hour",
            ylabel="km closed (directed)",
        )
        rule_parts.append(
            r.figure_html(fig, alt=f"km closed by hour in {a['name']}", caption=HOUR_BASIS)
        )
        rule_parts.append(
            r.table_html(
                a["rules"],
                [
                    ("rule", "rule"),
                    ("covers_km", "km it covers"),
                    ("hours_in_force", "hours a week in force"),
                    ("closed_km_hours", "km-hours closed a week"),
                ],
                caption="Hard rules",
            )
        )
        pk = a["closed_peak"]
        rule_parts.append(
            r.paragraph(
                f"Most closed: {pk['km']:.3f} km at {pk['label']} "
                f"({_fmt_share(pk['km'] / a['network_km'])} of the area's network); "
                f"{a['closed_km_hours']:.3f} km-hours a week in all."
            )
        )
    else:
        rule_parts.append(r.note_html("The profile has no hard rules."))
    conn = a["connectivity"]
    blocks = [("peak", f"at the most closed hour, {conn['peak']['label']}")]
    if "at" in conn:
        blocks.append(("at", f"at the chosen time, {conn['at']['label']}"))
    blocks.append(("none_closed", "with nothing closed"))
    for key, title in blocks:
        c = conn[key]
        rows = [
            {
                "part": i,
                "km": p["km"],
                "centreline_km": p["centreline_km"],
                "nodes": p["nodes"],
                "streets": ", ".join(p["streets"]),
            }
            for i, p in enumerate(c["parts"], start=1)
        ]
        rule_parts.append(
            r.table_html(
                rows,
                [
                    ("part", "part"),
                    ("km", "km (directed)"),
                    ("centreline_km", "centreline km"),
                    ("nodes", "nodes"),
                    ("streets", "main streets"),
                ],
                caption=f"Strongly connected parts of the open network {title}",
            )
        )
        rule_parts.append(
            r.note_html(
                f"{c['parts_count']} part(s); open {c['open_km']:.3f} km, closed "
                f"{c['closed_km']:.3f} km; {c['km_between_parts']:.3f} km of open one-way links "
                f"between parts; {c['nodes_without_open_edge']} node(s) with no open edge; "
                f"largest part {_fmt_share(c['largest_share'])} of the open km."
            )
        )
    fig = r.week_chart(
        {"exposure": a["exposure_by_hour"]},
        title=f"{a['name']}: exposure through the week (time profiles)",
        ylabel="exposure",
    )
    return r.section(
        f"Area: {a['name']}",
        *parts,
        r.section("Under the hard rules", *rule_parts, level=3, anchor_id=f"area-{idx}-rules"),
        r.section(
            "Exposure by hour",
            r.figure_html(
                fig,
                alt=f"exposure by hour in {a['name']}",
                caption="Mean time multiplier of each hour applied to the area's streets.",
            ),
            level=3,
            anchor_id=f"area-{idx}-hours",
        ),
        anchor_id=f"area-{idx}",
    )


def _what_if_section(review: Review) -> str:
    r = report
    blocks = []
    for s in review.what_ifs:
        rows = [
            {
                "area": x["name"],
                "closed_kmh": x["closed_km_hours"],
                "closed_kmh_change": x["closed_km_hours_change"],
                "peak": x["closed_peak_km"],
                "peak_change": x["closed_peak_km_change"],
                "exposure": x["exposure"],
                "exposure_change": x["exposure_change"],
                "high": x["km_in_high_bands"],
                "high_change": x["km_in_high_bands_change"],
                "parts": x["allowed_parts_count"],
                "parts_change": x["allowed_parts_count_change"],
            }
            for x in s["areas"]
        ]
        blocks.append(
            r.table_html(
                rows,
                [
                    ("area", "area"),
                    ("closed_kmh", "closed km-hours a week"),
                    ("closed_kmh_change", "change"),
                    ("peak", "most closed km"),
                    ("peak_change", "change"),
                    ("exposure", "exposure"),
                    ("exposure_change", "change"),
                    ("high", "km in high bands"),
                    ("high_change", "change"),
                    ("parts", "parts at peak"),
                    ("parts_change", "change"),
                ],
                caption=f"What if {s['label']} (profile {s['profile']})",
            )
        )
    return r.section("What if", r.note_html(WHAT_IF_HELP), *blocks, anchor_id="what-if")


def _profile_section(review: Review) -> str:
    r = report
    prof = review.profile
    cats = [
        {
            "id": c.name,
            "label": c.label,
            "weight": c.weight,
            "radius": c.radius_m,
            "decay": c.decay,
            "time": c.time_profile or "constant 1",
        }
        for c in prof.categories
    ]
    rules = []
    for rule in prof.rules:
        what = []
        if rule.category:
            what.append(f"within {rule.within_m:g} m of {rule.category}")
        if rule.polygons_file:
            what.append(f"inside the polygons of {Path(rule.polygons_file).name}")
        if rule.road_classes:
            what.append("road classes " + ", ".join(rule.road_classes))
        when = (
            "; ".join(
                f"{','.join(w.days)} {w.start // 60:02d}:{w.start % 60:02d}-"
                f"{w.end // 60:02d}:{w.end % 60:02d}"
                for w in rule.windows
            )
            or "at all times"
        )
        rules.append({"name": rule.name, "what": " or ".join(what), "when": when})
    bands = [{"band": b.name, "from": b.lower} for b in prof.bands]
    return r.section(
        "Profile used",
        r.paragraph(f"{prof.name} (fingerprint {prof.fingerprint}). {prof.description}"),
        r.table_html(
            cats,
            [
                ("id", "category"),
                ("label", "label"),
                ("weight", "weight"),
                ("radius", "radius (m)"),
                ("decay", "decay"),
                ("time", "time profile"),
            ],
            caption="Categories",
            digits={"radius": 0},
        ),
        r.table_html(
            rules,
            [("name", "rule"), ("what", "streets it covers"), ("when", "in force")],
            caption="Hard rules",
        )
        if rules
        else r.note_html("No hard rules."),
        r.table_html(
            bands, [("band", "band"), ("from", "from (exposure per km)")], caption="Exposure bands"
        ),
        r.note_html(
            f"Crossing weight {prof.crossing_weight:g}; severity outcome "
            f"{prof.severity_outcome}. The weights are the profile's, not data."
        ),
        r.note_html(_model_text(prof)),
        anchor_id="profile",
    )


def _model_text(prof: Profile) -> str:
    """Return the profile section's note on the time of the baseline, decay steps and scope."""
    from routerisk.analysis.scoring import model_note

    base = prof.baseline_time_profile or "none (the same at all hours)"
    parts = [
        f"Baseline time profile: {base}; crossing time profile: "
        f"{prof.crossing_time_profile or 'none'}."
    ]
    steps = [c.name for c in prof.categories if c.decay == "gaussian"]
    if steps:
        parts.append(
            f"Gaussian decay ({', '.join(steps)}) is cut at the radius: nearness drops "
            "from exp(-2) = 0.135 to 0 there, a step (gaussian_smooth has none)."
        )
    parts.append(f"Risk {model_note(prof)}.")
    return " ".join(parts)


def review_html(review: Review, *, tiles: Any = None, bands: str = "fixed") -> str:
    """Return the self-contained HTML report of a review."""
    r = report
    prof = review.profile
    meta = review.meta
    ts = meta.get("source_timestamp") or "not stated in the source file"
    facts = [
        ("profile", f"{prof.name} (fingerprint {prof.fingerprint})"),
        (
            "network data",
            f"{meta.get('source_name', '')} (sha256 {str(meta.get('source_sha256', ''))[:16]})",
        ),
        ("data date", ts),
        (
            "data licence",
            meta.get("data_licence")
            or "OpenStreetMap data: ODbL 1.0 (c) OpenStreetMap contributors",
        ),
        ("local time zone", _zone_text(meta.get("timezone", "UTC"))),
        ("lengths", LENGTH_BASIS),
    ]
    if review.at is not None:
        facts.append(("chosen time", minute_label(review.at)))
    table = comparison_table(review)
    # one row per figure, one column per area: fits the page however many figures there are
    from routerisk.render import words

    wide = (
        table.drop(
            columns=["profile", "routerisk_version", "network_source_sha256", "area_file_sha256"],
            errors="ignore",
        )
        .set_index("area")
        .T
    )
    wide.insert(0, "figure", [words.heading(str(c)) for c in wide.index])
    body = [
        r.section(
            "Areas side by side",
            r.frame_html(wide, index=False, digits=3),
            r.figure_html(
                r.grouped_bar_chart(
                    [b.name for b in prof.bands],
                    {
                        a["name"]: [a["km_by_band"][b.name] for b in prof.bands]
                        for a in review.areas
                    },
                    title="km by exposure band (directed)",
                    ylabel="km",
                ),
                alt="km by exposure band per area",
            ),
            anchor_id="compare",
        )
    ]
    body.append(
        r.section(
            "Map",
            r.map_html(review_map(review, tiles=tiles, bands=bands), title="map of the areas"),
            r.note_html(
                "Streets are drawn once per segment; hot spots have a "
                "dark halo. The map works offline."
            ),
            anchor_id="map",
        )
    )
    toc = [("compare", "side by side"), ("map", "map")]
    for i, a in enumerate(review.areas):
        body.append(_area_section(review, a, i))
        toc.append((f"area-{i}", a["name"]))
    if review.what_ifs:
        body.append(_what_if_section(review))
        toc.append(("what-if", "what if"))
    body.append(_profile_section(review))
    toc.append(("profile", "profile"))
    body.append(
        r.section(
            "Method",
            r.note_html(LENGTH_BASIS),
            r.note_html(HOUR_BASIS),
            r.note_html(INFLUENCE_BASIS),
            r.note_html(
                "Exposure per km = baseline + sum over categories of weight x nearness + "
                "crossing weight x crossings per km (time multipliers 1); exposure = exposure "
                "per km x km in the area. Hot spots rank street segments by that exposure (one "
                "direction); reasons are the categories with the largest part of the exposure "
                "per km, with the nearest source. Clusters join high-band segments that share a "
                "node inside the area. Connectivity: with the rule-closed streets taken out, the "
                "streets split into separate open parts, each a set of streets that can all be "
                "driven to from each other (strongly connected parts of the directed graph); "
                "edges that cross the boundary count as in the area."
            ),
            anchor_id="method",
        )
    )
    names = ", ".join(a["name"] for a in review.areas)
    return r.page(
        f"Area review: {names}", body, facts=facts, toc=toc, provenance=review.provenance or None
    )


def _zone_text(name: str) -> str:
    from routerisk.io.timezones import zone_label

    label = zone_label(name)
    return name if label == name else f"{label} ({name})"

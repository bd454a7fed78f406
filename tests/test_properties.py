"""Property-based tests (hypothesis) of the core computations, seeded and bounded.

Every test runs ``derandomize=True`` (a fixed seed, the same examples every run) with a small
``max_examples``, so the file stays well under a minute. The properties:

* exposure and risk are non-negative and never fall when a category weight rises;
* adding a source never lowers an edge's exposure (nearest or stacked, every decay);
* a route's risk equals the sum of its segments' risks, and of
  ``edge_risk_parts`` at each segment's entry minute;
* splitting an edge in two (geometry, length and time halved, same tags, re-tagged) keeps the
  route's risk, length and time, within float tolerance;
* suggested alternatives never break a hard rule at the time they drive an edge (checked
  here from the rule windows, not with the scorer's own break list).

All networks are invented in memory (tests/_nets.py or built here), CC0.
"""

from __future__ import annotations

import datetime as dt

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from shapely import LineString, Point

from routerisk.analysis.alternatives import RouteGraph, Suggester
from routerisk.analysis.scoring import Scorer, edge_risk_parts, minute_of_week
from routerisk.network.folder import Network
from routerisk.network.tagging import tag_edges
from routerisk.profile import DECAYS, MINUTES_PER_WEEK, parse_profile

from ._nets import random_grid

CRS = "EPSG:32624"
X0, Y0 = 500_000.0, 4_260_000.0
TZ = dt.timezone(dt.timedelta(hours=-3))
MONDAY = dt.datetime(2027, 3, 8, 0, 0, tzinfo=TZ)
CATS = ("a", "b")
SETTINGS = dict(
    derandomize=True,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)


def _profile(
    weights=(1.0, 1.0),
    *,
    radius=(60.0, 40.0),
    decay=("linear", "gaussian"),
    stack=(False, True),
    crossing_weight=0.05,
    rules=(),
    timed=True,
):
    tps = {
        "busy": {
            "default": 0.5,
            "windows": [
                {
                    "days": ["mon", "tue", "wed", "thu", "fri"],
                    "start": "07:00",
                    "end": "09:00",
                    "multiplier": 3.0,
                },
                {"days": ["sat"], "start": "22:00", "end": "02:00", "multiplier": 1.5},
            ],
        }
    }
    cats = {}
    for i, c in enumerate(CATS):
        cats[c] = {
            "select": [{"kind": c}],
            "weight": float(weights[i]),
            "radius_m": float(radius[i]),
            "decay": decay[i],
            "stack": bool(stack[i]),
        }
        if timed and i == 0:
            cats[c]["time_profile"] = "busy"
    return parse_profile(
        {
            "version": 1,
            "name": "prop",
            "sample_spacing_m": 10,
            "time_profiles": tps if timed else {},
            "categories": cats,
            "crossing_weight": crossing_weight,
            "baseline": {
                "by_road_class": {"residential": 0.3, "primary": 0.1},
                "default": 0.2,
                "sidewalk": {"both": 1.0, "no": 1.3, "unknown": 1.0},
            },
            "bands": [{"name": "low", "from": 0.0}, {"name": "high", "from": 1.0}],
            "rules": list(rules),
        }
    )


# ------------------------------------------------------------------------------ strategies

coord = st.integers(min_value=0, max_value=10).map(lambda k: 20.0 * k)


@st.composite
def edge_sets(draw, max_edges: int = 5):
    """Axis-aligned edges on a 20 m lattice (lengths are multiples of 20 m)."""
    n = draw(st.integers(1, max_edges))
    geoms, rows = [], []
    for i in range(n):
        x, y = draw(coord), draw(coord)
        horizontal = draw(st.booleans())
        k = draw(st.integers(1, 6))
        end = (x + 20.0 * k, y) if horizontal else (x, y + 20.0 * k)
        g = LineString([(X0 + x, Y0 + y), (X0 + end[0], Y0 + end[1])])
        geoms.append(g)
        rows.append(
            {
                "u": i * 2 + 1,
                "v": i * 2 + 2,
                "key": 0,
                "highway": draw(st.sampled_from(["residential", "primary", "service"])),
                "sidewalk": draw(st.sampled_from(["both", "no", None])),
                "speed_kph": draw(st.sampled_from([20.0, 40.0, 56.0])),
                "length": g.length,
                "name": f"Street {i}",
            }
        )
    df = gpd.GeoDataFrame(pd.DataFrame(rows), geometry=geoms, crs=CRS)
    df["travel_time"] = df["length"] / (df["speed_kph"] / 3.6)
    return df.set_index(["u", "v", "key"])


point = st.tuples(st.floats(-40, 240), st.floats(-40, 240)).map(
    lambda p: Point(X0 + p[0], Y0 + p[1])
)


def _sources(pts, cats) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"category": list(cats), "osm_type": "node", "osmid": np.arange(len(cats)), "name": ""},
        geometry=list(pts),
        crs=CRS,
    )


def _crossings(pts) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"osmid": np.arange(len(pts)), "crossing": "marked"}, geometry=list(pts), crs=CRS
    )


sources_st = st.lists(st.tuples(point, st.sampled_from(CATS)), max_size=6)
crossings_st = st.lists(point, max_size=3)
weights_st = st.tuples(st.floats(0, 10), st.floats(0, 10))


# ------------------------------------------------------------- exposure and weights


@settings(max_examples=40, **SETTINGS)
@given(
    edges=edge_sets(),
    srcs=sources_st,
    cross=crossings_st,
    w=weights_st,
    which=st.sampled_from([0, 1]),
    bump=st.floats(0.01, 5),
    minute=st.integers(0, MINUTES_PER_WEEK - 1),
)
def test_exposure_nonnegative_and_monotone_in_every_weight(
    edges, srcs, cross, w, which, bump, minute
):
    src = _sources([p for p, _ in srcs], [c for _, c in srcs])
    cr = _crossings(cross)
    w2 = list(w)
    w2[which] += bump
    lo = tag_edges(edges, src, cr, _profile(w))
    hi = tag_edges(edges, src, cr, _profile(w2))
    prof = _profile(w)
    for c in CATS:
        assert (lo[f"exp_{c}"] >= 0).all()
        if not prof.category(c).stack:  # the nearest source's nearness is at most 1
            assert (lo[f"exp_{c}"] <= 1 + 1e-12).all()
        # the exposure of a category does not depend on any weight
        np.testing.assert_array_equal(lo[f"exp_{c}"], hi[f"exp_{c}"])
    assert (lo["exposure_km"] >= 0).all()
    assert (hi["exposure_km"].to_numpy() >= lo["exposure_km"].to_numpy() - 1e-12).all()
    p_lo = edge_risk_parts(lo, _profile(w), minute)
    p_hi = edge_risk_parts(hi, _profile(w2), minute)
    assert (p_lo.to_numpy() >= 0).all()
    assert (p_hi["total"].to_numpy() >= p_lo["total"].to_numpy() - 1e-12).all()
    np.testing.assert_allclose(
        p_lo["total"], p_lo.drop(columns="total").sum(axis=1), rtol=1e-12, atol=1e-15
    )


@settings(max_examples=25, **SETTINGS)
@given(
    seed=st.integers(0, 10_000),
    w=weights_st,
    which=st.sampled_from([0, 1]),
    bump=st.floats(0.01, 5),
    steps=st.integers(1, 10),
    minute=st.integers(0, MINUTES_PER_WEEK - 1),
    data=st.data(),
)
def test_route_risk_monotone_in_every_weight(seed, w, which, bump, steps, minute, data):
    w2 = list(w)
    w2[which] += bump
    lo_net = random_grid(_profile(w), n=4, seed=seed)
    hi_net = random_grid(_profile(w2), n=4, seed=seed)  # same seed: same exposures
    path = _walk(lo_net, steps, data)
    depart = MONDAY + dt.timedelta(minutes=minute)
    lo = Scorer(lo_net).score("r", path, depart)
    hi = Scorer(hi_net).score("r", path, depart)
    assert lo.risk >= 0
    assert hi.risk >= lo.risk - 1e-12
    for c in CATS:
        assert hi.by_category[c] >= lo.by_category[c] - 1e-12


def _walk(net: Network, steps: int, data) -> list[tuple[int, int, int]]:
    """Draw a connected walk of ``steps`` edges over the network's directed edges."""
    out_edges: dict[int, list[tuple[int, int, int]]] = {}
    for u, v, k in net.edges.index:
        out_edges.setdefault(int(u), []).append((int(u), int(v), int(k)))
    node = data.draw(st.sampled_from(sorted(out_edges)))
    path = []
    for _ in range(steps):
        e = data.draw(st.sampled_from(out_edges[node]))
        path.append(e)
        node = e[1]
    return path


# ------------------------------------------------------------------------- sources


@settings(max_examples=40, **SETTINGS)
@given(
    edges=edge_sets(),
    srcs=sources_st,
    extra=point,
    cat=st.sampled_from(CATS),
    decay=st.tuples(st.sampled_from(DECAYS), st.sampled_from(DECAYS)),
    stack=st.tuples(st.booleans(), st.booleans()),
    radius=st.tuples(st.floats(5, 150), st.floats(5, 150)),
)
def test_adding_a_source_never_lowers_exposure(edges, srcs, extra, cat, decay, stack, radius):
    prof = _profile(decay=decay, stack=stack, radius=radius)
    base = _sources([p for p, _ in srcs], [c for _, c in srcs])
    more = _sources([p for p, _ in srcs] + [extra], [c for _, c in srcs] + [cat])
    cr = _crossings([])
    before = tag_edges(edges, base, cr, prof)
    after = tag_edges(edges, more, cr, prof)
    for c in CATS:
        a, b = after[f"exp_{c}"].to_numpy(), before[f"exp_{c}"].to_numpy()
        if c == cat:
            assert (a >= b - 1e-12).all()
            assert (after[f"infl_{c}"].to_numpy() >= before[f"infl_{c}"].to_numpy()).all()
        else:
            np.testing.assert_array_equal(a, b)
    assert (after["exposure_km"].to_numpy() >= before["exposure_km"].to_numpy() - 1e-12).all()


# ------------------------------------------------------------------- route = segments


@settings(max_examples=30, **SETTINGS)
@given(
    seed=st.integers(0, 10_000),
    steps=st.integers(1, 14),
    minute=st.integers(0, MINUTES_PER_WEEK - 1),
    w=weights_st,
    cw=st.floats(0, 1),
    data=st.data(),
)
def test_route_risk_is_the_sum_of_its_segments(seed, steps, minute, w, cw, data):
    prof = _profile(w, crossing_weight=cw)
    net = random_grid(prof, n=4, seed=seed)
    rng = np.random.default_rng(seed)
    net.edges["crossings"] = rng.integers(0, 3, len(net.edges))
    net.edges["severity"] = rng.uniform(0.05, 2.0, len(net.edges))
    net.edges["baseline"] = rng.uniform(0.0, 1.0, len(net.edges))
    path = _walk(net, steps, data)
    depart = MONDAY + dt.timedelta(minutes=minute, seconds=data.draw(st.integers(0, 59)))
    s = Scorer(net).score("r", path, depart)
    seg = s.segments
    assert s.risk == pytest.approx(float(seg["risk"].sum()), rel=1e-12, abs=1e-15)
    assert s.risk == pytest.approx(sum(s.by_category.values()), rel=1e-12, abs=1e-15)
    # independently: the edge formula at each segment's entry minute (its ISO time)
    entered = minute_of_week(pd.Series(pd.to_datetime(seg["time"])))
    parts = edge_risk_parts(net.edges.loc[path], prof, entered)
    np.testing.assert_allclose(
        parts["total"].to_numpy(), seg["risk"].to_numpy(), rtol=1e-12, atol=1e-15
    )
    assert s.length_km == pytest.approx(net.edges.loc[path, "length"].sum() / 1000, rel=1e-12)


# ---------------------------------------------------------------------------- splitting


def _chain_network(
    lengths: list[int], turns: list[bool], prof, srcs, cross, split: int | None
) -> tuple[Network, list[tuple[int, int, int]]]:
    """Return a one-way chain of edges (lengths in 20 m units) and its route.

    With ``split`` = j, edge j is two edges meeting at a new node 999 at its middle, each
    with half the geometry, length and travel time and the same tags.
    """
    x, y, heading = X0, Y0, 0
    nodes = {1: (x, y)}
    rows = []
    for i, (k, turn) in enumerate(zip(lengths, turns, strict=True)):
        heading = (heading + (1 if turn else 0)) % 4
        dx, dy = [(1, 0), (0, 1), (-1, 0), (0, -1)][heading]
        nx_, ny_ = x + dx * 20.0 * k, y + dy * 20.0 * k
        u, v = i + 1, i + 2
        nodes[v] = (nx_, ny_)
        speed = 40.0 if i % 2 else 30.0
        tags = {
            "highway": "residential" if i % 2 else "primary",
            "sidewalk": "both",
            "speed_kph": speed,
            "name": f"Chain {i}",
        }
        pieces = [((x, y), (nx_, ny_), u, v)]
        if split == i:
            mx, my = (x + nx_) / 2, (y + ny_) / 2
            nodes[999] = (mx, my)
            pieces = [((x, y), (mx, my), u, 999), ((mx, my), (nx_, ny_), 999, v)]
        for a, b, pu, pv in pieces:
            g = LineString([a, b])
            rows.append(
                {
                    "u": pu,
                    "v": pv,
                    "key": 0,
                    **tags,
                    "length": g.length,
                    "travel_time": g.length / (speed / 3.6),
                    "geometry": g,
                }
            )
        x, y = nx_, ny_
    edges = gpd.GeoDataFrame(pd.DataFrame(rows), geometry="geometry", crs=CRS).set_index(
        ["u", "v", "key"]
    )
    tagged = tag_edges(edges, srcs, cross, prof)
    ids = sorted(nodes)
    nd = gpd.GeoDataFrame(
        {"x": [nodes[i][0] for i in ids], "y": [nodes[i][1] for i in ids]},
        index=pd.Index(ids, name="osmid"),
        geometry=[Point(nodes[i]) for i in ids],
        crs=CRS,
    )
    net = Network(tagged, nd, srcs, cross, prof, {"timezone": "Etc/GMT+3"})
    return net, [tuple(int(x) for x in ix) for ix in tagged.index]


@settings(max_examples=30, **SETTINGS)
@given(
    lengths=st.lists(st.integers(1, 8), min_size=1, max_size=4),
    data=st.data(),
    srcs=sources_st,
    cross=crossings_st,
    w=weights_st,
    stack=st.tuples(st.booleans(), st.booleans()),
    decay=st.tuples(st.sampled_from(DECAYS), st.sampled_from(DECAYS)),
)
def test_splitting_an_edge_keeps_the_route_risk(lengths, data, srcs, cross, w, stack, decay):
    turns = data.draw(st.lists(st.booleans(), min_size=len(lengths), max_size=len(lengths)))
    j = data.draw(st.integers(0, len(lengths) - 1))
    # time profiles stay out: a window boundary inside an edge would (rightly) change the
    # multiplier of its second half
    prof = _profile(w, stack=stack, decay=decay, timed=False)
    src = _sources([p for p, _ in srcs], [c for _, c in srcs])
    whole, route = _chain_network(lengths, turns, prof, src, _crossings([]), None)
    mid = whole.edges.geometry.iloc[j].interpolate(0.5, normalized=True)
    # crossings away from the split point (one at it would count for both halves: see the
    # strict expected failure below)
    cr = _crossings([p for p in cross if p.distance(mid) > 2.0])
    whole, route = _chain_network(lengths, turns, prof, src, cr, None)
    split, route2 = _chain_network(lengths, turns, prof, src, cr, j)
    assert len(route2) == len(route) + 1
    depart = MONDAY + dt.timedelta(days=1, hours=10)
    a = Scorer(whole).score("r", route, depart)
    b = Scorer(split).score("r", route2, depart)
    assert b.length_km == pytest.approx(a.length_km, rel=1e-12)
    assert b.duration_min == pytest.approx(a.duration_min, rel=1e-12)
    assert b.risk == pytest.approx(a.risk, rel=1e-9, abs=1e-12)
    for k, v in a.by_category.items():
        assert b.by_category[k] == pytest.approx(v, rel=1e-9, abs=1e-12)


def test_a_crossing_at_a_node_counts_once_along_a_route():
    prof = _profile(timed=False, crossing_weight=0.5)
    src = _sources([], [])
    whole, route = _chain_network([4], [False], prof, src, _crossings([]), None)
    mid = whole.edges.geometry.iloc[0].interpolate(0.5, normalized=True)
    cr = _crossings([mid])
    whole, route = _chain_network([4], [False], prof, src, cr, None)
    split, route2 = _chain_network([4], [False], prof, src, cr, 0)
    depart = MONDAY + dt.timedelta(days=1, hours=10)
    assert (
        Scorer(split).score("r", route2, depart).crossings
        == Scorer(whole).score("r", route, depart).crossings
        == 1
    )


# -------------------------------------------------------------------------- hard rules


def _rule_ok(net: Network, edges, depart: dt.datetime) -> bool:
    """Tell from the rule windows (not the scorer's break list) that no rule is broken."""
    prof = net.profile
    e = net.edges.loc[edges]
    enter = np.concatenate([[0.0], np.cumsum(e["travel_time"].to_numpy())[:-1]])
    local = depart.astimezone(net.timezone)
    m0 = local.weekday() * 1440 + local.hour * 60 + local.minute + local.second / 60.0
    minutes = np.floor(m0 + enter / 60.0).astype(np.int64) % MINUTES_PER_WEEK
    for i, rule in enumerate(prof.rules):
        if (e[f"rule_{i}"].to_numpy() & rule.by_minute[minutes]).any():
            return False
    return True


@settings(max_examples=20, **SETTINGS)
@given(
    seed=st.integers(0, 10_000),
    share=st.floats(0.05, 0.5),
    minute=st.integers(0, MINUTES_PER_WEEK - 1),
    extra=st.floats(0.1, 1.5),
    ends=st.tuples(st.integers(1, 16), st.integers(1, 16)).filter(lambda t: t[0] != t[1]),
    always=st.booleans(),
)
def test_alternatives_never_break_hard_rules(seed, share, minute, extra, ends, always):
    windows = (
        []
        if always
        else [
            {"days": ["mon", "tue", "wed", "thu", "fri"], "start": "07:00", "end": "09:00"},
            {"days": ["sat", "sun"], "start": "20:00", "end": "02:00"},
        ]
    )
    rule = {"name": "closed streets", "road_classes": ["living_street"]}
    if windows:
        rule["windows"] = windows
    prof = _profile(rules=[rule])
    net = random_grid(prof, n=4, seed=seed)
    rng = np.random.default_rng(seed + 1)
    net.edges["rule_0"] = rng.random(len(net.edges)) < share
    depart = MONDAY + dt.timedelta(minutes=minute)
    sc = Scorer(net)
    g = RouteGraph(sc)
    _, pred, best = g.shortest(sc.tt, g.node_of[ends[0]])
    rows = g.path_edges(pred, best, g.node_of[ends[0]], g.node_of[ends[1]])
    planned = g.as_tuples(rows)
    s = Suggester(sc).suggest("p", planned, depart, count=2, max_extra_time=extra)
    for alt in s.alternatives:
        assert alt.edges[0][0] == ends[0] and alt.edges[-1][1] == ends[1]
        if not s.note:
            # a suggested alternative: within the bounds and breaking no rule when driven
            assert alt.within_bounds
            assert _rule_ok(net, alt.edges, depart), alt.edges
            assert alt.score.duration_min <= s.planned.duration_min * (1 + extra) + 1e-9
    if any(not _rule_ok(net, a.edges, depart) for a in s.alternatives):
        assert s.note and len(s.alternatives) <= 1  # only as the flagged fallback

"""Alternatives: exact supported Pareto points, hard rules kept, diversity."""

from __future__ import annotations

import datetime as dt

import networkx as nx
import numpy as np
import pytest

from routerisk.analysis.alternatives import Arcs, RouteGraph, Suggester, front_by_brute_force
from routerisk.analysis.scoring import Scorer
from routerisk.profile import parse_profile

from ._nets import random_grid

TZ = dt.timezone(dt.timedelta(hours=-3))
DEPART = dt.datetime(2027, 3, 9, 11, 0, tzinfo=TZ)  # a Tuesday


def _flat_profile(rules=()):
    return parse_profile(
        {
            "version": 1,
            "name": "flat",
            "categories": {
                "school": {"select": [{"amenity": "school"}], "weight": 3.0, "radius_m": 50},
                "retail": {"select": [{"shop": "*"}], "weight": 1.0, "radius_m": 30},
            },
            "rules": list(rules),
        }
    )


def _grid_case(seed):
    """A seeded 4x4 grid: route graph, edge times, edge risks and every simple path 1 -> 16."""
    net = random_grid(_flat_profile(), n=4, seed=seed)
    sc = Scorer(net)
    g = RouteGraph(sc)
    risk = Suggester(sc)._risk_at(np.zeros(g.m, dtype=np.int64))
    G = nx.DiGraph()
    for row, (u, v, _k) in enumerate(sc.index):
        G.add_edge(u, v, row=row)
    paths = [
        [G[a][b]["row"] for a, b in zip(p[:-1], p[1:], strict=True)]
        for p in nx.all_simple_paths(G, 1, 16)
    ]
    return g, sc.tt, risk, paths


def _points(rows_list, tt, risk):
    return sorted(
        {(round(float(tt[r].sum()), 9), round(float(risk[r].sum()), 9)) for r in rows_list}
    )


@pytest.mark.parametrize("seed", range(6))
def test_finds_every_supported_point_by_brute_force(seed):
    # Reference: brute force over all simple paths (networkx.all_simple_paths) of a 4x4 grid;
    # the supported points are the vertices of the lower-left convex hull of (time, risk).
    g, tt, risk, paths = _grid_case(seed)
    expected = front_by_brute_force(_points(paths, tt, risk))
    leg = g.leg(g.node_of[1], g.node_of[16])
    assert _points(leg.front(tt[leg.rows], risk[leg.rows]), tt, risk) == expected


@pytest.mark.parametrize("seed", range(6))
def test_time_bounded_leg_keeps_every_path_within_the_bound(seed):
    # Reference: brute force over all simple paths (networkx.all_simple_paths) of a 4x4 grid.
    # Every path within the time budget must survive the pruning, and the search on the
    # pruned part must find exactly the supported points of the simple paths left in it.
    g, tt, risk, paths = _grid_case(seed)
    fastest = min(float(tt[r].sum()) for r in paths)
    budget = 1.3 * fastest
    leg = g.leg(g.node_of[1], g.node_of[16], budget)
    kept = set(leg.rows.tolist())
    assert {r for p in paths if tt[p].sum() <= budget for r in p} <= kept
    assert len(kept) < g.m  # something was pruned
    got = _points(leg.front(tt[leg.rows], risk[leg.rows]), tt, risk)
    assert got == front_by_brute_force(_points([r for r in paths if set(r) <= kept], tt, risk))
    assert got[0][0] == round(fastest, 9)
    assert g.leg(g.node_of[1], g.node_of[16], 0.99 * fastest) is None


def test_arcs_take_the_cheapest_parallel_edge():
    # three nodes, two parallel arcs 0->1 (costs 5 and 2) and one 1->2; hand-computed
    arcs = Arcs(np.array([0, 0, 1]), np.array([1, 1, 2]), 3, np.array([10, 11, 12]))
    cost = np.array([{10: 5.0, 11: 2.0, 12: 1.0}[int(r)] for r in arcs.rows])
    dist, pred, best = arcs.solve(cost, 0)
    assert dist.tolist() == [0.0, 2.0, 3.0]
    assert arcs.rows[arcs.path(pred, best, 0, 2)].tolist() == [11, 12]
    cost[arcs.rows == 11] = np.inf  # closed: the dearer parallel arc is used
    dist, pred, best = arcs.solve(cost, 0)
    assert arcs.rows[arcs.path(pred, best, 0, 2)].tolist() == [10, 12]
    assert arcs.path(pred, best, 2, 2).tolist() == []


def test_alternatives_never_break_hard_rules():
    rule = {"name": "school zone", "category": "school", "within_m": 10}
    prof = _flat_profile([rule])
    net = random_grid(prof, n=5, seed=3)
    # close a band of edges with the rule: those with school exposure above 0.5
    net.edges["rule_0"] = net.edges["exp_school"] > 0.5
    sc = Scorer(net)
    planned = nx.shortest_path(net.graph, 1, 25, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    s = Suggester(sc).suggest("p", edges, DEPART, count=3, max_extra_time=1.0, min_difference=0.2)
    for alt in s.alternatives:
        rescored = Scorer(net).score("check", alt.edges, DEPART)  # independent re-score
        if alt.within_bounds:
            assert rescored.rule_breaks == []
        assert alt.edges[0][0] == 1 and alt.edges[-1][1] == 25
        for (_a, b, _), (c, _, _) in zip(alt.edges[:-1], alt.edges[1:], strict=True):
            assert b == c  # a connected path


def test_alternatives_differ_from_plan_and_each_other():
    net = random_grid(_flat_profile(), n=6, seed=11)
    sc = Scorer(net)
    planned = nx.shortest_path(net.graph, 1, 36, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    s = Suggester(sc).suggest("p", edges, DEPART, count=3, max_extra_time=0.6, min_difference=0.3)
    for alt in s.alternatives:
        assert 1 - alt.overlap_with_plan >= 0.3 - 1e-9
        assert alt.score.risk < s.planned.risk


def test_much_shorter_alternative_carries_a_caveat():
    # a plan from node 1 to node 11 of a 5x5 grid that goes round three sides of it
    # (1 -> 5 -> 25 -> 21 -> 11); a direct route is far shorter, and its lower risk partly
    # comes from driving less: such alternatives say so
    net = random_grid(_flat_profile(), n=5, seed=4)
    sc = Scorer(net)
    nodes = [1, 2, 3, 4, 5, 10, 15, 20, 25, 24, 23, 22, 21, 16, 11]
    edges = [(a, b, 0) for a, b in zip(nodes[:-1], nodes[1:], strict=True)]
    s = Suggester(sc).suggest("detour", edges, DEPART, count=3, max_extra_time=0.25)
    assert s.alternatives
    for alt in s.alternatives:
        shorter = alt.length_change_pct < -20.0
        assert bool(alt.caveats) == shorter
        if shorter:
            assert "shorter than the plan" in alt.caveats[0]
            assert "required points" in alt.to_dict()["caveats"][0]
    assert any(a.caveats for a in s.alternatives)


def _cut_case():
    """A 5x5 grid whose end node 25 lies in a rule zone in force on Tuesdays 10:00-12:00."""
    rule = {
        "name": "school zone",
        "category": "school",
        "within_m": 10,
        "windows": [{"days": ["tue"], "start": "10:00", "end": "12:00"}],
    }
    net = random_grid(_flat_profile([rule]), n=5, seed=3)
    v = net.edges.index.get_level_values(1)
    net.edges["rule_0"] = np.asarray(v == 25)  # every way into the end is in the zone
    planned = nx.shortest_path(net.graph, 1, 25, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    return net, edges


def test_no_rule_abiding_route_says_why_and_shows_the_best_candidate():
    net, edges = _cut_case()
    s = Suggester(Scorer(net)).suggest("p", edges, DEPART, count=3, max_extra_time=0.5)
    assert s.planned.rule_breaks
    # the best candidate is shown, marked as breaking the hard rules, never as within bounds
    assert len(s.alternatives) == 1
    alt = s.alternatives[0]
    assert "hard rules" in alt.bounds_broken and not alt.within_bounds
    assert Scorer(net).score("check", alt.edges, DEPART).rule_breaks  # independent re-score
    assert any("no path within the time bound avoids the rule zones" in r for r in s.reasons)
    assert any("breaks no hard rule if it departs" in t for t in s.next_steps)


def test_nearest_rule_free_departures_are_the_nearest():
    # Checked by re-scoring the plan minute by minute around the named departures.
    net, edges = _cut_case()
    sc = Scorer(net)
    s = Suggester(sc).suggest("p", edges, DEPART, count=1, max_extra_time=0.5)
    later = dt.datetime.fromisoformat(s.rule_free_departures["later"])
    earlier = dt.datetime.fromisoformat(s.rule_free_departures["earlier"])
    one = dt.timedelta(minutes=1)

    def breaks(t):
        return len(sc.score("p", edges, t).rule_breaks)

    assert breaks(later) == 0 and breaks(later - one) > 0
    assert breaks(earlier) == 0 and breaks(earlier + one) > 0
    assert earlier < DEPART < later
    assert later.astimezone(TZ).hour == 11 or later.astimezone(TZ).hour == 12


def test_route_of_two_partial_edges_in_a_rule_zone_explains(town_net):
    # Corvane: Kipperling Street next to the primary school, at school hours (rule 0).
    sc = Scorer(town_net)
    assert town_net.edges.loc[[(75, 160, 0), (160, 112, 0)], "rule_0"].all()
    depart = dt.datetime(2027, 3, 9, 8, 0, tzinfo=TZ)  # a Tuesday, rule in force 07-09
    s = Suggester(sc).suggest(
        "z", [(75, 160, 0), (160, 112, 0)], depart, fractions=np.array([0.5, 0.5])
    )
    assert s.alternatives == []
    assert any("no part to change" in r for r in s.reasons)
    assert any("starts on Kipperling Street inside the zone" in r for r in s.reasons)
    assert s.rule_free_departures == {
        "earlier": "2027-03-09T06:59:00-03:00",
        "later": "2027-03-09T09:00:00-03:00",
    }
    d = s.to_dict()
    assert d["reasons"] == s.reasons and d["next_steps"] == s.next_steps


def test_routes_that_find_alternatives_carry_no_reasons():
    net = random_grid(_flat_profile(), n=6, seed=11)
    planned = nx.shortest_path(net.graph, 1, 36, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    s = Suggester(Scorer(net)).suggest("p", edges, DEPART, count=3, max_extra_time=0.6)
    assert s.alternatives and s.reasons == [] and s.next_steps == []
    assert s.rule_free_departures is None

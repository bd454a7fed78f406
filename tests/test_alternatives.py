"""Alternatives: exact supported Pareto points, hard rules kept, diversity."""

from __future__ import annotations

import datetime as dt

import networkx as nx
import numpy as np
import pytest

from routerisk.alternatives import RouteGraph, Suggester, front_by_brute_force
from routerisk.profile import parse_profile
from routerisk.scoring import Scorer

from ._nets import random_grid

TZ = dt.timezone(dt.timedelta(hours=-3))
DEPART = dt.datetime(2027, 3, 9, 11, 0, tzinfo=TZ)  # a Tuesday


def _flat_profile(rules=()):
    return parse_profile({"version": 1, "name": "flat", "categories": {
        "school": {"select": [{"amenity": "school"}], "weight": 3.0, "radius_m": 50},
        "retail": {"select": [{"shop": "*"}], "weight": 1.0, "radius_m": 30}},
        "rules": list(rules)})


@pytest.mark.parametrize("seed", range(6))
def test_finds_every_supported_point_by_brute_force(seed):
    # Reference: brute force over all simple paths (networkx.all_simple_paths) of a 4x4 grid;
    # the supported points are the vertices of the lower-left convex hull of (time, risk).
    net = random_grid(_flat_profile(), n=4, seed=seed)
    sc = Scorer(net)
    sug = Suggester(sc)
    g = RouteGraph(sc)
    risk = sug._risk_at(np.zeros(g.m, dtype=np.int64))
    tt = sc.tt
    G = nx.DiGraph()
    for row, (u, v, _k) in enumerate(sc.index):
        G.add_edge(u, v, row=row)
    origin, target = 1, 16
    pairs = []
    for path in nx.all_simple_paths(G, origin, target):
        rows = [G[a][b]["row"] for a, b in zip(path[:-1], path[1:], strict=True)]
        pairs.append((round(float(tt[rows].sum()), 9), round(float(risk[rows].sum()), 9)))
    expected = front_by_brute_force(pairs)
    found = sug._leg_front(g.node_of[origin], g.node_of[target], risk,
                           np.zeros(g.m, dtype=bool), np.ones(g.m))
    got = sorted({(round(float(tt[r].sum()), 9), round(float(risk[r].sum()), 9))
                  for r in found})
    assert got == expected


def test_alternatives_never_break_hard_rules():
    rule = {"name": "school zone", "category": "school", "within_m": 10}
    prof = _flat_profile([rule])
    net = random_grid(prof, n=5, seed=3)
    # close a band of edges with the rule: those with school exposure above 0.5
    net.edges["rule_0"] = net.edges["exp_school"] > 0.5
    sc = Scorer(net)
    planned = nx.shortest_path(net.graph, 1, 25, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    s = Suggester(sc).suggest("p", edges, DEPART, count=3, max_extra_time=1.0,
                              min_difference=0.2)
    for alt in s.alternatives:
        rescored = Scorer(net).score("check", alt.edges, DEPART)  # independent re-score
        if alt.within_bounds:
            assert rescored.rule_breaks == []
        assert alt.edges[0][0] == 1 and alt.edges[-1][1] == 25
        for (a, b, _), (c, _, _) in zip(alt.edges[:-1], alt.edges[1:], strict=True):
            assert b == c  # a connected path


def test_alternatives_differ_from_plan_and_each_other():
    net = random_grid(_flat_profile(), n=6, seed=11)
    sc = Scorer(net)
    planned = nx.shortest_path(net.graph, 1, 36, weight="travel_time")
    edges = [(a, b, 0) for a, b in zip(planned[:-1], planned[1:], strict=True)]
    s = Suggester(sc).suggest("p", edges, DEPART, count=3, max_extra_time=0.6,
                              min_difference=0.3)
    for alt in s.alternatives:
        assert 1 - alt.overlap_with_plan >= 0.3 - 1e-9
        assert alt.score.risk < s.planned.risk

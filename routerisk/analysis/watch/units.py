"""Units of discovery (street blocks or directed segments) and their sums."""

from __future__ import annotations

import numpy as np
import pandas as pd


def discovery_units(edges: pd.DataFrame, unit: str) -> pd.DataFrame:
    """Return one row per network edge: its unit id, street and direction in the unit.

    ``segment``: each directed edge is its own unit. ``block``: an edge and its reverse
    (same end nodes and key) are one pair, and pairs meeting at a node where nothing else
    meets (exactly two pairs there) and carrying the same street name are merged into one run
    between intersections. A unit's direction runs from its end node met first when the run
    is walked from its smaller end node; ``forward`` tells whether the edge goes that way.
    """
    idx = edges.index
    u = np.asarray(idx.get_level_values(0), dtype=np.int64)
    v = np.asarray(idx.get_level_values(1), dtype=np.int64)
    k = np.asarray(idx.get_level_values(2), dtype=np.int64)
    names = edges["name"].fillna("").astype(str).to_numpy()
    out = pd.DataFrame({"u": u, "v": v, "key": k, "street": names})
    if unit == "segment":
        out["unit"] = [f"{a}-{b}-{c}" for a, b, c in zip(u, v, k, strict=True)]
        out["forward"] = True
        out["end_u"], out["end_v"], out["end_key"] = u, v, k
        return out
    lo, hi = np.minimum(u, v), np.maximum(u, v)
    pair, pairs = pd.factorize(pd.MultiIndex.from_arrays([lo, hi, k]), sort=True)
    pair_name = pd.Series(names).groupby(pair).first().to_numpy()
    parent = list(range(len(pairs)))

    def find(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    incident: dict[int, set[int]] = {}
    for p, (a, b, _) in enumerate(pairs):
        incident.setdefault(int(a), set()).add(p)
        incident.setdefault(int(b), set()).add(p)
    loop = np.array([a == b for a, b, _ in pairs])
    for node in sorted(incident):
        ps = sorted(incident[node])
        if len(ps) == 2 and not loop[ps].any() and pair_name[ps[0]] == pair_name[ps[1]]:
            ra, rb = find(ps[0]), find(ps[1])
            if ra != rb:
                parent[max(ra, rb)] = min(ra, rb)
    block = np.array([find(p) for p in range(len(pairs))])
    order: dict[int, dict[int, int]] = {}
    ids: dict[int, str] = {}
    ends: dict[int, tuple[int, int, int]] = {}
    seen: dict[str, int] = {}
    for b in sorted(set(block.tolist())):
        members = np.flatnonzero(block == b).tolist()
        pos, start, end = _walk_block([(int(pairs[p][0]), int(pairs[p][1])) for p in members])
        order[b] = pos
        name = f"{start}-{end}"
        seen[name] = seen.get(name, 0) + 1
        if seen[name] > 1:
            name = f"{name}~{seen[name]}"
        ids[b] = name
        ends[b] = (start, end, int(pairs[members[0]][2]))
    eb = block[pair]
    out["unit"] = [ids[b] for b in eb]
    out["forward"] = [order[b][a] <= order[b][c] for b, a, c in zip(eb, u, v, strict=True)]
    out["end_u"] = [ends[b][0] for b in eb]
    out["end_v"] = [ends[b][1] for b in eb]
    out["end_key"] = [ends[b][2] for b in eb]
    return out


def _walk_block(links: list[tuple[int, int]]) -> tuple[dict[int, int], int, int]:
    """Walk a run of node pairs from its smaller end; return node order, start and end node."""
    adj: dict[int, list[tuple[int, int]]] = {}
    for p, (a, c) in enumerate(links):
        adj.setdefault(a, []).append((p, c))
        adj.setdefault(c, []).append((p, a))
    tips = sorted(n for n, lst in adj.items() if len(lst) == 1)
    start = tips[0] if tips else min(adj)
    pos, cur, used = {start: 0}, start, set()
    while True:
        nxt = [(p, o) for p, o in adj[cur] if p not in used]
        if not nxt:
            break
        p, o = min(nxt)
        used.add(p)
        if o in pos:
            break
        pos[o] = len(pos)
        cur = o
    for a, c in links:  # nodes the walk missed (should not happen) keep a stable order
        pos.setdefault(a, len(pos))
        pos.setdefault(c, len(pos))
    return pos, start, tips[-1] if len(tips) > 1 else cur


def _unit_table(mem: pd.DataFrame) -> pd.DataFrame:
    """Sum the driven edges of each unit: events and km, in total and per direction."""
    d = mem[mem["km"] > 0].copy()
    fw = d["forward"].to_numpy(dtype=bool)
    d["events_forward"] = np.where(fw, d["events"], 0)
    d["events_backward"] = np.where(fw, 0, d["events"])
    d["km_forward"] = np.where(fw, d["km"], 0.0)
    d["km_backward"] = np.where(fw, 0.0, d["km"])
    g = d.groupby("unit", sort=True)
    sums = g[
        [
            "events",
            "km",
            "events_forward",
            "events_backward",
            "km_forward",
            "km_backward",
            "wkm_modelled",
            "wkm_distance",
        ]
    ].sum()
    main = (
        d.sort_values(["unit", "km"], ascending=[True, False], kind="stable")
        .groupby("unit", sort=True)
        .first()
    )  # band and street of the member driven most
    out = sums.join(main[["street", "band", "end_u", "end_v", "end_key"]]).reset_index()
    return out.rename(columns={"end_u": "u", "end_v": "v", "end_key": "key"})

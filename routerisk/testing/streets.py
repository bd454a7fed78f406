"""The streets of the invented city: crossings, signals, shape nodes, driveways, tags and ways.

:func:`segment_flags` decides in bulk which block sides get crossings, shape nodes, driveways,
school zones and way breaks; :func:`streets` then emits every grid line as ways (split where
tags change or at random intersections), the dead-end stubs and the block diagonals.
"""

from __future__ import annotations

import math

import numpy as np

from routerisk.testing.city import City, pick
from routerisk.testing.grid import COL, HIGHWAY, RES, SEC

_P_BREAK = 0.18  # chance that a way ends at an intersection although tags do not change
_CROSS_OFFSET = 12.0  # metres from the intersection to a crossing node on an arm

_CROSS_TAGS: tuple[dict[str, str], ...] = (
    {},
    {"highway": "crossing", "crossing": "traffic_signals"},
    {"highway": "crossing", "crossing": "uncontrolled"},
    {"highway": "crossing", "crossing": "marked"},
    {"highway": "crossing", "crossing": "unmarked"},
    {"highway": "crossing", "crossing": "marked", "crossing_ref": "zebra"},
)
_SIGNALS = {"highway": "traffic_signals"}

_MAXSPEED: dict[str, tuple[tuple[str | None, ...], tuple[float, ...]]] = {
    "residential": (
        ("25 mph", None, "20 mph", "40", "30", "15 mph"),
        (0.45, 0.32, 0.06, 0.10, 0.04, 0.03),
    ),
    "living_street": (("walk", None, "10 mph"), (0.6, 0.25, 0.15)),
    "tertiary": (("30 mph", "35 mph", "50", None), (0.35, 0.35, 0.15, 0.15)),
    "secondary": (("40 mph", "45 mph", "70", "60", None), (0.45, 0.25, 0.15, 0.05, 0.10)),
    "primary": (("45 mph", "40 mph", "70", None), (0.45, 0.20, 0.20, 0.15)),
}
_SCHOOL_CONDITIONAL = "20 mph @ (Mo-Fr 07:00-09:00,14:00-16:00)"


def segment_flags(city: City) -> None:
    """Decide crossings, shape nodes and driveways of every block side in bulk."""
    lay, rng = city.lay, city.rng
    rc, cc, nbr, keep = lay.row_cls, lay.col_cls, lay.nbr, lay.keep
    rr = rc[:, None]
    cm = cc[None, :]
    major = np.maximum(rr, cm)
    minor = np.minimum(rr, cm)
    signal = (
        keep
        & (nbr >= 3)
        & (
            ((major >= SEC) & (minor >= COL))
            | ((major == COL) & (minor == COL) & (rng.random(nbr.shape) < 0.3))
        )
    )
    city.signal = signal
    for k in np.flatnonzero(signal.ravel()).tolist():
        city.grid_tags[k] = _SIGNALS
    # arterial x minor-street intersections: some arterial arms get a plain crossing
    plain = keep & (nbr >= 3) & ~signal

    def arm_codes(line_art: np.ndarray, node_plain: np.ndarray, node_sig: np.ndarray):
        shape = node_plain.shape
        p = rng.random(shape) < 0.35
        kind = rng.integers(2, 5, shape).astype(np.int8)
        code = np.where(node_sig, 1, np.where(node_plain & p & line_art, kind, 0))
        return code.astype(np.int8)

    # horizontal sides: lines are rows; node arrays (ny, nx)
    h_code = arm_codes(np.broadcast_to((rc >= SEC)[:, None], plain.shape), plain, signal)
    city.h_x0 = h_code[:, :-1]
    city.h_x1 = arm_codes(np.broadcast_to((rc >= SEC)[:, None], plain.shape), plain, signal)[:, 1:]
    pt, st = plain.T, signal.T
    v_art = np.broadcast_to((cc >= SEC)[:, None], pt.shape)
    city.v_x0 = arm_codes(v_art, pt, st)[:, :-1]
    city.v_x1 = arm_codes(v_art, pt, st)[:, 1:]
    # schools: a marked crossing in the middle of each side and a school-zone tag
    city.h_school = np.zeros(lay.h_on.shape, bool)
    city.v_school = np.zeros(lay.v_on.shape, bool)
    for j, i in city.schools:
        city.h_school[j, i] = city.h_school[j + 1, i] = True
        city.v_school[i, j] = city.v_school[i + 1, j] = True
    city.h_school &= lay.h_on
    city.v_school &= lay.v_on

    def shapes(line_cls: np.ndarray, shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
        c = np.broadcast_to(line_cls[:, None], shape)
        curved = np.where(c == RES, 0.3, np.where(c == COL, 0.15, 0.0))
        n = np.where(rng.random(shape) < curved, rng.integers(1, 4, shape), 0)
        amp = rng.normal(0.0, np.where(c == RES, 4.0, 2.0))
        return n.astype(np.int8), amp

    city.h_nshape, city.h_amp = shapes(rc, lay.h_on.shape)
    city.v_nshape, city.v_amp = shapes(cc, lay.v_on.shape)

    def driveways(line_cls: np.ndarray, on: np.ndarray) -> np.ndarray:
        c = np.broadcast_to(line_cls[:, None], on.shape)
        t = rng.uniform(0.25, 0.75, on.shape)
        t[~(on & (c == RES) & (rng.random(on.shape) < 0.025))] = np.nan
        return t

    city.h_drive = driveways(rc, lay.h_on)
    city.v_drive = driveways(cc, lay.v_on)
    city.h_break = rng.random(lay.h_on.shape) < _P_BREAK
    city.v_break = rng.random(lay.v_on.shape) < _P_BREAK


def _street_tags(city: City, cls: int, name: str, oneway: bool, school: bool) -> dict[str, str]:
    pr = city.pr
    hw = HIGHWAY[cls]
    if cls == RES and not oneway and pr.random() < 0.03:
        hw = "living_street"
    tags = {"highway": hw}
    if not (cls == RES and pr.random() < 0.03):
        tags["name"] = name
    speed = pick(pr, *_MAXSPEED[hw])
    if speed is not None:
        tags["maxspeed"] = speed
    if oneway:
        tags["oneway"] = "yes"
    if cls >= SEC:
        lanes = ("2", "3") if oneway else ("4", "2", "3")
        probs = (0.6, 0.4) if oneway else (0.55, 0.35, 0.10)
        tags["lanes"] = pick(pr, lanes, probs)
        tags["sidewalk"] = "separate" if pr.random() < 0.25 else "both"
    elif cls == COL:
        if pr.random() < 0.5:
            tags["lanes"] = "2"
        tags["sidewalk"] = "both"
    else:
        sw = pick(pr, ("both", "no", None, "left"), (0.5, 0.15, 0.3, 0.05))
        if sw is not None:
            tags["sidewalk"] = sw
    if school:
        tags["hazard"] = "school_zone"
        if pr.random() < 0.6:
            tags["maxspeed:conditional"] = _SCHOOL_CONDITIONAL
    return tags


def _side_nodes(
    city: City, ka: int, kb: int, nshape: int, amp: float, x0: int, x1: int, school: bool, dt: float
) -> list[int]:
    """Create the intermediate nodes of one block side from node ``ka`` to ``kb``."""
    ax, ay, bx, by = city.xl[ka], city.yl[ka], city.xl[kb], city.yl[kb]
    dx, dy = bx - ax, by - ay
    length = math.hypot(dx, dy)
    if nshape == 0 and not (x0 or x1 or school) and dt != dt:
        return []
    nxv, nyv = -dy / length, dx / length
    pts: list[tuple[float, dict[str, str] | None, bool]] = [
        (q / (nshape + 1), None, False) for q in range(1, nshape + 1)
    ]
    off = min(_CROSS_OFFSET / length, 0.2)
    if x0:
        pts.append((off, _CROSS_TAGS[x0], False))
    if x1:
        pts.append((1.0 - off, _CROSS_TAGS[x1], False))
    if school:
        pts.append((0.42, _CROSS_TAGS[5 if city.pr.random() < 0.5 else 3], False))
    elif dt == dt:
        pts.append((dt, None, True))
    pts.sort(key=lambda p: p[0])
    ids = []
    for t, tags, drive in pts:
        o = amp * math.sin(math.pi * t)
        px, py = ax + dx * t + nxv * o, ay + dy * t + nyv * o
        nid = city.out.node(px, py, tags or None)
        ids.append(nid)
        if tags:
            city.out.count("crossing")
        if drive:
            side = 1.0 if city.pr.random() < 0.5 else -1.0
            dlen = city.pr.uniform(20.0, 30.0)
            tip = city.out.node(px + nxv * side * dlen, py + nyv * side * dlen)
            city.out.way([nid, tip], {"highway": "service", "service": "driveway"})
            city.out.count("driveway")
    return ids


def streets(city: City) -> None:
    """Emit every street way: grid lines, stubs and diagonals."""
    lay = city.lay
    nx, ny = lay.nx, lay.ny
    for j in range(ny):
        ks = [j * nx + i for i in range(nx)]
        _line(city, ks, int(lay.row_cls[j]), city.row_names[j], lay.h_on[j], lay.h_ow[j],
                   city.h_break[j], city.h_nshape[j], city.h_amp[j], city.h_x0[j],
                   city.h_x1[j], city.h_school[j], city.h_drive[j])  # fmt: skip
    for i in range(nx):
        ks = [j * nx + i for j in range(ny)]
        _line(city, ks, int(lay.col_cls[i]), city.col_names[i], lay.v_on[i], lay.v_ow[i],
                   city.v_break[i], city.v_nshape[i], city.v_amp[i], city.v_x0[i],
                   city.v_x1[i], city.v_school[i], city.v_drive[i])  # fmt: skip
    _stubs(city)
    _diagonals(city)


def _line(city: City, ks: list[int], cls: int, name: str, *arrays: np.ndarray) -> None:
    on, ow, brk, nshape, amp, x0, x1, school, drive = (a.tolist() for a in arrays)
    m = len(on)
    i = 0
    while i < m:
        if not on[i]:
            i += 1
            continue
        start, d = i, ow[i]
        i += 1
        while i < m and on[i] and ow[i] == d and not brk[i]:
            i += 1
        refs = [ks[start] + 1]
        for s in range(start, i):
            refs.extend(
                _side_nodes(
                    city, ks[s], ks[s + 1], nshape[s], amp[s], x0[s], x1[s], school[s], drive[s]
                )  # fmt: skip
            )
            refs.append(ks[s + 1] + 1)
        if d < 0:
            refs.reverse()
        zone = any(school[start:i])
        city.out.way(refs, _street_tags(city, cls, name, d != 0, zone))
        city.out.count(f"way_{HIGHWAY[cls]}")


def _stubs(city: City) -> None:
    lay, pr, nx = city.lay, city.pr, city.lay.nx
    for stub, is_h in ((lay.h_stub, True), (lay.v_stub, False)):
        for p, q in np.argwhere(stub.any(axis=2)).tolist():
            if is_h:
                ka, kb, name = p * nx + q, p * nx + q + 1, city.row_names[p]
            else:
                ka, kb, name = q * nx + p, (q + 1) * nx + p, city.col_names[p]
            for end, (k0, k1) in enumerate(((ka, kb), (kb, ka))):
                if not stub[p, q, end]:
                    continue
                f = pr.uniform(0.28, 0.4)
                tx = city.xl[k0] + (city.xl[k1] - city.xl[k0]) * f
                ty = city.yl[k0] + (city.yl[k1] - city.yl[k0]) * f
                tip_tags = {"highway": "turning_circle"} if pr.random() < 0.3 else None
                tip = city.out.node(tx, ty, tip_tags)
                tags = {"highway": "residential", "name": name}
                if pr.random() < 0.6:
                    tags["maxspeed"] = "25 mph"
                city.out.way([k0 + 1, tip], tags)
                city.out.count("stub")


def _diagonals(city: City) -> None:
    lay, pr, nx = city.lay, city.pr, city.lay.nx
    for j, i in np.argwhere(lay.d_on).tolist():
        if lay.d_dir[j, i] == 0:
            ka, kb = j * nx + i, (j + 1) * nx + i + 1
        else:
            ka, kb = j * nx + i + 1, (j + 1) * nx + i
        ax, ay, bx, by = city.xl[ka], city.yl[ka], city.xl[kb], city.yl[kb]
        dx, dy = bx - ax, by - ay
        length = math.hypot(dx, dy)
        amp = pr.gauss(0.0, 10.0)
        n = pr.randrange(2, 4)
        refs = [ka + 1]
        for q in range(1, n + 1):
            t = q / (n + 1)
            o = amp * math.sin(math.pi * t)
            px, py = ax + dx * t - dy / length * o, ay + dy * t + dx / length * o
            refs.append(city.out.node(px, py))
        refs.append(kb + 1)
        tags = {"highway": "residential", "name": f"{city.names.word()} Crescent"}
        if pr.random() < 0.5:
            tags["maxspeed"] = "25 mph"
        city.out.way(refs, tags)
        city.out.count("diagonal")

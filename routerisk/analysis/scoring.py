"""Time-aware pedestrian-exposure risk of edges and routes.

The risk of an edge entered at minute ``t`` of the week (area local time, Monday 00:00 = 0):

    risk = speed_factor * (length_km * (baseline * mult_b(t)
                                        + sum_c weight_c * mult_c(t) * exp_c)
                           + crossing_weight * mult_x(t) * crossings)

split into parts: ``baseline``, ``crossings`` and one per category. ``mult_b`` and ``mult_x``
are the profile's optional baseline and crossing time profiles (1 when unset). The speed
factor is the severity given a crash (Tefft 2013) times, when the profile turns it on, the
crash likelihood by speed (power model): :func:`speed_factor`.

The relative index of a route is its risk over the risk of as many km of the area's average
street at the same minutes under the same profile; it cannot be compared across profiles.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from routerisk.io.timezones import YEARS
from routerisk.profile import MINUTES_PER_WEEK, Profile


def minute_of_week(ts: pd.Timestamp | pd.DatetimeIndex | pd.Series) -> np.ndarray:
    """Return minutes since Monday 00:00 of local timestamps (int array)."""
    t = (
        pd.DatetimeIndex(np.atleast_1d(ts))
        if not isinstance(ts, pd.Series)
        else (pd.DatetimeIndex(ts))
    )
    return ((t.day_of_week * 1440 + t.hour * 60 + t.minute).to_numpy() % MINUTES_PER_WEEK).astype(
        np.int64
    )


#: How the relative index reads, said beside it on every output.
RELATIVE_INDEX_NOTE = (
    "relative index: route risk against as many km of the average street of the area at the "
    "same minutes under the same profile (1.0 = as exposed as the area then); it cannot be "
    "compared across profiles"
)


def model_note(profile: Profile) -> str:
    """Return one line naming the parts of "risk" the profile models and those it does not."""
    timed = [
        what
        for what, name in (
            ("baseline", profile.baseline_time_profile),
            ("crossings", profile.crossing_time_profile),
        )
        if name
    ]
    exposure = (
        "exposure (street baseline, crossings and nearby land uses by time of week"
        + (
            f"; {' and '.join(timed)} timed too"
            if timed
            else "; baseline and crossings constant over the week"
        )
        + ")"
    )
    severity = (
        f"severity given a crash (Tefft 2013, {profile.severity_outcome.replace('_', ' ')}"
        f", reference {profile.reference_mph:g} mph)"
    )
    like = profile.likelihood
    likelihood = (
        "crash likelihood by speed (power model, Nilsson 2004 as re-estimated by "
        f"Elvik 2009: {like.crashes.replace('_', ' ')} exponent {like.exponent:g}, "
        f"reference {like.reference_mph:g} mph)"
        if like is not None
        else None
    )
    modelled = ", ".join(x for x in (exposure, severity, likelihood) if x)
    missing = (
        "" if like is not None else "crash likelihood by speed (off in this profile), "
    ) + "traffic and pedestrian counts, sight lines, driver or vehicle behaviour"
    return f"modelled: {modelled}; not modelled: {missing}"


def speed_factor(edges: pd.DataFrame) -> np.ndarray:
    """Return each edge's speed factor: severity given a crash x crash likelihood by speed.

    The likelihood column is written by tagging; a network tagged without one counts 1.
    """
    sev = edges["severity"].to_numpy(dtype=float)
    if "likelihood" in edges:
        sev = sev * edges["likelihood"].to_numpy(dtype=float)
    return sev


def edge_risk_parts(
    edges: pd.DataFrame, profile: Profile, minutes: np.ndarray | int
) -> pd.DataFrame:
    """Return the risk parts of each edge row driven at the given minute(s) of the week.

    Parameters
    ----------
    edges
        Tagged edges (``length``, ``severity``, ``baseline``, ``crossings``, ``exp_<cat>``).
    profile
        The profile the edges were tagged with.
    minutes
        One minute of the week for all rows, or one per row.
    """
    n = len(edges)
    mins = np.broadcast_to(np.asarray(minutes, dtype=np.int64), (n,))
    mult = profile.multipliers(mins)
    base_mult, cross_mult = profile.street_multipliers(mins)
    sev = speed_factor(edges)
    km = edges["length"].to_numpy(dtype=float) / 1000.0
    parts = {"baseline": sev * km * edges["baseline"].to_numpy(dtype=float) * base_mult}
    for j, c in enumerate(profile.categories):
        parts[c.name] = (
            sev * km * c.weight * mult[:, j] * edges[f"exp_{c.name}"].to_numpy(dtype=float)
        )
    parts["crossings"] = (
        sev * profile.crossing_weight * cross_mult * edges["crossings"].to_numpy(dtype=float)
    )
    out = pd.DataFrame(parts, index=edges.index)
    out["total"] = out.sum(axis=1)
    return out


def rules_in_force(edges: pd.DataFrame, profile: Profile, minutes: np.ndarray | int) -> np.ndarray:
    """Return an (n_edges, n_rules) bool array: rule covers the edge and is in force then."""
    n = len(edges)
    mins = np.broadcast_to(np.asarray(minutes, dtype=np.int64), (n,)) % MINUTES_PER_WEEK
    cols = []
    for i, rule in enumerate(profile.rules):
        cover = edges[f"rule_{i}"].to_numpy(dtype=bool)
        cols.append(cover & rule.by_minute[mins])
    return np.stack(cols, axis=1) if cols else np.zeros((n, 0), dtype=bool)


# ----------------------------------------------------------------------------- routes

import datetime as _dt  # noqa: E402
import re  # noqa: E402
from dataclasses import dataclass, field  # noqa: E402
from typing import Any  # noqa: E402

#: A turn counts as a left turn across traffic when the heading changes by this much to
#: the left (degrees) at a node where the vehicle had another way to go (right-hand traffic).
LEFT_TURN_MIN_DEG = 45.0
LEFT_TURN_MAX_DEG = 150.0
HOTSPOTS = 5


@dataclass
class RouteScore:
    """The score of one route at one departure time."""

    name: str
    depart: _dt.datetime
    length_km: float
    duration_min: float
    risk: float
    risk_per_km: float
    relative_index: float
    by_category: dict[str, float]
    share_in_influence: dict[str, float]
    crossings: float
    left_turns: int
    rule_breaks: list[dict[str, Any]]
    hotspots: list[dict[str, Any]]
    segments: pd.DataFrame = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form (the keys of ``routerisk score --json``)."""
        r = _round
        return {
            "name": self.name,
            "depart": self.depart.isoformat(),
            "length_km": r(self.length_km),
            "duration_min": r(self.duration_min),
            "risk": r(self.risk),
            "risk_per_km": r(self.risk_per_km),
            "relative_index": r(self.relative_index),
            "by_category": {k: r(v) for k, v in self.by_category.items()},
            "share_in_influence": {k: r(v) for k, v in self.share_in_influence.items()},
            "crossings": r(self.crossings),
            "left_turns": self.left_turns,
            "rule_breaks": self.rule_breaks,
            "hotspots": self.hotspots,
        }


def _round(x: float, nd: int = 6) -> float:
    return float(round(float(x), nd))


class Scorer:
    """Score edge sequences on a tagged network, time-aware, with numpy arrays.

    Parameters
    ----------
    net
        A tagged :class:`routerisk.network.folder.Network`.
    """

    def __init__(self, net: Any) -> None:
        self.net = net
        prof = net.profile
        self.profile = prof
        e = net.edges
        self.index = e.index
        self.km = e["length"].to_numpy(dtype=float) / 1000.0
        self.tt = e["travel_time"].to_numpy(dtype=float)
        self.sev = speed_factor(e)  # severity given a crash x likelihood (when set)
        self.base = e["baseline"].to_numpy(dtype=float)
        self.cross = e["crossings"].to_numpy(dtype=float)
        self.names = e["name"].fillna("").astype(str).to_numpy()
        self.cats = list(prof.category_names)
        self.exp = np.column_stack([e[f"exp_{c}"].to_numpy(dtype=float) for c in self.cats])
        self.infl = np.column_stack([e[f"infl_{c}"].to_numpy(dtype=float) for c in self.cats])
        self.w = np.array([c.weight for c in prof.categories])
        ones = np.ones(MINUTES_PER_WEEK)
        self.mult_table = np.stack(
            [
                (prof.time_profile(c.time_profile).by_minute if c.time_profile else ones)
                for c in prof.categories
            ]
        )  # (C, 10080)
        self.base_mult = prof.by_minute_of(prof.baseline_time_profile)  # (10080,)
        self.cross_mult = prof.by_minute_of(prof.crossing_time_profile)  # (10080,)
        self.rule_cover = (
            np.column_stack([e[f"rule_{i}"].to_numpy(dtype=bool) for i in range(len(prof.rules))])
            if prof.rules
            else np.zeros((len(e), 0), dtype=bool)
        )
        self.rule_time = (
            np.stack([r.by_minute for r in prof.rules])
            if prof.rules
            else (np.zeros((0, MINUTES_PER_WEEK), dtype=bool))
        )
        # network-wide sums for the relative index (linear in the multipliers)
        total_km = self.km.sum()
        self.avg_base = float((self.sev * self.km * self.base).sum()) / total_km
        self.avg_cross = float((self.sev * prof.crossing_weight * self.cross).sum()) / total_km
        self.avg_fixed = (
            float(
                (self.sev * self.km * self.base).sum()
                + (self.sev * prof.crossing_weight * self.cross).sum()
            )
            / total_km
        )  # both untimed
        self._street_timed = bool(prof.baseline_time_profile or prof.crossing_time_profile)
        self.avg_cat = (self.sev * self.km) @ (self.exp * self.w) / total_km  # (C,)
        self.tz = net.timezone
        nodes = net.nodes
        self.node_xy = {
            n: (x, y) for n, x, y in zip(nodes.index, nodes["x"], nodes["y"], strict=True)
        }
        self.out_degree = pd.Series(self.index.get_level_values(0)).value_counts().to_dict()
        self._geoms = e.geometry.to_numpy()
        self._bands = e["band"].to_numpy()
        self._row_of: dict[tuple[int, int, int], int] | None = None
        self._heads: tuple[np.ndarray, np.ndarray] | None = None
        import pyproj

        self._to_ll = pyproj.Transformer.from_crs(e.crs, "EPSG:4326", always_xy=True)

    def positions(self, edges: list[tuple[int, int, int]]) -> np.ndarray:
        """Return row positions of (u, v, key) edges; raise KeyError for unknown ones."""
        if self._row_of is None:
            self._row_of = {(int(u), int(v), int(k)): i for i, (u, v, k) in enumerate(self.index)}
        row_of = self._row_of
        try:
            return np.fromiter(
                (row_of[(int(e[0]), int(e[1]), int(e[2]))] for e in edges),
                dtype=np.int64,
                count=len(edges),
            )
        except KeyError as exc:
            raise KeyError(f"edge {exc.args[0]} is not in the network") from None

    def network_risk_per_km(self, minutes: np.ndarray) -> np.ndarray:
        """Return the network's length-weighted average risk per km at each minute."""
        m = np.asarray(minutes) % MINUTES_PER_WEEK
        mult = self.mult_table[:, m].T  # (n, C)
        if not self._street_timed:  # the same sum, bit for bit, as before the street profiles
            return self.avg_fixed + mult @ self.avg_cat
        return (
            self.avg_base * self.base_mult[m]
            + self.avg_cross * self.cross_mult[m]
            + mult @ self.avg_cat
        )

    def score(
        self,
        name: str,
        edges: list[tuple[int, int, int]],
        depart: _dt.datetime,
        *,
        fractions: np.ndarray | None = None,
    ) -> RouteScore:
        """Score a route given as edges driven in order from ``depart`` (aware datetime).

        ``fractions`` gives the share of each edge driven (partial first and last edges);
        length, time and crossings of a partial edge scale with it.
        """
        pos = self.positions(edges)
        frac, km, tt, enter_s, local, minutes = self._timeline(pos, depart, fractions)
        mult = self.mult_table[:, minutes].T  # (n, C)
        sev = self.sev[pos]
        cat_parts = (sev * km)[:, None] * self.w[None, :] * mult * self.exp[pos]
        base_part = sev * km * self.base[pos] * self.base_mult[minutes]
        cross_part = (
            sev * self.profile.crossing_weight * self.cross[pos] * frac * self.cross_mult[minutes]
        )
        total = base_part + cat_parts.sum(axis=1) + cross_part
        risk = float(total.sum())
        length_km = float(km.sum())
        expected = float((km * self.network_risk_per_km(minutes)).sum())
        times = [local + _dt.timedelta(seconds=float(s)) for s in enter_s]
        cols: dict[str, Any] = {
            "seq": np.arange(len(pos)),
            "u": [e[0] for e in edges],
            "v": [e[1] for e in edges],
            "key": [e[2] for e in edges],
            "street": self.names[pos],
            "length_m": km * 1000.0,
            "time": [t.isoformat(timespec="seconds") for t in times],
            "risk": total,
            "baseline": base_part,
            "crossings": self.cross[pos] * frac,
            "crossing_part": cross_part,
            "band": self._bands[pos],
        }
        for j, c in enumerate(self.cats):
            cols[f"part_{c}"] = cat_parts[:, j]
            cols[f"infl_{c}"] = self.infl[pos, j]
        cols["_pos"] = pos
        seg = pd.DataFrame(cols)
        by_cat = {"baseline": float(base_part.sum()), "crossings": float(cross_part.sum())}
        by_cat.update({c: float(cat_parts[:, j].sum()) for j, c in enumerate(self.cats)})
        share = {
            c: float((km * self.infl[pos, j]).sum() / length_km) if length_km else 0.0
            for j, c in enumerate(self.cats)
        }
        return RouteScore(
            name=name,
            depart=local,
            length_km=length_km,
            duration_min=float(tt.sum() / 60.0),
            risk=risk,
            risk_per_km=risk / length_km if length_km else 0.0,
            relative_index=risk / expected if expected else 0.0,
            by_category=by_cat,
            share_in_influence=share,
            crossings=float((self.cross[pos] * frac).sum()),
            left_turns=self.left_turns(edges),
            rule_breaks=self.rule_breaks(pos, minutes, times, edges),
            hotspots=self.hotspots(seg, cat_parts, base_part, cross_part),
            segments=seg,
        )

    def _timeline(
        self, pos: np.ndarray, depart: _dt.datetime, fractions: np.ndarray | None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, _dt.datetime, np.ndarray]:
        """Return shares, km, seconds, entry offsets, local departure and entry minutes."""
        frac = np.ones(len(pos)) if fractions is None else np.asarray(fractions, dtype=float)
        km = self.km[pos] * frac
        tt = self.tt[pos] * frac
        enter_s = np.concatenate([[0.0], np.cumsum(tt)[:-1]])
        local = depart.astimezone(self.tz)
        m0 = local.weekday() * 1440 + local.hour * 60 + local.minute + local.second / 60.0
        minutes = np.floor(m0 + enter_s / 60.0).astype(np.int64) % MINUTES_PER_WEEK
        return frac, km, tt, enter_s, local, minutes

    def quick(
        self, pos: np.ndarray, depart: _dt.datetime, *, fractions: np.ndarray | None = None
    ) -> tuple[float, float, int]:
        """Return (risk, duration in minutes, number of rule breaks) without the details.

        The same arithmetic as :meth:`score`, for screening many candidate start times.
        """
        frac, km, tt, enter_s, local, minutes = self._timeline(pos, depart, fractions)
        mult = self.mult_table[:, minutes].T
        sev = self.sev[pos]
        risk = float(
            (
                sev
                * km
                * (self.base[pos] * self.base_mult[minutes] + (mult * self.exp[pos]) @ self.w)
            ).sum()
            + (
                sev
                * self.profile.crossing_weight
                * self.cross[pos]
                * frac
                * self.cross_mult[minutes]
            ).sum()
        )
        breaks = 0
        if self.profile.rules:
            breaks = int((self.rule_cover[pos] & self.rule_time[:, minutes].T).sum())
        return risk, float(tt.sum() / 60.0), breaks

    def rule_breaks(
        self,
        pos: np.ndarray,
        minutes: np.ndarray,
        times: list[_dt.datetime],
        edges: list[tuple[int, int, int]],
    ) -> list[dict[str, Any]]:
        """Return one record per edge driven while a hard rule covering it is in force."""
        if not self.profile.rules:
            return []
        hit = self.rule_cover[pos] & self.rule_time[:, minutes].T  # (n, R)
        out = []
        for i, j in zip(*np.nonzero(hit), strict=True):
            mid = self._geoms[pos[i]].interpolate(0.5, normalized=True)
            lon, lat = self._to_ll.transform(mid.x, mid.y)
            out.append(
                {
                    "rule": self.profile.rules[j].name,
                    "street": str(self.names[pos[i]]),
                    "edge": [int(x) for x in edges[i]],
                    "time": times[i].isoformat(timespec="seconds"),
                    "lon": _round(lon, 7),
                    "lat": _round(lat, 7),
                }
            )
        return out

    def hotspots(
        self,
        seg: pd.DataFrame,
        cat_parts: np.ndarray,
        base_part: np.ndarray,
        cross_part: np.ndarray,
        n: int = HOTSPOTS,
    ) -> list[dict[str, Any]]:
        """Return the ``n`` segments that contribute most risk, with the reasons."""
        total = seg["risk"].to_numpy()
        seq = seg["seq"].to_numpy()
        street, tcol = seg["street"].to_numpy(), seg["time"].to_numpy()
        u, v, k = (seg[c].to_numpy() for c in ("u", "v", "key"))
        order = np.lexsort((seq, -total))[:n]
        labels = [c.label for c in self.profile.categories]  # in the order of self.cats
        grand = total.sum()
        out = []
        for i in order:
            parts = {lab: cat_parts[i, j] for j, lab in enumerate(labels)}
            parts["street baseline"] = base_part[i]
            parts["crossings"] = cross_part[i]
            reasons = [
                k_
                for k_, val in sorted(parts.items(), key=lambda kv: (-kv[1], kv[0]))
                if val > 0.05 * total[i]
            ][:3]
            out.append(
                {
                    "street": str(street[i]),
                    "seq": int(seq[i]),
                    "edge": [int(u[i]), int(v[i]), int(k[i])],
                    "risk": _round(total[i]),
                    "time": tcol[i],
                    "share": _round(total[i] / grand if grand else 0.0),
                    "reasons": reasons,
                }
            )
        return out

    def _headings(self) -> tuple[np.ndarray, np.ndarray]:
        """Return each edge's heading (radians) leaving its start and reaching its end."""
        if self._heads is None:
            import shapely

            xy, which = shapely.get_coordinates(self._geoms, return_index=True)
            first = np.searchsorted(which, np.arange(len(self._geoms)))
            last = np.searchsorted(which, np.arange(len(self._geoms)), side="right") - 1
            start = np.arctan2(xy[first + 1, 1] - xy[first, 1], xy[first + 1, 0] - xy[first, 0])
            end = np.arctan2(xy[last, 1] - xy[last - 1, 1], xy[last, 0] - xy[last - 1, 0])
            self._heads = (start, end)
        return self._heads

    def left_turns(self, edges: list[tuple[int, int, int]]) -> int:
        """Count left turns across traffic between consecutive edges (right-hand traffic)."""
        if len(edges) < 2:
            return 0
        pos = self.positions(edges)
        start, end = self._headings()
        a, b = end[pos[:-1]], start[pos[1:]]
        turn = np.degrees((b - a + np.pi) % (2 * np.pi) - np.pi)  # + = left
        junction = np.fromiter(
            (self.out_degree.get(e[1], 0) >= 3 for e in edges[:-1]),
            dtype=bool,
            count=len(edges) - 1,
        )  # else no choice there
        return int((junction & (turn >= LEFT_TURN_MIN_DEG) & (turn <= LEFT_TURN_MAX_DEG)).sum())


_DATE_ONLY = re.compile(r"\d{4}-?\d{2}-?\d{2}")


def parse_depart(text: str, tz: Any) -> _dt.datetime:
    """Parse an ISO 8601 departure; a value without offset is local time in ``tz``."""
    from routerisk.errors import OptionError

    if _DATE_ONLY.fullmatch(text.strip()):
        raise OptionError(
            f"{text.strip()!r} is a date without a time (it would mean midnight); "
            f"give the time too, e.g. {text.strip()}T08:00",
            field="--depart",
        )
    try:
        t = _dt.datetime.fromisoformat(text.strip())
    except ValueError as exc:
        raise OptionError(
            f"not an ISO 8601 date and time: {text!r} (e.g. 2027-03-09T08:05)", field="--depart"
        ) from exc
    if not YEARS[0] <= t.year <= YEARS[1]:
        raise OptionError(
            f"year {t.year} is outside {YEARS[0]}-{YEARS[1]}: {text!r}", field="--depart"
        )
    return t.replace(tzinfo=tz) if t.tzinfo is None else t


def score_routes(
    net: Any,
    routes: list[Any],
    departs: list[_dt.datetime] | None = None,
    *,
    index: Any = None,
    scorer: Scorer | None = None,
) -> list[RouteScore]:
    """Score planned routes (from :func:`routerisk.io.routes.read_routes`) on a network.

    Each route is scored at every time in ``departs``; without any, at its own ``depart``.
    ``index`` and ``scorer`` (a :class:`matching.RoadIndex` and a :class:`Scorer` of ``net``)
    may be given to reuse them across calls.
    """
    from routerisk import matching
    from routerisk.errors import RouteInputError

    idx = index or matching.RoadIndex.of_network(net)
    scorer = scorer or Scorer(net)
    out = []
    for r, matched in zip(routes, matching.to_edges_many(idx, routes), strict=True):
        times = departs or ([r.depart] if r.depart is not None else [])
        if not times:
            raise RouteInputError(
                "no departure time: give --depart or a 'depart' property",
                path=r.source or None,
                field=f"route {r.name!r}",
            )
        for t in times:
            out.append(
                scorer.score(
                    r.name, list(matched.edges), t, fractions=np.asarray(matched.fractions)
                )
            )
    return out

"""How sure a ranking is: route risk under draws of the profile's weights.

A route's risk is linear in the category weights (:mod:`routerisk.analysis.scoring`)::

    risk = fixed + sum_c weight_c * unit_c

where ``fixed`` is the baseline and crossing part and ``unit_c`` the route's category-``c``
part at weight 1 (severity x km x time multiplier x exposure, summed over the edges as
driven). Each route's parts are computed once; a draw of the weights is a dot product.

Weights are drawn from the profile's ``uncertainty`` block (multivariate normal centred on
the weights, with its covariance; a draw below zero is set to zero, as weights are not
negative) and from weight ranges (``weight: {low, high, spread}``: uniform, or log-uniform
i.e. uniform in the logarithm). Other weights stay fixed. Variance-based sensitivity
(first-order and total Sobol indices; Saltelli et al. 2010 first-order and Jansen 1999
total estimators, as SALib computes them) treats the weights as independent, each drawn
from its own marginal distribution: the indices ignore the correlation of fitted weights.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any

import numpy as np

from routerisk.errors import OptionError
from routerisk.profile import Profile

#: Seed used when none is given (recorded in every output).
DEFAULT_SEED = 1
LEVEL = 0.90
#: Base sample of the Sobol estimates (each costs (2 + weights) model runs per draw).
SOBOL_DRAWS = 2000


@dataclass(frozen=True)
class WeightLaw:
    """Which weights vary and how: normal block, ranges, fixed values."""

    names: tuple[str, ...]  # every category, profile order
    centre: np.ndarray  # the profile's weights
    normal: tuple[int, ...]  # indices drawn jointly normal
    cov: np.ndarray  # covariance of the normal block
    ranges: tuple[tuple[int, float, float, str], ...]  # (index, low, high, spread)

    @property
    def varying(self) -> tuple[int, ...]:
        """Return the indices of the weights that vary, in profile order."""
        return tuple(sorted([*self.normal, *(r[0] for r in self.ranges)]))


def weight_law(profile: Profile) -> WeightLaw:
    """Return the law of the weights given by ``profile`` (refuse one with none)."""
    names = profile.category_names
    centre = np.array([c.weight for c in profile.categories], dtype=float)
    normal: tuple[int, ...] = ()
    cov = np.zeros((0, 0))
    if profile.uncertainty is not None:
        normal = tuple(names.index(n) for n in profile.uncertainty.weights)
        cov = np.array(profile.uncertainty.covariance, dtype=float)
    ranges = tuple(
        (i, *c.weight_range) for i, c in enumerate(profile.categories) if c.weight_range is not None
    )
    if not normal and not ranges:
        raise OptionError(
            "--uncertainty needs a profile with an 'uncertainty' block (from 'routerisk "
            "calibrate') or weight ranges such as weight: {low: 0.5, high: 2.0}",
            path=profile.source or None,
            field="--uncertainty",
        )
    return WeightLaw(names, centre, normal, cov, ranges)


def _range_draws(u: np.ndarray, low: float, high: float, spread: str) -> np.ndarray:
    if spread == "log-uniform":
        return np.exp(np.log(low) + u * (np.log(high) - np.log(low)))
    return low + u * (high - low)


def draw_weights(
    law: WeightLaw, n: int, rng: np.random.Generator, *, independent: bool = False
) -> np.ndarray:
    """Return ``(n, categories)`` weight draws (fixed weights repeated).

    With ``independent`` the normal block is drawn from its marginals (for Sobol indices).
    """
    w = np.tile(law.centre, (n, 1))
    if law.normal:
        idx = list(law.normal)
        if independent:
            z = rng.standard_normal((n, len(idx))) * np.sqrt(np.diag(law.cov))
        else:
            vals, vecs = np.linalg.eigh(law.cov)
            root = vecs * np.sqrt(np.clip(vals, 0, None))
            z = rng.standard_normal((n, len(idx))) @ root.T
        w[:, idx] = np.maximum(law.centre[idx] + z, 0.0)
    for i, low, high, spread in law.ranges:
        w[:, i] = _range_draws(rng.random(n), low, high, spread)
    return w


# ----------------------------------------------------------------------------- route parts


def _local_minutes(times: np.ndarray) -> np.ndarray:
    """Return minutes of the week of local ISO times ``YYYY-MM-DDTHH:MM...`` (wall clock).

    The segment times are written in the area's local time, so the wall clock is read
    directly (vectorised); 1970-01-01 was a Thursday (Monday = 0).
    """
    if len(times) == 0:
        return np.zeros(0, dtype=np.int64)
    t = np.array([str(x)[:16] for x in times], dtype="datetime64[m]").astype(np.int64)
    return (((t // 1440) + 3) % 7) * 1440 + t % 1440


def unit_parts(net: Any, scores: list[Any]) -> tuple[np.ndarray, np.ndarray]:
    """Return (fixed part per score, ``(scores, categories)`` parts at weight 1).

    Computed from each score's driven segments exactly as :class:`routerisk.analysis.scoring.Scorer`
    scores them (same edges, shares of partial edges and entry minutes).
    """
    from routerisk.analysis.scoring import Scorer

    sc = Scorer(net)
    fixed = np.zeros(len(scores))
    unit = np.zeros((len(scores), len(sc.cats)))
    for k, s in enumerate(scores):
        seg = s.segments
        pos = seg["_pos"].to_numpy(dtype=np.int64)
        km = seg["length_m"].to_numpy(dtype=float) / 1000.0
        minutes = _local_minutes(seg["time"].to_numpy())
        mult = sc.mult_table[:, minutes].T
        unit[k] = (sc.sev[pos] * km) @ (mult * sc.exp[pos])
        fixed[k] = float(seg["baseline"].sum() + seg["crossing_part"].sum())
    return fixed, unit


# ----------------------------------------------------------------------------- summaries


def analytic(fixed: np.ndarray, unit: np.ndarray, law: WeightLaw) -> tuple[np.ndarray, np.ndarray]:
    """Return the exact mean and standard deviation of each risk under normal weights.

    (Linear form; the zero floor of the draws and the weight ranges are left out.)
    """
    idx = list(law.normal)
    mean = fixed + unit @ law.centre
    a = unit[:, idx]
    sd = np.sqrt(np.einsum("ij,jk,ik->i", a, law.cov, a))
    return mean, sd


def prob_lower_pairs(risks: np.ndarray, pairs: list[tuple[int, int]]) -> np.ndarray:
    """Return, per pair (i, j), the share of draws where i's risk is below j's (ties 1/2)."""
    if not pairs:
        return np.zeros(0)
    i, j = np.array(pairs).T
    out = np.zeros(len(pairs))
    step = max(1, int(2e7 // max(risks.shape[0], 1)))
    for lo in range(0, len(pairs), step):
        a, b = risks[:, i[lo : lo + step]], risks[:, j[lo : lo + step]]
        out[lo : lo + step] = (a < b).mean(axis=0) + 0.5 * (a == b).mean(axis=0)
    return out


def prob_lower(risks: np.ndarray) -> np.ndarray:
    """Return P[i, j] = share of draws where route i's risk is below route j's (ties 1/2)."""
    a = risks[:, :, None]
    b = risks[:, None, :]
    return (a < b).mean(axis=0) + 0.5 * (a == b).mean(axis=0)


def sobol_indices(
    f_a: np.ndarray, f_b: np.ndarray, f_ab: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Return (first-order, total) Sobol indices from Saltelli's A, B, AB_i model runs.

    ``f_a``, ``f_b``: (N, ...) outputs on the matrices A and B; ``f_ab``: (N, d, ...) on A
    with column i from B. First order: Saltelli et al. (2010); total: Jansen (1999), the
    estimators of SALib's ``sobol.analyze``.
    """
    both = np.concatenate([f_a, f_b], axis=0)
    var = both.var(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        s1 = np.mean(f_b[:, None] * (f_ab - f_a[:, None]), axis=0) / var
        st = 0.5 * np.mean((f_a[:, None] - f_ab) ** 2, axis=0) / var
    zero = var == 0
    s1[..., zero] = 0.0
    st[..., zero] = 0.0
    return s1, st


def sensitivity(
    fixed: np.ndarray, unit: np.ndarray, law: WeightLaw, n: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Return Sobol (first, total) indices of each output column to each varying weight.

    ``fixed`` (m,) and ``unit`` (m, C) define ``m`` linear outputs. Returns arrays of
    shape (d, m) for the ``d`` varying weights (their indices are returned too).
    """
    vary = list(law.varying)
    a = draw_weights(law, n, rng, independent=True)
    b = draw_weights(law, n, rng, independent=True)
    diff = b[:, vary] - a[:, vary]  # (N, d)
    m = len(fixed)
    s1 = np.zeros((len(vary), m))
    st = np.zeros((len(vary), m))
    step = max(1, int(2e7 // max(n * max(len(vary), 1), 1)))  # bounded memory
    for lo in range(0, m, step):
        cols = slice(lo, min(lo + step, m))
        f_a = fixed[cols] + a @ unit[cols].T  # (N, m)
        f_b = fixed[cols] + b @ unit[cols].T
        # AB_i differs from A only in weight i: f_AB_i = f_A + (b_i - a_i) * unit_i
        f_ab = f_a[:, None, :] + diff[:, :, None] * unit[cols][:, vary].T[None, :, :]
        s1[:, cols], st[:, cols] = sobol_indices(f_a, f_b, f_ab)
    return s1, st, vary


def summarise(
    net: Any, scores: list[Any], n: int, seed: int = DEFAULT_SEED, *, same_depart_only: bool = True
) -> dict[str, Any]:
    """Return the uncertainty of each score, the pairwise table and the sensitivity.

    Pairs are formed between scores at the same departure time (``same_depart_only``) or
    between every two scores.
    """
    from routerisk.analysis.scoring import _round as r

    check_draws(n)
    law = weight_law(net.profile)
    rng = np.random.default_rng(seed)
    fixed, unit = unit_parts(net, scores)
    w = draw_weights(law, n, rng)
    risks = fixed + w @ unit.T  # (n, scores)
    lo, med, hi = np.quantile(risks, [(1 - LEVEL) / 2, 0.5, (1 + LEVEL) / 2], axis=0)
    labels = [f"{s.name} @ {s.depart.isoformat(timespec='minutes')}" for s in scores]
    pairs = compared_pairs(scores, same_depart_only=same_depart_only)
    p = prob_lower_pairs(risks, pairs)
    out_fixed = np.r_[fixed, [fixed[i] - fixed[j] for i, j in pairs]]
    out_unit = np.vstack([unit, *([unit[i] - unit[j]] for i, j in pairs)]) if pairs else unit
    n_sobol = min(n, SOBOL_DRAWS)
    s1, st, vary = sensitivity(out_fixed, out_unit, law, n_sobol, rng)
    names = law.names
    routes = []
    for k, s in enumerate(scores):
        routes.append(
            {
                "name": s.name,
                "depart": s.depart.isoformat(),
                "risk": r(s.risk),
                "median": r(med[k]),
                "low": r(lo[k]),
                "high": r(hi[k]),
                "first_order": {names[v]: r(s1[q, k]) for q, v in enumerate(vary)},
                "total": {names[v]: r(st[q, k]) for q, v in enumerate(vary)},
            }
        )
    pair_recs = []
    for t, (i, j) in enumerate(pairs):
        col = len(scores) + t
        pair_recs.append(
            {
                "a": labels[i],
                "b": labels[j],
                "p_a_lower": r(p[t]),
                "first_order": {names[v]: r(s1[q, col]) for q, v in enumerate(vary)},
                "total": {names[v]: r(st[q, col]) for q, v in enumerate(vary)},
            }
        )
    return {
        "draws": n,
        "seed": seed,
        "level": LEVEL,
        "weights_varied": [names[v] for v in vary],
        "law": ("normal (profile uncertainty block, floored at 0)" if law.normal else "")
        + (" and " if law.normal and law.ranges else "")
        + ("ranges (uniform or log-uniform)" if law.ranges else ""),
        "sensitivity": "Sobol first-order and total indices, weights independent",
        "sensitivity_draws": n_sobol,
        "routes": routes,
        "pairs": pair_recs,
    }


#: Up to this many scores (per departure time) every pair is compared; beyond it, each score
#: with the next one in the ranking.
ALL_PAIRS_UP_TO = 30


def compared_pairs(scores: list[Any], *, same_depart_only: bool) -> list[tuple[int, int]]:
    """Return the (i, j) score pairs to compare (see :data:`ALL_PAIRS_UP_TO`)."""
    groups: dict[Any, list[int]] = {}
    for k, s in enumerate(scores):
        groups.setdefault(s.depart if same_depart_only else None, []).append(k)
    pairs = []
    for members in groups.values():
        if len(members) <= ALL_PAIRS_UP_TO:
            pairs += list(itertools.combinations(members, 2))
        else:
            ranked = sorted(members, key=lambda k: (scores[k].risk, k))
            pairs += [tuple(sorted(p)) for p in zip(ranked, ranked[1:], strict=False)]
    return sorted(pairs)


def check_draws(n: int) -> None:
    """Refuse a number of draws below 1 (or absurdly many)."""
    if not isinstance(n, int) or n < 1:
        raise OptionError(
            f"must be a whole number of draws of at least 1, got {n}", field="--uncertainty"
        )
    if n > 10_000_000:
        raise OptionError(f"{n} draws are too many (at most 10,000,000)", field="--uncertainty")


def text_lines(summary: dict[str, Any]) -> list[str]:
    """Return the printed form of :func:`summarise`."""
    pct = int(round(summary["level"] * 100))
    lines = [
        f"uncertainty: {summary['draws']} draws (seed {summary['seed']}) of "
        f"{', '.join(summary['weights_varied'])}; {summary['law']}"
    ]
    for rt in summary["routes"]:
        top = [
            kv
            for kv in sorted(rt["total"].items(), key=lambda kv: (-kv[1], kv[0]))
            if kv[1] > 0.005
        ][:2]
        lines.append(
            f"  {rt['name']} @ {rt['depart'][:16]}: risk {rt['risk']:.3f}, median "
            f"{rt['median']:.3f}, {pct} % interval {rt['low']:.3f} - {rt['high']:.3f}"
            + (
                "; rests most on " + ", ".join(f"{k} (total {v:.2f})" for k, v in top)
                if top
                else "; no varied weight moves it"
            )
        )
    for pr in summary["pairs"]:
        top = [
            kv
            for kv in sorted(pr["total"].items(), key=lambda kv: (-kv[1], kv[0]))
            if kv[1] > 0.005
        ][:1]
        lines.append(
            f"  P({pr['a']} lower than {pr['b']}) = {pr['p_a_lower']:.3f}"
            + (f"; the difference rests most on {top[0][0]} (total {top[0][1]:.2f})" if top else "")
        )
    return lines


def versus_plan(
    net: Any, suggestions: list[Any], n: int, seed: int = DEFAULT_SEED
) -> dict[str, Any]:
    """Return, per suggestion, the plan's and each alternative's interval and P(lower than plan).

    One set of weight draws serves every route, so the probabilities compare like with like.
    """
    from routerisk.analysis.scoring import _round as r

    check_draws(n)
    law = weight_law(net.profile)
    scores, owner = [], []
    for k, s in enumerate(suggestions):
        scores.append(s.planned)
        owner.append((k, None))
        for j, a in enumerate(s.alternatives):
            scores.append(a.score)
            owner.append((k, j))
    fixed, unit = unit_parts(net, scores)
    risks = fixed + draw_weights(law, n, np.random.default_rng(seed)) @ unit.T
    lo, med, hi = np.quantile(risks, [(1 - LEVEL) / 2, 0.5, (1 + LEVEL) / 2], axis=0)
    plan_col = {k: i for i, (k, j) in enumerate(owner) if j is None}
    pairs = [(i, plan_col[k]) for i, (k, j) in enumerate(owner) if j is not None]
    p = dict(zip(pairs, prob_lower_pairs(risks, pairs), strict=True))
    out = []
    for k, s in enumerate(suggestions):
        i0 = plan_col[k]
        alts = []
        for i, (kk, j) in enumerate(owner):
            if kk == k and j is not None:
                alts.append(
                    {
                        "label": s.alternatives[j].label,
                        "median": r(med[i]),
                        "low": r(lo[i]),
                        "high": r(hi[i]),
                        "p_lower_than_plan": r(p[(i, i0)]),
                    }
                )
        out.append(
            {
                "name": s.name,
                "plan": {"median": r(med[i0]), "low": r(lo[i0]), "high": r(hi[i0])},
                "alternatives": alts,
            }
        )
    return {
        "draws": n,
        "seed": seed,
        "level": LEVEL,
        "weights_varied": [law.names[v] for v in law.varying],
        "routes": out,
    }


def area_bands(review_result: Any, n: int, seed: int = DEFAULT_SEED) -> dict[str, Any]:
    """Return, per reviewed area, the median and 90 % interval of the km in each band.

    An edge's band follows its exposure per km at multiplier 1 (as tagging computes it:
    baseline + sum of weight x exposure + crossing weight x crossings per km), recomputed
    for each draw of the weights.
    """
    from routerisk.analysis.scoring import _round as r

    check_draws(n)
    prof = review_result.profile
    law = weight_law(prof)
    rng = np.random.default_rng(seed)
    w = draw_weights(law, n, rng)
    lowers = np.array([b.lower for b in prof.bands])
    out = []
    for area in review_result.areas:
        clip = review_result.clipped[area["name"]]
        km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
        length_km = clip["length"].to_numpy(dtype=float) / 1000.0
        with np.errstate(divide="ignore", invalid="ignore"):
            cross = np.where(
                length_km > 0,
                prof.crossing_weight * clip["crossings"].to_numpy(dtype=float) / length_km,
                0.0,
            )
        fixed = clip["baseline"].to_numpy(dtype=float) + cross
        exp = np.column_stack([clip[f"exp_{c}"].to_numpy(dtype=float) for c in prof.category_names])
        by_band = np.zeros((n, len(lowers)))
        step = max(1, int(2e7 // max(len(km), 1)))
        for lo in range(0, n, step):
            per_km = fixed[None, :] + w[lo : lo + step] @ exp.T  # (draws, edges)
            idx = np.clip(np.searchsorted(lowers, per_km, side="right") - 1, 0, len(lowers) - 1)
            for b in range(len(lowers)):
                by_band[lo : lo + step, b] = (idx == b) @ km
        q = np.quantile(by_band, [(1 - LEVEL) / 2, 0.5, (1 + LEVEL) / 2], axis=0)
        out.append(
            {
                "name": area["name"],
                "km_by_band": {
                    band.name: {"median": r(q[1, b]), "low": r(q[0, b]), "high": r(q[2, b])}
                    for b, band in enumerate(prof.bands)
                },
            }
        )
    return {
        "draws": n,
        "seed": seed,
        "level": LEVEL,
        "weights_varied": [law.names[v] for v in law.varying],
        "areas": out,
    }

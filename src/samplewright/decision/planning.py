"""Closed-form planning: sample sizes, stratified allocations and the optimal cluster take.

These are the textbook formulas a planner uses before (or instead of) a simulation.  Every
function checks its arguments once, returns a plain dict holding every intermediate value and
the formula used (so ``samplewright plan --json`` can print it as is), and never draws.

Notes
-----
Sample size for a mean or a proportion (Cochran 1977, *Sampling Techniques*, sec. 4.4-4.6):

    n0 = z^2 S^2 / E^2          (a mean; S^2 the population variance, divisor N - 1)
    n0 = z^2 P (1 - P) / E^2    (a proportion)

then, in this order, the design effect (Kish 1965, sec. 8.2: n1 = deff n0), the finite
population correction, and the inflation for non-response (n3 = n2 / R, common practice).
The finite population correction is the exact solution of ``z^2 V(n) = E^2`` for the SRS
variance each quantity has:

- a mean, V = (1 - n/N) S^2 / n (Cochran sec. 2.5)  ->  n2 = n1 / (1 + n1 / N);
- a proportion, V = (N - n)/(N - 1) P(1 - P)/n (Cochran sec. 3.2) -> n2 = n1 / (1 + (n1 - 1)/N),
  the form behind Krejcie & Morgan's (1970) table.

(Section and equation numbers of Cochran 1977 here are from memory.)

The final size is the whole number above n3 (rounded up, so the margin is met).

Stratified allocation (Cochran 1977, ch. 5): shares w_h of a total n are equal (1/H, common
practice), proportional (N_h / N), Neyman (N_h S_h) or cost-optimal (N_h S_h / sqrt(c_h)).  With
W_h = N_h / N the variance of the stratified mean is

    V(n) = sum_h W_h^2 S_h^2 / (n w_h) - sum_h W_h S_h^2 / N        (Cochran eq. 5.6)

so for a target variance V the total is n = n0 / (1 + sum_h W_h S_h^2 / (N V)) with
n0 = sum_h W_h^2 S_h^2 / (w_h V) (Cochran sec. 5.5 and 5.10); for a budget C with cost function
C = c0 + sum_h c_h n_h the total is n = (C - c0) / sum_h c_h w_h, which for the optimal shares is
Cochran's n = (C - c0) sum N_h S_h / sqrt(c_h) / sum N_h S_h sqrt(c_h) (eq. 5.25).  A stratum whose
share exceeds N_h is taken whole and the rest re-solved over the others (Cochran sec. 5.8).

Optimal units per cluster in a two-stage sample (Kish 1965, sec. 8.3): with c1 the cost of a
cluster, c2 the cost of a unit and rho the intra-cluster correlation,
m_opt = sqrt((c1 / c2) (1 - rho) / rho), which minimises the variance per unit of cost when the
design effect is 1 + (m - 1) rho.

Examples
--------
>>> r = sample_size(moe=2.0, sd=10.0, confidence=0.95)
>>> round(r["n0"], 2), r["n"]
(96.04, 97)
"""

from __future__ import annotations

import math

import numpy as np

from samplewright.apportion import largest_remainder
from samplewright.designs.allocation import RULES, real_allocation, shares
from samplewright.errors import InputError, show
from samplewright.evaluation.normal import normal_quantile


# ------------------------------------------------------------------ argument checks
def _num(value, name: str, low=None, high=None, low_open=True, high_open=False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {show(value)}") from None
    if not math.isfinite(v):
        raise InputError(f"{name} must be a finite number, got {show(value)}")
    if low is not None and (v <= low if low_open else v < low):
        raise InputError(f"{name} must be {'above' if low_open else 'at least'} {low:g}, got {show(value)}")
    if high is not None and (v >= high if high_open else v > high):
        raise InputError(f"{name} must be {'below' if high_open else 'at most'} {high:g}, got {show(value)}")
    return v


def z_value(confidence: float) -> float:
    """Two-sided normal quantile z_{1 - alpha/2} for a confidence level in (0, 1)."""
    return normal_quantile(_num(confidence, "confidence (--confidence)", 0.0, 1.0, high_open=True))


def fpc_mean(n0: float, N: float) -> float:
    """n0 / (1 + n0 / N): the exact size for a mean under SRS without replacement (Cochran sec. 4.6)."""
    return n0 / (1.0 + n0 / N)


def fpc_proportion(n0: float, N: float) -> float:
    """n0 / (1 + (n0 - 1) / N): the exact size for a proportion (Cochran sec. 4.4; Krejcie & Morgan 1970)."""
    return n0 / (1.0 + (n0 - 1.0) / N)


# ------------------------------------------------------------------ one mean or proportion
def sample_size(moe, confidence=0.95, sd=None, proportion=None, population=None, deff=1.0,
                response_rate=1.0) -> dict:
    """Sample size for a mean (``sd``) or a proportion (``proportion``) to margin of error ``moe``.

    Returns a dict with every intermediate: ``z``, ``n0``, ``n_after_deff``, ``n_after_fpc``,
    ``n_after_response``, the final whole number ``n``, the ``formula`` and ``notes``.

    Examples
    --------
    >>> r = sample_size(moe=0.05, proportion=0.5, population=1000)
    >>> round(r["n_after_fpc"], 1), r["n"]
    (277.7, 278)

    Notes
    -----
    See the module notes (Cochran 1977, sec. 4.4-4.6; Kish 1965, sec. 8.2).
    """
    if (sd is None) == (proportion is None):
        raise InputError("give exactly one of sd (--sd, for a mean) or proportion (--proportion)")
    E = _num(moe, "moe (--moe)", 0.0)
    z = z_value(confidence)
    D = _num(deff, "deff (--deff)", 0.0)
    R = _num(response_rate, "response rate (--response-rate)", 0.0, 1.0)
    out = {"quantity": "mean" if sd is not None else "proportion", "confidence": float(confidence), "z": z,
           "moe": E}
    if sd is not None:
        S = _num(sd, "sd (--sd)", 0.0)
        S2 = S * S
        out.update({"sd": S, "variance": S2})
        formula = "n0 = z^2 S^2 / E^2"
    else:
        P = _num(proportion, "proportion (--proportion)", 0.0, 1.0, high_open=True)
        if E >= 1.0:
            raise InputError(f"moe (--moe) = {E:g} is not a margin for a proportion, which lies in (0, 1): "
                             f"give it as a fraction, e.g. 0.03 for 3 percentage points")
        S2 = P * (1.0 - P)
        out.update({"proportion": P, "variance": S2})
        formula = "n0 = z^2 P (1 - P) / E^2"
    n0 = z * z * S2 / (E * E)
    n1 = n0 * D
    steps = [formula]
    if D != 1.0:
        steps.append("n1 = deff n0")
    out.update({"n0": n0, "deff": D, "n_after_deff": n1})
    notes = []
    if population is not None:
        N = _num(population, "population (--population)", 1.0, low_open=False)
        if N != int(N):
            raise InputError(f"population (--population) must be a whole number, got {show(population)}")
        if sd is not None:
            n2 = fpc_mean(n1, N)
            fpc = "n2 = n1 / (1 + n1 / N)"
            src = "Cochran 1977, sec. 4.6: exact for V = (1 - n/N) S^2 / n"
        else:
            n2 = fpc_proportion(n1, N)
            fpc = "n2 = n1 / (1 + (n1 - 1) / N)"
            src = "Cochran 1977, sec. 4.4; Krejcie & Morgan 1970: exact for V = (N - n)/(N - 1) PQ / n"
        steps.append(fpc)
        out.update({"population": int(N), "fpc_formula": fpc, "fpc_source": src})
    else:
        n2 = n1
        out.update({"population": None, "fpc_formula": None, "fpc_source": None})
    out["n_after_fpc"] = n2
    n3 = n2 / R
    if R != 1.0:
        steps.append("n3 = n2 / response rate")
    out.update({"response_rate": R, "n_after_response": n3})
    n = max(1, math.ceil(n3 - 1e-9))  # rounded up; the 1e-9 keeps an exact whole number whole
    out["n"] = n
    out["completes_expected"] = n2
    if population is not None and n > out["population"]:
        notes.append(f"the {n} units to approach are more than the population of {out['population']}: "
                     f"even a census would be expected to yield about {out['population'] * R:.0f} responses")
    out["feasible"] = not (population is not None and n > out["population"])
    out["formula"] = "; ".join(steps) + "; n = ceil(last)"
    out["notes"] = notes
    return out


# ------------------------------------------------------------------ stratified allocation
def _strata_arrays(units, sd, cost):
    N_h = np.asarray(units, dtype=float)
    if N_h.ndim != 1 or len(N_h) < 1:
        raise InputError("strata: give at least one stratum")
    S_h = np.asarray(sd, dtype=float)
    c_h = np.ones_like(N_h) if cost is None else np.asarray(cost, dtype=float)
    if S_h.shape != N_h.shape or c_h.shape != N_h.shape:
        raise InputError(f"strata: units, sd and cost must have one value per stratum "
                         f"(got {len(N_h)}, {S_h.size}, {c_h.size})")
    for name, arr, rule in (("units", N_h, "a whole number of at least 1"), ("sd", S_h, "at least 0"),
                            ("cost", c_h, "above 0")):
        bad = ~np.isfinite(arr)
        if name == "units":
            bad |= (arr < 1) | (arr != np.round(arr))
        elif name == "sd":
            bad |= arr < 0
        else:
            bad |= arr <= 0
        if bad.any():
            h = int(np.flatnonzero(bad)[0])
            raise InputError(f"strata: {name} of stratum {h + 1} must be {rule}, got {show(arr[h])}")
    return N_h.astype(np.int64), S_h, c_h


def stratum_variance(n_h, N_h, S_h) -> float:
    """Variance of the stratified mean, sum W_h^2 S_h^2 (1 - n_h/N_h) / n_h (Cochran 1977, eq. 5.6)."""
    n_h = np.asarray(n_h, dtype=float)
    N_h = np.asarray(N_h, dtype=float)
    S_h = np.asarray(S_h, dtype=float)
    W = N_h / N_h.sum()
    take = n_h > 0
    if np.any(~take & (S_h > 0)):
        return float("inf")
    terms = np.where(take, W**2 * S_h**2 * (1.0 - n_h / N_h) / np.where(take, n_h, 1.0), 0.0)
    return float(terms.sum())


def _solve_capped(N_h, w, total_for):
    """Real allocation n_h = n w'_h over the strata not taken whole, re-solved until none exceeds N_h.

    ``total_for(free)`` returns the total n for the free strata (given the census ones).
    """
    census = np.zeros(len(N_h), dtype=bool)
    for _ in range(len(N_h) + 1):
        free = ~census
        wf = np.where(free, w, 0.0)
        wf = wf / wf.sum() if wf.sum() > 0 else free / free.sum()
        n = total_for(free, wf)
        real = np.where(census, N_h, n * wf)
        over = free & (real > N_h)
        if not over.any():
            return real, n, census
        census |= over
        if census.all():
            return N_h.astype(float), 0.0, census
    return real, n, census  # pragma: no cover - the loop ends within H steps


def allocate_strata(units, sd, cost=None, rule="neyman", n=None, budget=None, moe=None, variance=None,
                    confidence=0.95, fixed_cost=0.0, labels=None) -> dict:
    """Allocate a stratified sample for a fixed total ``n``, a ``budget`` or a target ``moe``/``variance``.

    Parameters
    ----------
    units, sd, cost : sequences
        Stratum sizes N_h, standard deviations S_h and per-unit costs c_h (default 1).
    rule : str
        ``equal``, ``proportional``, ``neyman`` or ``optimal`` (cost-weighted).
    n, budget, moe, variance : float
        Exactly one: the total sample size; the total budget (cost c0 + sum c_h n_h); a target
        margin of error of the mean (variance = (moe / z)^2); a target variance of the mean.
    fixed_cost : float
        c0, the part of the budget that does not depend on n.

    Returns
    -------
    dict with ``n`` (whole total), ``n0``, ``n_real``, ``formula``, per-stratum rows in ``strata``
    and the ``variance``, ``se``, ``moe`` and ``cost`` of the whole-number allocation.

    Examples
    --------
    >>> r = allocate_strata([400, 300, 300], [10, 20, 40], [1, 4, 16], rule="optimal", n=100)
    >>> [s["n"] for s in r["strata"]]
    [40, 30, 30]

    Notes
    -----
    See the module notes (Cochran 1977, ch. 5).  Whole numbers: for a fixed n, largest-remainder
    rounding; for a budget, each n_h rounded down and then units added one at a time where one cuts the
    variance most per unit of cost, while the budget allows (the cost never exceeds it); for a
    target variance, the same greedy step from the rounded-down allocation until the target is met,
    then units dropped (dearest stratum first) wherever the target is still met without them.
    """
    N_h, S_h, c_h = _strata_arrays(units, sd, cost)
    H = len(N_h)
    labels = [str(i + 1) for i in range(H)] if labels is None else [str(x) for x in labels]
    if rule not in RULES:
        raise InputError(f"allocation rule {rule!r} is not known (use one of: {', '.join(RULES)})")
    given = [k for k, v in (("n", n), ("budget", budget), ("moe", moe), ("variance", variance)) if v is not None]
    if len(given) != 1:
        raise InputError("stratified allocation: give exactly one of a total n (--n), a budget (--budget), "
                         f"a target margin of error (--moe) or a target variance; got {given or 'none'}")
    z = z_value(confidence)
    c0 = _num(fixed_cost, "fixed cost (--fixed-cost)", 0.0, low_open=False)
    N = float(N_h.sum())
    w = shares(rule, N_h, S_h, c_h)
    out = {"rule": rule, "confidence": float(confidence), "z": z, "fixed_cost": c0, "population": int(N)}
    if n is not None:
        real, whole, how = _for_fixed_n(n, w, N_h, rule)
    elif budget is not None:
        real, whole, how = _for_budget(budget, c0, w, N_h, S_h, c_h, rule)
    else:
        if moe is not None:
            E = _num(moe, "moe (--moe)", 0.0)
            V = (E / z) ** 2
            out["target_moe"] = E
        else:
            V = _num(variance, "variance", 0.0)
        out["target_variance"] = V
        real, whole, how = _for_target_variance(V, w, N_h, S_h, c_h, rule)
    out.update(how)
    var = stratum_variance(whole, N_h, S_h)
    out.update({
        "n_real": float(real.sum()),
        "n": int(whole.sum()),
        "variance": var,
        "se": math.sqrt(var),
        "moe": z * math.sqrt(var),
        "cost": c0 + float((c_h * whole).sum()),
        "strata": [{"stratum": labels[h], "units": int(N_h[h]), "sd": float(S_h[h]), "cost": float(c_h[h]),
                    "share": float(w[h]), "n_real": float(real[h]), "n": int(whole[h]),
                    "taken_whole": bool(whole[h] == N_h[h])} for h in range(H)],
    })
    return out


def _for_fixed_n(n, w, N_h, rule):
    """Real and whole allocation of a given total n, and how it was found."""
    N = float(N_h.sum())
    n_tot = _num(n, "n (--n)", 0.0)
    if n_tot != int(n_tot):
        raise InputError(f"n (--n) must be a whole number, got {show(n)}")
    if n_tot > N:
        raise InputError(f"n (--n) = {int(n_tot)} is more than the {int(N)} units in the strata")
    real = real_allocation(n_tot, w, N_h)
    whole = largest_remainder(int(n_tot), real, N_h)
    return real, whole, {"mode": "fixed_n", "n0": n_tot,
                         "formula": "n_h = n w_h, w_h = " + _share_text(rule) + " (Cochran 1977, ch. 5)"}


def _for_budget(budget, c0, w, N_h, S_h, c_h, rule):
    """Real and whole allocation that a budget pays for (the cost never exceeds it), and how."""
    C = _num(budget, "budget (--budget)", 0.0)
    if C <= c0:
        raise InputError(f"budget (--budget) = {C:g} leaves nothing for sampling after the fixed cost {c0:g}")

    def total_for(free, wf):
        left = C - c0 - float((c_h * N_h)[~free].sum())
        return max(left, 0.0) / float((c_h * wf)[free].sum())

    real, _, _ = _solve_capped(N_h, w, total_for)
    whole = np.minimum(np.floor(real + 1e-9), N_h).astype(np.int64)
    while True:  # spend what is left where a unit cuts the variance most per unit of cost
        spare = C - c0 - float((c_h * whole).sum())
        fits = (whole < N_h) & (c_h <= spare + 1e-9)
        if not fits.any():
            break
        whole[_best_unit(whole, N_h, S_h, c_h, fits)] += 1
    return real, whole, {"mode": "budget", "budget": C, "n0": float(real.sum()),
                         "formula": "n = (C - c0) / sum_h c_h w_h, n_h = n w_h, w_h = " + _share_text(rule)
                                    + " (Cochran 1977, eq. 5.25 for the optimal shares)"}


def _for_target_variance(V, w, N_h, S_h, c_h, rule):
    """Real and whole allocation that meets a target variance of the mean with the fewest units, and how."""
    N = float(N_h.sum())
    W = N_h / N
    if stratum_variance(N_h, N_h, S_h) > V:  # pragma: no cover - a census has variance 0
        raise InputError("the target variance cannot be met")
    n0_holder = {}

    def total_for(free, wf):
        a = float(np.sum(np.where(free & (wf > 0), W**2 * S_h**2 / np.where(wf > 0, wf, 1.0), 0.0)))
        n0 = a / V
        n0_holder.setdefault("n0", n0)
        return n0 / (1.0 + float((W * S_h**2)[free].sum()) / (N * V))

    real, _, _ = _solve_capped(N_h, w, total_for)
    whole = np.minimum(np.floor(real + 1e-9), N_h).astype(np.int64)
    if S_h.sum() > 0:
        whole = np.maximum(whole, np.where(S_h > 0, np.minimum(1, N_h), 0))
    while stratum_variance(whole, N_h, S_h) > V * (1 + 1e-12):  # add units where they cut V most
        whole[_best_unit(whole, N_h, S_h, c_h, whole < N_h)] += 1
    for h in np.argsort(-c_h, kind="stable"):  # then drop units the target does not need, dearest first
        while whole[h] > 0:
            whole[h] -= 1
            if stratum_variance(whole, N_h, S_h) > V * (1 + 1e-12):
                whole[h] += 1
                break
    return real, whole, {"mode": "target_variance", "n0": n0_holder.get("n0", 0.0),
                         "formula": "n0 = sum_h W_h^2 S_h^2 / (w_h V); n = n0 / (1 + sum_h W_h S_h^2 / (N V)); "
                                    "n_h = n w_h, w_h = " + _share_text(rule) + " (Cochran 1977, sec. 5.5, 5.10)"}


def _best_unit(whole, N_h, S_h, c_h, allowed) -> int:
    """The stratum where one more unit cuts the variance of the mean most per unit of cost."""
    now = stratum_variance(whole, N_h, S_h)
    gain = np.full(len(N_h), -np.inf)
    for h in np.flatnonzero(allowed):
        trial = whole.copy()
        trial[h] += 1
        gain[h] = (now - stratum_variance(trial, N_h, S_h)) / c_h[h]
    return int(np.argmax(gain))


def _share_text(rule: str) -> str:
    return {"equal": "1 / H", "proportional": "N_h / N", "neyman": "N_h S_h / sum N_h S_h",
            "optimal": "(N_h S_h / sqrt c_h) / sum (N_h S_h / sqrt c_h)"}[rule]


# ------------------------------------------------------------------ two-stage cluster take
def optimal_cluster_take(cluster_cost, unit_cost, icc, budget=None, fixed_cost=0.0) -> dict:
    """Kish's optimal number of units per cluster, m_opt = sqrt((c1 / c2) (1 - rho) / rho).

    With a ``budget`` C, also the number of clusters it pays for at the whole-number take after
    the ``fixed_cost`` c0, floor((C - c0) / (c1 + c2 m)) (cost model C = c0 + a (c1 + c2 m)).

    Examples
    --------
    >>> r = optimal_cluster_take(90.0, 10.0, 0.1)
    >>> round(r["m_opt"], 6), r["n"], round(r["deff"], 2)
    (9.0, 9, 1.8)

    Notes
    -----
    Kish (1965), *Survey Sampling*, sec. 8.3 (from memory): the variance of the mean of a
    two-stage sample of a clusters and m units each is about S^2 (1 + (m - 1) rho) / (a m); with
    cost a (c1 + c2 m) the product of variance and cost is least at m_opt.  The whole-number take
    is m_opt rounded to the nearest whole number (at least 1); the product is flat near its least.
    """
    c1 = _num(cluster_cost, "cost per cluster (--cluster-cost)", 0.0)
    c2 = _num(unit_cost, "cost per unit (--unit-cost)", 0.0)
    rho = _num(icc, "intra-cluster correlation (--icc)", 0.0, 1.0, high_open=True)
    m_opt = math.sqrt((c1 / c2) * (1.0 - rho) / rho)
    m = max(1, math.floor(m_opt + 0.5))
    out = {"cluster_cost": c1, "unit_cost": c2, "icc": rho, "m_opt": m_opt, "n0": m_opt, "n": m,
           "deff": 1.0 + (m - 1) * rho,
           "formula": "m_opt = sqrt((c1 / c2) (1 - rho) / rho) (Kish 1965, sec. 8.3); n = round(m_opt)"}
    c0 = _num(fixed_cost, "fixed cost (--fixed-cost)", 0.0, low_open=False)
    if budget is not None:
        C = _num(budget, "budget (--budget)", 0.0)
        if C <= c0:
            raise InputError(f"budget (--budget) = {C:g} leaves nothing for clusters after the fixed cost "
                             f"(--fixed-cost) {c0:g}")
        a = math.floor((C - c0) / (c1 + c2 * m) + 1e-9)
        if a < 1:
            raise InputError(f"budget (--budget) = {C:g} less the fixed cost {c0:g} does not pay for one "
                             f"cluster of {m} units (c1 + c2 m = {c1 + c2 * m:g})")
        out.update({"budget": C, "fixed_cost": c0, "clusters": a, "units": a * m,
                    "cost": c0 + a * (c1 + c2 * m),
                    "formula": out["formula"] + "; clusters = floor((C - c0) / (c1 + c2 n))"})
    return out

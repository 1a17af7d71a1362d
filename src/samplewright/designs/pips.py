"""Inclusion probabilities proportional to size, and the selection rules that use them.

Pure functions shared by the size-proportional designs (``pps.py``, ``poisson.py``) and the
stratified multistage design: the size measure's check, the iterative removal of
certainty units, and vectorised draws for Sampford's method.

Notes
-----
Probability proportional to size without replacement targets pi_i = n x_i / X.  When a
unit's pi_i reaches 1 it is taken with certainty, removed, and the rest of the sample is
spread over the remaining units in proportion to their sizes; this is repeated until no
remaining pi_i reaches 1 (Sarndal, Swensson & Wretman 1992, sec. 3.6; Cochran 1977,
sec. 9A.2 on large units).
"""

from __future__ import annotations

import numpy as np

from samplewright.errors import InputError


def size_measure(frame, label: str) -> np.ndarray:
    """The frame's size column as floats, refused (InputError) unless every value is above 0."""
    col = frame.roles.get("size")
    if frame.size is None:
        raise InputError(f"design {label!r} needs a size measure: set size = \"column\" in [frame]")
    x = np.asarray(frame.size, dtype=float)
    bad = ~(x > 0)
    if bad.any():
        dropped = frame.roles.get("dropped_rows", 0)
        rows = np.flatnonzero(bad)[:5] + (1 if dropped else 2)  # spreadsheet rows (header is row 1)
        more = " ..." if bad.sum() > 5 else ""
        where = f"unit(s) {{}} (counted after the {dropped} dropped rows)" if dropped else "row(s) {}"
        raise InputError(f"design {label!r}: size column {col!r} must be above 0 for every unit; "
                         f"{int(bad.sum())} value(s) are not, first {x[bad][0]:g} at "
                         + where.format(", ".join(map(str, rows)) + more))
    return x


def pips(x, n: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Inclusion probabilities proportional to ``x`` summing to ``n``, certainty units removed.

    Returns ``(pi, certain, rounds)``: pi_i (1 for certainty units), a mask of the
    certainty units and how many removal rounds were needed.

    Examples
    --------
    >>> pi, certain, rounds = pips([1, 1, 1, 1, 16], 2)
    >>> pi.tolist(), int(certain.sum()), rounds
    ([0.25, 0.25, 0.25, 0.25, 1.0], 1, 1)
    """
    x = np.asarray(x, dtype=float)
    if n > x.size:
        raise InputError(f"a sample of {n} is more than the {x.size} units with a size")
    certain = np.zeros(x.size, dtype=bool)
    rounds = 0
    while True:
        rest = n - int(certain.sum())
        pi = np.ones_like(x)
        free = ~certain
        if rest > 0:
            pi[free] = rest * x[free] / x[free].sum()
        new = free & (pi >= 1.0)
        if rest == 0 or not new.any():
            pi[free] = np.minimum(pi[free], 1.0) if rest > 0 else 0.0
            return pi, certain, rounds
        certain |= new
        rounds += 1


def _categorical(rng, cum: np.ndarray, shape) -> np.ndarray:
    """Draws from the distribution with cumulative probabilities ``cum`` (last = 1)."""
    u = rng.random(shape) * cum[-1]
    return np.minimum(np.searchsorted(cum, u, side="right"), cum.size - 1)


def sampford_route(pi: np.ndarray) -> str:
    """Which exact rejective form of Sampford's method is cheaper for these pi (sum n).

    ``"draws"``: Sampford's own (one draw by p_i = pi_i / n, n - 1 by p_i / (1 - pi_i),
    accepted when all distinct); cost about n per attempt, acceptance falling like
    exp(-n^2 sum q_i^2 / 2) (q the draw probabilities; common-practice estimate).
    ``"poisson"``: a Poisson sample with probabilities pi plus one draw by p_i, accepted
    when the Poisson sample has n - 1 units and the draw is not among them; cost about N
    per attempt, acceptance about 1 / sqrt(2 pi sum pi_i (1 - pi_i)).
    """
    a_draws, a_pois = sampford_acceptance(pi)
    n = float(pi.sum())
    return "draws" if a_draws / max(n, 1.0) >= a_pois / pi.size else "poisson"


def sampford_acceptance(pi: np.ndarray) -> tuple[float, float]:
    """Approximate acceptance rates of the "draws" and "poisson" routes (see `sampford_route`)."""
    n = float(pi.sum())
    lam = pi / (1.0 - pi)
    q = lam / lam.sum()
    a_draws = float(np.exp(-0.5 * n * n * float((q * q).sum())))
    a_pois = 1.0 / np.sqrt(2.0 * np.pi * max(float((pi * (1 - pi)).sum()), 1e-12))
    return a_draws, a_pois


def sampford_draw(rng: np.random.Generator, pi: np.ndarray, B: int, route: str | None = None) -> np.ndarray:
    """``B`` Sampford samples of size n = sum(pi) (all pi < 1), as sorted positions (B, n).

    Notes
    -----
    Sampford (1967), Biometrika 54:499-513: draw the first unit with probability
    p_i = pi_i / n and the other n - 1 with replacement with probabilities proportional to
    p_i / (1 - n p_i); accept the sample if all n units differ, otherwise start again.  The
    sample then has probability p(s) proportional to (n - sum_{i in s} pi_i)
    prod_{i in s} pi_i / (1 - pi_i), and unit i is included with probability exactly pi_i.

    The "poisson" route gives the same p(s): a Poisson sample S' (unit i in with
    probability pi_i) and an independent draw J with probability pi_j / n have
    P(S' = s minus j, J = j) = c prod_{i in s} pi_i/(1 - pi_i) (1 - pi_j) / n, which summed
    over j in s is p(s) above (the form used by Bondesson, Traat & Lundqvist 2006, Scand. J.
    Statist. 33:699-720; cited from memory).  Both are exact; the route only changes speed.
    """
    pi = np.asarray(pi, dtype=float)
    N = pi.size
    n = round(pi.sum())
    out = np.empty((B, n), dtype=np.int64)
    if n == 0:
        return out
    if n == N:
        out[:] = np.arange(N)
        return out
    route = route or sampford_route(pi)
    p = pi / n
    cum_p = np.cumsum(p)
    cum_l = np.cumsum(pi / (1.0 - pi))
    todo = np.arange(B)
    while todo.size:
        k = todo.size
        if route == "draws":
            first = _categorical(rng, cum_p, (k,))
            rest = _categorical(rng, cum_l, (k, n - 1))
            s = np.concatenate([first[:, None], rest], axis=1)
            s.sort(axis=1)
            ok = (s[:, 1:] != s[:, :-1]).all(axis=1)
        else:
            step = max(1, 2_000_000 // N)
            k = min(k, step)
            inc = rng.random((k, N)) < pi
            j = _categorical(rng, cum_p, (k,))
            ok = (inc.sum(axis=1) == n - 1) & ~inc[np.arange(k), j]
            inc[np.arange(k), j] = True
            s = np.zeros((k, n), dtype=np.int64)
            if ok.any():
                s[ok] = np.nonzero(inc[ok])[1].reshape(-1, n)
        good = np.flatnonzero(ok)
        out[todo[good]] = s[good]
        done = np.zeros(todo.size, dtype=bool)
        done[good] = True
        todo = todo[~done]
    return out


def units_block(frame, units, weight, psu_stratum, fpc, *, mask=None, variance="hansen_hurwitz",
                design_info=None, keep_units=True):
    """A :class:`SampleBlock` whose PSUs are single units ``units`` (B, m) of the frame."""
    from samplewright.designs.block import SampleBlock

    B = units.shape[0]
    return SampleBlock(
        sums=frame.gather(units),
        weight=weight,
        psu_stratum=np.asarray(psu_stratum, dtype=np.int64),
        fpc=np.asarray(fpc, dtype=float),
        clusters=np.zeros(B),
        strata=0,
        mask=mask,
        units=units if keep_units else None,
        variance=variance,
        design_info=design_info,
    )

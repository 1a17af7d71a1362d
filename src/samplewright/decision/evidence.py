"""Three-state evidence: whether a rehearsed point meets a criterion, misses it, or cannot yet tell.

Each criterion compares a rehearsal estimate with a limit, allowing for the estimate's Monte
Carlo SE (MCSE; Morris, White & Crowther 2019, Table 6) with ``EVIDENCE_Z`` = 2:

- coverage c (MCSE s) against the nominal level q less a practical tolerance t (``[goal]
  coverage_tolerance``, default 0.01; common practice): met when c - 2 s >= q - t, not met when
  c + 2 s < q - t.  A coverage of 0 or 1 has MCSE 0 by the formula sqrt(c (1 - c) / R); there
  the two-sided Clopper-Pearson interval at the level 2 Phi(2) - 1 (the level +-2 SE stands for)
  replaces c +- 2 s, so 2,000 intervals out of 2,000 are evidence, not certainty;
- margin: the achieved margin (z x RMSE) and the published margin (mean CI half-width), each
  with its MCSE, against the goal: met when both are within it by 2 MCSE, not met when either
  exceeds it by more than 2 MCSE;
- cost: mean cost (MCSE sd(cost) / sqrt(R)) against the budget, likewise.

Anything else is *undecided*: more replicates would settle it.  A point whose true value lies
clear of a limit is decided once its MCSE is small enough and stays so as R grows, which is
what makes a verdict firmer rather than different with more evidence (the old rule, coverage
>= nominal - 3 MCSE, was a significance test against the exact nominal level: with more
replicates it rejected ever smaller shortfalls, so the pick could change with R).

The functions take numpy arrays (broadcast) and return state codes (:data:`MET`, :data:`UNDECIDED`,
:data:`NOT_MET` = 1, 0, -1) so the bootstrap of :mod:`samplewright.decision.stability` can score
every point of every round at once; :func:`state` names a code.  Exact mode (every possible
sample) has no Monte Carlo error: its MCSEs are 0, and :func:`coverage_code` takes ``exact=True``
so a coverage of 0 or 1 is not given a binomial interval either.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from samplewright.evaluation import measures

#: Monte Carlo SEs allowed on either side of a limit before a criterion counts as decided
EVIDENCE_Z = 2.0
MET, UNDECIDED, NOT_MET = 1, 0, -1
STATES = {MET: "met", UNDECIDED: "undecided", NOT_MET: "not met"}


def state(code) -> str:
    """The name of a state code: "met", "not met" or "undecided"."""
    return STATES[int(code)]


def worst(codes, axis=None):
    """The combined state of criteria that must all hold: not met if any is, else undecided if any is."""
    return np.min(codes, axis=axis)


def _decide(low, high, limit, below_is_good: bool):
    """MET / NOT_MET / UNDECIDED from an interval [low, high] of the estimate against a limit."""
    if below_is_good:  # margin, cost: met when the whole interval is at or under the limit
        return np.where(high <= limit, MET, np.where(low > limit, NOT_MET, UNDECIDED))
    return np.where(low >= limit, MET, np.where(high < limit, NOT_MET, UNDECIDED))


def binomial_interval(hits, R, level: float):
    """Two-sided Clopper-Pearson interval of a binomial share at confidence ``level`` (Clopper and Pearson
    1934): the beta quantiles, computed with scipy.special.betaincinv (what scipy.stats.beta.ppf calls, so a
    run need not import scipy.stats; the tests compare with scipy.stats.binomtest).

    Returns (lower, upper); lower is 0 when hits is 0 and upper is 1 when hits is R.
    """
    hits, R = np.asarray(hits, dtype=float), np.asarray(R, dtype=float)
    alpha = 1.0 - level
    with np.errstate(invalid="ignore"):
        lo = np.where(hits > 0, special.betaincinv(np.maximum(hits, 1e-300), R - hits + 1, alpha / 2), 0.0)
        hi = np.where(hits < R, special.betaincinv(hits + 1, np.maximum(R - hits, 1e-300), 1 - alpha / 2), 1.0)
    return lo, hi


def _tails(z: float) -> float:
    """2 (1 - Phi(z)): the two tails the evidence rule's z leaves."""
    return 2.0 * float(special.ndtr(-z))


def clopper_pearson(hits, R, z: float = EVIDENCE_Z):
    """:func:`binomial_interval` at the level 2 Phi(z) - 1 of the evidence rule's z."""
    return binomial_interval(hits, R, 1.0 - _tails(z))


def coverage_bounds(c, mcse, R, exact: bool = False, z: float = EVIDENCE_Z):
    """(low, high): c -+ z MCSE, or the Clopper-Pearson interval where c is 0 or 1 (module notes)."""
    c, mcse = np.asarray(c, dtype=float), np.asarray(mcse, dtype=float)
    if exact:
        return c, c
    edge = (c <= 0) | (c >= 1)
    if not np.any(edge):
        return c - z * mcse, c + z * mcse
    cp_lo, cp_hi = clopper_pearson(np.round(c * R), R, z)
    return np.where(edge, cp_lo, c - z * mcse), np.where(edge, cp_hi, c + z * mcse)


def coverage_code(c, mcse, R, nominal, tolerance, exact: bool = False, z: float = EVIDENCE_Z):
    """State of coverage against nominal - tolerance; a missing coverage (no intervals) is not met.
    (``z``: MCSEs either side; :data:`EVIDENCE_Z` but for a stricter caller.)"""
    low, high = coverage_bounds(c, mcse, R, exact, z)
    code = _decide(low, high, nominal - tolerance, below_is_good=False)
    return np.where(np.isnan(c), NOT_MET, code)


def margin_code(moe, moe_mcse, published, published_mcse, goal, z: float = EVIDENCE_Z):
    """State of the margin: both the achieved and the published margin must be within ``goal``."""
    k = z
    achieved = _decide(moe - k * moe_mcse, moe + k * moe_mcse, goal, below_is_good=True)
    printed = _decide(published - k * published_mcse, published + k * published_mcse, goal, below_is_good=True)
    code = worst(np.stack(np.broadcast_arrays(achieved, printed)), axis=0)
    return np.where(np.isnan(moe) | np.isnan(published), NOT_MET, code)


def cost_code(cost, cost_mcse, budget, z: float = EVIDENCE_Z):
    """State of the mean cost against the budget."""
    k = z
    code = _decide(cost - k * cost_mcse, cost + k * cost_mcse, budget, below_is_good=True)
    return np.where(np.isnan(cost), NOT_MET, code)


# ------------------------------------------------------------------ what it would take
def replicates_to_decide(value: float, mcse: float, limit: float, R: int, z: float = EVIDENCE_Z) -> int | None:
    """Replicates at which ``value`` would be z (2) MCSE clear of ``limit``, were it to stay where it is.

    An MCSE of the form sd / sqrt(R) (every one of :mod:`samplewright.evaluation.measures`) reaches
    the gap / 2 at R (MCSE / (gap / 2))^2 (:func:`measures.replicates_for_mcse`).  None when the
    value sits on the limit (no count decides it).
    """
    gap = abs(value - limit)
    if not gap > 0 or not math.isfinite(gap):
        return None
    return max(int(R), math.ceil(measures.replicates_for_mcse(mcse, R, gap / z)))


def coverage_replicates_to_decide(c: float, mcse: float, limit: float, R: int,
                                  z: float = EVIDENCE_Z) -> int | None:
    """As :func:`replicates_to_decide` for a coverage; at 0 or 1, the R whose Clopper-Pearson bound
    clears the limit (lower bound (alpha/2)^(1/R) at c = 1, upper 1 - (alpha/2)^(1/R) at c = 0)."""
    if 0 < c < 1:
        return replicates_to_decide(c, mcse, limit, R, z)
    alpha = _tails(z)
    far = limit if c >= 1 else 1.0 - limit  # the bound must pass this share
    if not 0 < far < 1:
        return None
    return max(int(R), math.ceil(math.log(alpha / 2) / math.log(far)))

"""The normal quantile of every margin of error, from the standard library (one place for it).

``statistics.NormalDist().inv_cdf`` (Wichura's AS241 algorithm, accurate to double precision) spares
``samplewright plan`` the import of scipy.stats (about half a second). It agrees with scipy.stats.norm.ppf
to a few units in the last place (tests/test_planning.py checks it), not bit for bit.
"""

from __future__ import annotations

from statistics import NormalDist

_STANDARD_NORMAL = NormalDist()


def normal_quantile(confidence: float) -> float:
    """z_{1 - alpha/2} of a two-sided interval at ``confidence`` (the margin of error's multiplier)."""
    return _STANDARD_NORMAL.inv_cdf(0.5 + confidence / 2.0)

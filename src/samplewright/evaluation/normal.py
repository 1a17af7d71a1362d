"""The normal quantile for sample-size planning, from the standard library so that `plan` starts fast.

``statistics.NormalDist().inv_cdf`` (Wichura's AS241 algorithm, accurate to double precision) spares
``samplewright plan`` the import of scipy.stats (about half a second). It agrees with scipy.stats.norm.ppf
to a few units in the last place but not bit for bit, so the runs keep :func:`measures.normal_quantile`
(scipy's): their saved numbers stay identical to those of earlier versions.
"""

from __future__ import annotations

from statistics import NormalDist

_STANDARD_NORMAL = NormalDist()


def normal_quantile(confidence: float) -> float:
    """z_{1 - alpha/2} of a two-sided interval at ``confidence`` (the margin of error's multiplier)."""
    return _STANDARD_NORMAL.inv_cdf(0.5 + confidence / 2.0)

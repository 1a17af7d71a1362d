"""Systematic sampling along the frame's list order, with a fractional interval."""

from __future__ import annotations

import numpy as np

from ..block import SampleBlock
from ..errors import InputError
from .base import Design


class Systematic(Design):
    """Every k-th unit along the list order from a random start, k = N / n (fractional).

    Positions are ``floor(u + j k)`` for j = 0..n-1 with u uniform on [0, k), so the sample
    size is exactly n and every unit has inclusion probability n / N.  The default variance
    estimate treats the sample as SRS (the usual practice, biased when the list order has
    structure; Cochran 1977, ch. 8).
    """

    method = "systematic"
    keys = ("n",)

    def __init__(self, label: str, n):
        super().__init__(label, n=n)

    def check(self, frame):
        n = self._positive_int("n", self.n)
        if n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame")

    def interval(self, frame) -> float:
        return frame.N / int(self.n)

    def _draw(self, frame, rng, B, keep_units):
        n, N = int(self.n), frame.N
        k = N / n
        u = rng.random(B) * k
        pos = np.floor(u[:, None] + np.arange(n)[None, :] * k).astype(np.int64)
        np.minimum(pos, N - 1, out=pos)  # guards the last position against rounding
        units = frame.order[pos]
        return SampleBlock(
            sums=frame.gather(units),
            weight=np.full(n, N / n),
            psu_stratum=np.zeros(n, dtype=np.int64),
            fpc=np.array([1.0 - n / N]),
            clusters=np.zeros(B),
            strata=0,
            units=units if keep_units else None,
        )

    def inclusion_probabilities(self, frame):
        return np.full(frame.N, int(self.n) / frame.N)

    def expected_n(self, frame):
        return float(self.n)

"""Simple random sampling of units, without replacement (default) or with replacement."""

from __future__ import annotations

import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.draws import distinct_positions, with_replacement
from samplewright.designs.enumeration import combination_chunks, product_chunks
from samplewright.errors import InputError


class SRS(Design):
    """Simple random sample of ``n`` units.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(10.0)}), target="y")
    >>> blk = SRS("simple", n=3).draw(f, np.random.default_rng(1), B=4)
    >>> blk.sums.shape
    (4, 3, 3)
    """

    method = "srs"
    keys = METHOD_KEYS["srs"]

    def __init__(self, label: str, n, replace: bool = False):
        super().__init__(label, n=n, replace=replace)

    def check(self, frame):
        n = self._positive_int("n", self.n)
        if not self.replace and n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame "
                             f"(set replace = true to sample with replacement)")

    def _draw(self, frame, rng, B, keep_units):
        pos = (with_replacement if self.replace else distinct_positions)(rng, frame.N, int(self.n), (B,))
        return self._block(frame, pos, keep_units)

    def _block(self, frame, pos, keep_units):
        n, N = int(self.n), frame.N
        return SampleBlock(
            sums=frame.gather(pos, fill=False),
            weight=np.full(n, N / n),
            psu_stratum=np.zeros(n, dtype=np.int64),
            fpc=np.array([1.0 if self.replace else 1.0 - n / N]),
            clusters=np.zeros(len(pos)),
            strata=0,
            units=pos if keep_units else None,
        ).deferring(frame.unfilled)

    # ------------------------------------------------------------ exact mode
    def count_samples(self, frame):
        n, N = int(self.n), frame.N
        return N ** n if self.replace else math.comb(N, n)

    def count_formula(self, frame):
        n, N = int(self.n), frame.N
        return f"N^n = {N}^{n}" if self.replace else f"C(N, n) = C({N}, {n})"

    def enumerate(self, frame, chunk=20_000):
        """Every ordered draw (with replacement) or every n-subset, each equally likely."""
        n, N = int(self.n), frame.N
        rows = product_chunks([N] * n, chunk) if self.replace else combination_chunks(N, n, chunk)
        p = (1.0 / N) ** n if self.replace else 1.0 / math.comb(N, n)
        for pos in rows:
            yield self._block(frame, pos, True), np.full(len(pos), p)

    def inclusion_probabilities(self, frame):
        n, N = int(self.n), frame.N
        p = 1.0 - (1.0 - 1.0 / N) ** n if self.replace else n / N
        return np.full(N, p)

    def expected_n(self, frame):
        return float(self.n)

"""Simple random sampling of units, without replacement (default) or with replacement."""

from __future__ import annotations

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.draws import distinct_positions, with_replacement
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
        n, N = int(self.n), frame.N
        pos = (with_replacement if self.replace else distinct_positions)(rng, N, n, (B,))
        return SampleBlock(
            sums=frame.gather(pos),
            weight=np.full(n, N / n),
            psu_stratum=np.zeros(n, dtype=np.int64),
            fpc=np.array([1.0 if self.replace else 1.0 - n / N]),
            clusters=np.zeros(B),
            strata=0,
            units=pos if keep_units else None,
        )

    def inclusion_probabilities(self, frame):
        n, N = int(self.n), frame.N
        p = 1.0 - (1.0 - 1.0 / N) ** n if self.replace else n / N
        return np.full(N, p)

    def expected_n(self, frame):
        return float(self.n)

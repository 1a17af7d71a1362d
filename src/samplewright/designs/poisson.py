"""Designs with a random sample size: Poisson sampling (pi_i by size) and Bernoulli sampling.

Each unit enters the sample independently, so the sample size varies from replicate to
replicate; blocks are padded to the largest sample in the block and carry a mask.

Notes
-----
Poisson sampling with pi_i = n x_i / X (certainty units, whose pi_i would reach 1, are
always taken): the sample size has mean sum pi_i and variance sum pi_i (1 - pi_i), and
since pi_ij = pi_i pi_j the Horvitz-Thompson variance estimator reduces to
v = sum_{i in s} (1 - pi_i) y_i^2 / pi_i^2 (Sarndal, Swensson & Wretman 1992, sec. 3.5).
Bernoulli sampling is the equal-probability case pi_i = n / N (SSW 1992, sec. 3.2); its
sample size is Binomial(N, n / N).
"""

from __future__ import annotations

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.draws import _KEY_BUDGET, distinct_positions
from samplewright.designs.pips import pips, size_measure, units_block
from samplewright.errors import InputError


def _padded(frame, inc: np.ndarray, pi: np.ndarray, keep_units: bool, variance: str):
    """Block from an inclusion matrix ``inc`` (B, N) bool, padded to the largest sample."""
    B = inc.shape[0]
    counts = inc.sum(axis=1)
    m = max(int(counts.max()) if B else 0, 1)
    rank = np.cumsum(inc, axis=1) - 1
    units = np.zeros((B, m), dtype=np.int64)
    r, c = np.nonzero(inc)
    units[r, rank[r, c]] = c
    mask = np.arange(m)[None, :] < counts[:, None]
    return _block(frame, units, mask, pi, keep_units, variance)


def _block(frame, units, mask, pi, keep_units, variance):
    m = units.shape[1]
    return units_block(frame, units, 1.0 / pi[units], np.zeros(m, dtype=np.int64), [1.0], mask=mask,
                       variance=variance, keep_units=keep_units)


class _IndependentDesign(Design):
    """Shared draw and enumeration of designs where units enter independently with pi_i."""

    variances = ("poisson",)

    def __init__(self, label: str, n, variance: str | None = None):
        super().__init__(label, n=n, variance=variance)

    def check(self, frame):
        self._positive_int("n", self.n)
        self._check_variance()
        if int(self.n) > frame.N:
            raise InputError(f"design {self.label!r}: expected size n = {self.n} is more than the "
                             f"{frame.N} units in the frame")

    def _draw(self, frame, rng, B, keep_units):
        pi = self.inclusion_probabilities(frame)
        N = frame.N
        step = max(1, _KEY_BUDGET // max(N, 1))
        parts = []
        for a in range(0, B, step):
            inc = rng.random((min(B, a + step) - a, N)) < pi
            parts.append(_padded(frame, inc, pi, keep_units, self.variance_name))
        return parts[0] if len(parts) == 1 else _concat(parts)

    def count_samples(self, frame):
        return 2 ** int((self.inclusion_probabilities(frame) < 1.0).sum())

    def enumerate(self, frame, chunk=20_000):
        """Every subset of the units with pi_i < 1 (certainty units always in), with its probability."""
        pi = self.inclusion_probabilities(frame)
        free = np.flatnonzero(pi < 1.0)
        total = 2 ** free.size
        for a in range(0, total, chunk):
            code = np.arange(a, min(total, a + chunk), dtype=np.int64)
            bits = ((code[:, None] >> np.arange(free.size)[None, :]) & 1).astype(bool)
            inc = pi[None, :] >= 1.0
            inc = np.repeat(inc, code.size, axis=0)
            inc[:, free] = bits
            prob = np.where(bits, pi[free], 1.0 - pi[free]).prod(axis=1)
            yield _padded(frame, inc, pi, True, self.variance_name), prob


def _concat(parts):
    """Join padded blocks of different widths along the replicate axis."""
    m = max(p.sums.shape[1] for p in parts)

    def pad(a, fill):
        w = [(0, 0), (0, m - a.shape[1])] + [(0, 0)] * (a.ndim - 2)
        return np.pad(a, w, constant_values=fill)

    first = parts[0]
    return SampleBlock(
        sums=np.concatenate([pad(p.sums, 0.0) for p in parts]),
        weight=np.concatenate([pad(p.weight, 1.0) for p in parts]),
        psu_stratum=np.zeros(m, dtype=np.int64),
        fpc=first.fpc,
        clusters=np.concatenate([p.clusters for p in parts]),
        strata=0,
        mask=np.concatenate([pad(p.mask, False) for p in parts]),
        units=None if first.units is None else np.concatenate([pad(p.units, 0) for p in parts]),
        variance=first.variance,
    )


def _empty_note(design, frame) -> list[str]:
    pi = design.inclusion_probabilities(frame)
    p0 = float(np.prod(1.0 - pi))
    if p0 < 1e-6:
        return []
    note = (f"design {design.label!r} at n = {design.n}: an empty sample has probability {p0:.2g}; "
            f"the Hajek mean is undefined (NaN) for such a replicate, which its summary rows do not count")
    return [note]


class Poisson(_IndependentDesign):
    """Poisson sampling: unit i enters independently with pi_i = n x_i / X (certainty units kept).

    ``n`` is the expected sample size.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(6.0), "x": [1.0, 1, 2, 2, 3, 3]}),
    ...                          target="y", size="x")
    >>> Poisson("by size", n=3).inclusion_probabilities(f).round(3).tolist()
    [0.25, 0.25, 0.5, 0.5, 0.75, 0.75]
    """

    method = "poisson"
    count_text = "2^(units with pi < 1)"
    keys = METHOD_KEYS[method]

    def check(self, frame):
        super().check(frame)
        size_measure(frame, self.label)

    def inclusion_probabilities(self, frame):
        return pips(size_measure(frame, self.label), int(self.n))[0]

    def notes(self, frame):
        _pi, certain, rounds = pips(size_measure(frame, self.label), int(self.n))
        if not certain.any():
            return _empty_note(self, frame)
        note = (f"design {self.label!r} at n = {self.n}: {int(certain.sum())} unit(s) with n x_i / X >= 1 "
                f"on size column {frame.roles.get('size')!r} are always taken ({rounds} removal round(s))")
        return [*_empty_note(self, frame), note]


class Bernoulli(_IndependentDesign):
    """Bernoulli sampling: every unit enters independently with probability n / N.

    Drawn as a Binomial(N, n / N) sample size followed by a simple random sample of that
    size (the same design, at a cost that depends on n, not N).
    """

    method = "bernoulli"
    count_text = "2^N"
    keys = METHOD_KEYS[method]

    def inclusion_probabilities(self, frame):
        return np.full(frame.N, int(self.n) / frame.N)

    def notes(self, frame):
        return _empty_note(self, frame)

    def _draw(self, frame, rng, B, keep_units):
        N, p = frame.N, int(self.n) / frame.N
        counts = rng.binomial(N, p, size=B)
        m = max(int(counts.max()), 1)
        pos = distinct_positions(rng, N, m, (B,))
        # a uniformly random order of a uniform m-subset: its first c units are a uniform c-subset
        perm = np.argsort(rng.random((B, m)), axis=1)
        units = np.take_along_axis(pos, perm, axis=1)
        mask = np.arange(m)[None, :] < counts[:, None]
        return _block(frame, units, mask, self.inclusion_probabilities(frame), keep_units, self.variance_name)

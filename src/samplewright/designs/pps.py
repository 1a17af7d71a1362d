"""Designs with probability proportional to the frame's ``size`` column.

Methods (scenario ``method =``):

- ``pps`` with ``replace = true``: n independent draws with p_i = x_i / X (with replacement);
  the Hansen-Hurwitz estimator (Cochran 1977, sec. 9A.3).  ``pps`` without ``replace = true``
  is refused: a fixed-size sample without replacement needs one of the methods below, which
  differ in their joint inclusion probabilities and variance estimators.
- ``pps_systematic``: systematic selection along cumulated pi_i in list order from one
  random start (Madow 1949; Sarndal, Swensson & Wretman 1992, sec. 3.6).
- ``sampford``: Sampford's (1967) fixed-size method, drawn without rejection; pi_i = n x_i / X exactly.
- ``pareto``: Rosen's (1997) Pareto order sampling; pi_i approximately n x_i / X.

Without-replacement methods take certainty units out iteratively (see ``pips.pips``): they
are always in the sample, form one-unit strata with no sampling variance, and are reported
in the run's notes.  Sampled units are the PSUs of design stratum 0.

Variance estimators (``variance =``; the first listed for a method is its default):
``hansen_hurwitz`` (with-replacement approximation), ``hartley_rao``, ``brewer`` and, for
Sampford on a small frame, ``sen_yates_grundy`` with exact joint probabilities; see
``pps_variance``.
"""

from __future__ import annotations

import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.base import Design
from samplewright.designs.draws import _KEY_BUDGET
from samplewright.designs.enumeration import combination_chunks, product_chunks
from samplewright.designs.pips import SampfordSampler, pips, size_measure, units_block
from samplewright.errors import InputError

#: most subsets enumerated to get exact joint inclusion probabilities (and in exact mode)
ENUMERATION_LIMIT = 2_000_000


class _SizeDesign(Design):
    """Shared set-up of the fixed-size pi-ps designs: pi_i, certainty units, block layout."""

    variances = ("hansen_hurwitz", "hartley_rao", "brewer")

    def __init__(self, label: str, n, variance: str | None = None):
        super().__init__(label, n=n, variance=variance)
        self._cache = {}

    def check(self, frame):
        n = self._positive_int("n", self.n)
        size_measure(frame, self.label)
        if n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame")
        self._check_variance()
        self.setup(frame)

    def setup(self, frame) -> dict:
        """pi (N,), certainty mask, the sampled (non-certainty) units and their pi, cached per frame."""
        key = id(frame)
        if key not in self._cache:
            x = size_measure(frame, self.label)
            pi, certain, rounds = pips(x, int(self.n))
            free = np.flatnonzero(~certain)
            s = {"pi": pi, "certain": np.flatnonzero(certain), "rounds": rounds, "free": free,
                 "pi_free": pi[free], "n_free": int(self.n) - int(certain.sum())}
            s["info"] = {"sum_pi2": float((pi[free] ** 2).sum()), "n": s["n_free"]}
            self._cache[key] = s
        return self._cache[key]

    def inclusion_probabilities(self, frame):
        return self.setup(frame)["pi"].copy()

    def expected_n(self, frame):
        return float(self.n)

    def notes(self, frame):
        s = self.setup(frame)
        c = s["certain"].size
        if not c:
            return []
        col = frame.roles.get("size")
        note = (f"design {self.label!r} at n = {self.n}: {c} unit(s) with n x_i / X >= 1 on size column "
                f"{col!r} are taken with certainty ({s['rounds']} removal round(s)); the other "
                f"{s['n_free']} are drawn from {s['free'].size} units")
        return [note]

    def _layout(self, frame, chosen: np.ndarray, keep_units: bool):
        """Block from sampled free positions ``chosen`` (B, n') plus the certainty units."""
        s = self.setup(frame)
        B = chosen.shape[0]
        cert = s["certain"]
        units = np.concatenate([s["free"][chosen], np.broadcast_to(cert, (B, cert.size))], axis=1)
        w = np.concatenate([1.0 / s["pi_free"][chosen], np.ones((B, cert.size))], axis=1)
        stratum = np.concatenate([np.zeros(chosen.shape[1], dtype=np.int64), 1 + np.arange(cert.size)])
        fpc = np.concatenate([[1.0], np.zeros(cert.size)])
        keep = keep_units or "sen_yates_grundy" in self.variance_names
        return units_block(frame, units, w, stratum, fpc, variance=self.variance_name,
                           design_info=self._info(frame), keep_units=keep)

    def _info(self, frame):
        return self.setup(frame)["info"]

    def _draw(self, frame, rng, B, keep_units):
        return self._layout(frame, self._select(frame, rng, B), keep_units)

    def _select(self, frame, rng, B) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError


class PPSSystematic(_SizeDesign):
    """Systematic pi-ps: one random start along the cumulated pi_i of the list order.

    Units (certainty ones removed) are laid end to end in the frame's list order, each over
    an interval of length pi_i; with u uniform on [0, 1) the sample is the units whose
    intervals hold u, u + 1, ..., u + n - 1.  Every pi_i is exact; many pairs have pi_ij = 0,
    so no unbiased variance estimator exists and the default is the with-replacement
    approximation (Sarndal, Swensson & Wretman 1992, sec. 3.6).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(8.0), "x": np.arange(1.0, 9.0)}),
    ...                          target="y", size="x")
    >>> d = PPSSystematic("by size", n=3)
    >>> d.check(f)
    >>> d.draw(f, np.random.default_rng(3), B=2, keep_units=True).units.shape
    (2, 3)
    """

    method = "pps_systematic"
    count_text = "distinct random starts"
    keys = METHOD_KEYS[method]

    def _cum(self, frame):
        s = self.setup(frame)
        if "cum" not in s:
            in_order = frame.order[np.isin(frame.order, s["free"])]  # free units in list order
            pos = np.searchsorted(s["free"], in_order)  # their positions among the free units
            s["order_pos"] = pos
            s["cum"] = np.cumsum(s["pi_free"][pos])
        return s["order_pos"], s["cum"]

    def _positions(self, frame, u: np.ndarray) -> np.ndarray:
        pos, cum = self._cum(frame)
        k = self.setup(frame)["n_free"]
        pts = u[:, None] + np.arange(k)[None, :]
        idx = np.minimum(np.searchsorted(cum, pts, side="right"), cum.size - 1)
        return pos[idx]

    def _select(self, frame, rng, B):
        return self._positions(frame, rng.random(B))

    def count_samples(self, frame):
        return len(self._segments(frame)[0])

    def _segments(self, frame):
        _, cum = self._cum(frame)
        br = np.unique(np.concatenate([[0.0, 1.0], np.mod(cum, 1.0)]))
        br = br[(br >= 0) & (br <= 1)]
        lo, hi = br[:-1], br[1:]
        keep = hi - lo > 1e-15
        return (lo[keep] + hi[keep]) / 2.0, hi[keep] - lo[keep]

    def enumerate(self, frame, chunk=20_000):
        mid, length = self._segments(frame)
        for a in range(0, mid.size, chunk):
            yield self._layout(frame, self._positions(frame, mid[a:a + chunk]), True), length[a:a + chunk]


class Sampford(_SizeDesign):
    """Sampford's (1967) fixed-size pi-ps method, drawn list-sequentially (see ``pips.SampfordSampler``).

    pi_i = n x_i / X exactly and every pi_ij > 0, so the Sen-Yates-Grundy estimator with
    exact joint probabilities is available (``variance = "sen_yates_grundy"``) when the
    frame is small enough to enumerate every sample (at most 2 million).
    """

    method = "sampford"
    count_text = "C(units without certainty, n without certainty)"
    keys = METHOD_KEYS[method]
    variances = ("hansen_hurwitz", "hartley_rao", "brewer", "sen_yates_grundy")

    def check(self, frame):
        super().check(frame)
        if "sen_yates_grundy" in self.variance_names:
            count = self.count_samples(frame)
            if count > ENUMERATION_LIMIT:
                s = self.setup(frame)
                raise InputError(f"design {self.label!r}: variance = \"sen_yates_grundy\" needs exact joint "
                                 f"probabilities from all C({s['free'].size}, {s['n_free']}) = {count} samples, "
                                 f"more than the limit of {ENUMERATION_LIMIT}; use \"hartley_rao\" or \"brewer\"")

    def _select(self, frame, rng, B):
        s = self.setup(frame)
        if s["n_free"] == 0:  # every unit is a certainty unit: nothing left to draw
            return np.zeros((B, 0), dtype=np.int64)
        if "sampler" not in s:
            s["sampler"] = SampfordSampler(s["pi_free"])
        return s["sampler"].draw(rng, B)

    def count_samples(self, frame):
        s = self.setup(frame)
        return math.comb(s["free"].size, s["n_free"])

    def enumerate(self, frame, chunk=20_000):
        s = self.setup(frame)
        if s["n_free"] == 0:
            yield self._layout(frame, np.zeros((1, 0), dtype=np.int64), True), np.ones(1)
            return
        logw = self._log_weights(frame)
        for rows in combination_chunks(s["free"].size, s["n_free"], chunk):
            yield self._layout(frame, rows, True), np.exp(logw(rows))

    def _log_weights(self, frame):
        """log p(s) for rows of free positions (normalised over all samples)."""
        s = self.setup(frame)
        if "log_c" not in s:
            pi = s["pi_free"]
            s["logr"] = np.log(pi) - np.log1p(-pi)
            parts = [np.logaddexp.reduce(s["logr"][rows].sum(axis=1) + np.log(s["n_free"] - pi[rows].sum(axis=1)))
                     for rows in combination_chunks(pi.size, s["n_free"], 100_000)]
            s["log_c"] = float(np.logaddexp.reduce(np.array(parts)))
        pi, logr, c, k = s["pi_free"], s["logr"], s["log_c"], s["n_free"]
        return lambda rows: logr[rows].sum(axis=1) + np.log(k - pi[rows].sum(axis=1)) - c

    def joint_probabilities(self, frame) -> np.ndarray:
        """Exact pi_ij over the free (non-certainty) units by enumerating every sample."""
        s = self.setup(frame)
        if "pij" not in s:
            M = s["free"].size
            pij = np.zeros((M, M))
            if s["n_free"] == 0:  # every unit is a certainty unit: no random part, no joint terms
                s["pij"] = pij
                return pij
            logw = self._log_weights(frame)
            for rows in combination_chunks(M, s["n_free"], 50_000):
                p = np.exp(logw(rows))
                ind = np.zeros((rows.shape[0], M))
                ind[np.arange(rows.shape[0])[:, None], rows] = 1.0
                pij += (ind * p[:, None]).T @ ind
            s["pij"] = pij
        return s["pij"]

    def _info(self, frame):
        s = self.setup(frame)
        if "sen_yates_grundy" in self.variance_names and "pij" not in s["info"]:
            index = np.full(frame.N, -1, dtype=np.int64)
            index[s["free"]] = np.arange(s["free"].size)
            s["info"] = {**s["info"], "pij": self.joint_probabilities(frame), "free_index": index}
        return s["info"]


class Pareto(_SizeDesign):
    """Rosen's (1997) Pareto order sampling: the n units with the smallest ranking keys.

    Key of unit i: Q_i = [U_i / (1 - U_i)] / [lambda_i / (1 - lambda_i)] with U_i uniform and
    lambda_i = n x_i / X (certainty units removed).  The sample size is fixed; the actual
    pi_i are close to, not equal to, lambda_i (Rosen 1997, J. Statist. Plann. Inference
    62:159-191), and ``inclusion_probabilities`` returns lambda_i.
    """

    method = "pareto"
    keys = METHOD_KEYS[method]

    def _select(self, frame, rng, B):
        s = self.setup(frame)
        lam, k = s["pi_free"], s["n_free"]
        M = lam.size
        out = np.empty((B, k), dtype=np.int64)
        if k == 0:
            return out
        theta = lam / (1.0 - lam)
        step = max(1, _KEY_BUDGET // max(M, 1))
        for a in range(0, B, step):
            e = min(B, a + step)
            u = rng.random((e - a, M))
            q = u / (1.0 - u) / theta
            out[a:e] = np.argpartition(q, k - 1, axis=1)[:, :k] if k < M else np.arange(M)
        return out


class PPSWithReplacement(Design):
    """n independent draws with probabilities p_i = x_i / X, and the Hansen-Hurwitz estimator.

    Each draw is a PSU with weight 1 / (n p_i), so the block's HT total is the Hansen-Hurwitz
    estimator t = (1/n) sum y_i / p_i, and the shared PSU variance routine with no finite
    population correction is its unbiased variance estimator
    v = sum (y_i / p_i - t)^2 / (n (n - 1)) (Cochran 1977, eqs. 9A.6 and 9A.8).
    A unit drawn twice counts twice in the sample size and cost.  ``replace`` must be true (see
    the module notes).
    """

    method = "pps"
    count_text = "N^n"
    keys = METHOD_KEYS[method]
    variances = ("hansen_hurwitz",)

    def __init__(self, label: str, n, replace: bool | None = None, variance: str | None = None):
        super().__init__(label, n=n, replace=replace, variance=variance)

    def check(self, frame):
        if self.replace is not True:
            raise InputError(f'design {self.label!r}: method = "pps" draws with replacement and needs '
                             'replace = true; for a fixed-size sample without replacement use method = '
                             '"sampford", "pareto" or "pps_systematic"')
        self._positive_int("n", self.n)
        size_measure(frame, self.label)
        self._check_variance()

    def _p(self, frame):
        x = size_measure(frame, self.label)
        return x / x.sum()

    def _block(self, frame, units, keep_units):
        n = int(self.n)
        p = self._p(frame)
        return units_block(frame, units, 1.0 / (n * p[units]), np.zeros(n, dtype=np.int64), [1.0],
                           variance=self.variance_name, keep_units=keep_units)

    def _draw(self, frame, rng, B, keep_units):
        cum = np.cumsum(self._p(frame))
        u = rng.random((B, int(self.n))) * cum[-1]
        units = np.minimum(np.searchsorted(cum, u, side="right"), frame.N - 1)
        return self._block(frame, units, keep_units)

    def inclusion_probabilities(self, frame):
        return 1.0 - (1.0 - self._p(frame)) ** int(self.n)

    def expected_n(self, frame):
        return float(self.n)

    def count_samples(self, frame):
        return frame.N ** int(self.n)

    def enumerate(self, frame, chunk=20_000):
        """Every ordered sequence of n draws, with probability prod p_i."""
        n, N = int(self.n), frame.N
        p = self._p(frame)
        for draws in product_chunks([N] * n, chunk):
            yield self._block(frame, draws, True), p[draws].prod(axis=1)

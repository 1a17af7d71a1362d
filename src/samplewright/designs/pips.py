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

import math

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


class SampfordSampler:
    """Exact, non-rejective draws of Sampford's design for fixed pi (all 0 < pi_i < 1, sum n).

    Notes
    -----
    Sampford (1967), Biometrika 54:499-513: p(s) is proportional to
    prod_{i in s} w_i sum_{j in s} (1 - pi_j) with w_i = pi_i / (1 - pi_i), and unit i is
    included with probability exactly pi_i.  Since w_j (1 - pi_j) = pi_j, p(s) is the margin
    of a pair (s, j), j in s a "marked" unit, with weight pi_j prod_{i in s, i != j} w_i.
    The pair is drawn list-sequentially: units k = 0..N-1 are visited in turn with the state
    (r units still to take, m = 1 once the marked unit is taken), and each step follows the
    weights of the completions over the tail k..N-1 (a sequential form of the kind Grafstrom
    2009, J. Statist. Plann. Inference, describes; from memory).  With
    E_r(k) = e_r(w_k..w_{N-1}) (elementary symmetric polynomials) and F_r(k) the sum over tail
    subsets t of size r of prod_t w sum_{j in t} (1 - pi_j):

    - m = 1: take k with probability w_k E_{r-1}(k+1) / E_r(k);
    - m = 0: take k as the marked unit with probability pi_k E_{r-1}(k+1) / F_r(k), as an
      ordinary one with w_k F_{r-1}(k+1) / F_r(k), else skip it.

    The tables are kept as bounded ratios, never as E or F themselves (which overflow):
    sigma_k[r] = E_r(k) / E_{r-1}(k), alpha_k[r] = w_k / (sigma_{k+1}[r] + w_k) (the share of
    E_r(k) that takes k) and tau_k[r] = F_r(k) / E_r(k) (a weighted mean of sum (1 - pi) over
    tail subsets), from E_r(k) = E_r(k+1) + w_k E_{r-1}(k+1) and
    F_r(k) = F_r(k+1) + w_k (F_{r-1}(k+1) + (1 - pi_k) E_{r-1}(k+1)).  Full rows of sigma and
    tau are kept only every ``L`` units (checkpoints, built once); a draw recomputes each
    segment of ``L`` units from its checkpoint, over the band of r that the block's
    replicates can reach there, and walks the segment with one vector step per unit across
    the block.  Memory O((N / L + L) n); time per block O(N (band + B)).
    """

    #: checkpoints every 64 units while they fit in this many bytes; past it, the L that
    #: minimises checkpoints (16 N (n + 1) / L bytes) plus a segment's tables (about 32 L^2)
    CHECKPOINT_BYTES = 64 * 2**20

    def __init__(self, pi):
        pi = np.asarray(pi, dtype=float)
        self.N = pi.size
        self.n = round(float(pi.sum()))
        self.w = pi / (1.0 - pi)
        self.c = 1.0 - pi
        cells = self.N * (self.n + 1)
        self.L = 64 if 16 * cells / 64 <= self.CHECKPOINT_BYTES else math.ceil((cells / 4) ** (1 / 3))
        self._checkpoints = None

    @staticmethod
    def _step(sig, tau, lo, w, c, tables=None):
        """Rows over r = lo..hi at k+1 -> rows at k over lo'..hi (lo' = lo + 1, or 0 at lo = 0).

        With ``tables = (ct, cm)`` (views over lo'..hi) also writes the step's thresholds for
        m = 0: take with probability ct, of which take as the marked unit with cm.
        """
        S = sig + w
        if lo == 0:  # keep r = 0 (nothing left to take): alpha 0, tau 0; sigma_0 is never used
            alpha = w / S
            alpha[0] = 0.0
            sp, tp, tm, s_hi, s_lo = S[1:], tau[1:], tau[:-1], S[2:], S[1:-1]
            a = alpha[1:]
        else:
            alpha = w / S[1:]
            a, sp, tp, tm, s_hi, s_lo = alpha, S[1:], tau[1:], tau[:-1], S[1:], S[:-1]
        A = a * (tm + c)
        t_new = A + (1.0 - a) * tp
        if lo == 0:
            tau_n = np.concatenate([[0.0], t_new])
            sig_n = np.concatenate([[1.0], sp[:1], s_hi * sig[1:-1] / s_lo])
        else:
            tau_n = t_new
            sig_n = s_hi * sig[:-1] / s_lo
        if tables is not None:
            ct, cm = tables
            off = 1 if lo == 0 else 0  # r = 0 with m = 0 cannot occur: thresholds stay 0
            ct[off:] = A / t_new
            cm[off:] = a * c / t_new
        return alpha, sig_n, tau_n, (0 if lo == 0 else lo + 1)

    def checkpoints(self) -> dict:
        """Full rows (sigma, tau) at k = L, 2L, ..., N (built once, by one backward pass)."""
        if self._checkpoints is None:
            n, N, L = self.n, self.N, self.L
            sig = np.zeros(n + 1)
            sig[0] = 1.0
            tau = np.zeros(n + 1)
            rows = {N: (sig, tau)}
            for k in range(N - 1, L - 1, -1):
                _, sig, tau, _ = self._step(sig, tau, 0, self.w[k], self.c[k])
                if k % L == 0:
                    rows[k] = (sig, tau)
            self._checkpoints = rows
        return self._checkpoints

    def draw(self, rng: np.random.Generator, B: int) -> np.ndarray:
        """``B`` samples as sorted positions (B, n)."""
        n, N, L = self.n, self.N, self.L
        if n == 0:
            return np.empty((B, 0), dtype=np.int64)
        if n == N:
            return np.broadcast_to(np.arange(N), (B, N)).copy()
        rows = self.checkpoints()
        out = np.empty((B, n), dtype=np.int64)
        filled = np.zeros(B, dtype=np.int64)  # units taken so far by each replicate
        take = np.empty((L, B), dtype=bool)
        r = np.full(B, n, dtype=np.int64)
        m = np.zeros(B, dtype=np.int64)
        for k0 in range(0, N, L):
            k1 = min(k0 + L, N)
            rmax = int(r.max())
            blo = max(0, int(r.min()) - (k1 - k0))
            sig, tau = (a[blo:rmax + 1] for a in rows[k1])
            lo = blo
            width = rmax - blo + 1
            CT = np.zeros((k1 - k0, 2 * width))  # per unit, per state 2 (r - blo) + m: take below this
            CM = np.zeros((k1 - k0, 2 * width))  # ... and take as the marked unit below this
            for k in range(k1 - 1, k0 - 1, -1):
                j = k - k0
                nlo = 0 if lo == 0 else lo + 1
                at = 2 * (nlo - blo)
                alpha, sig, tau, lo = self._step(sig, tau, lo, self.w[k], self.c[k],
                                                 (CT[j, at::2], CM[j, at::2]))
                CT[j, at + 1::2] = alpha
            st = 2 * (r - blo) + m
            u = rng.random((k1 - k0, B))
            for j in range(k1 - k0):
                t = np.less(u[j], CT[j].take(st), out=take[j])
                mark = u[j] < CM[j].take(st)
                st -= t
                st -= t
                st += mark
            r, m = st // 2 + blo, st % 2
            b, kk = np.nonzero(take[:k1 - k0].T)  # by replicate, then unit
            count = np.bincount(b, minlength=B)
            rank = np.arange(b.size) - (np.cumsum(count) - count)[b]
            out[b, filled[b] + rank] = k0 + kk
            filled += count
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

"""Systematic sampling along the frame's list order: linear or circular, one or several
random starts, optionally after sorting the list by a column (implicit stratification)."""

from __future__ import annotations

import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.config.validate import closest
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError

KINDS = ("linear", "circular")


class Systematic(Design):
    """Every k-th unit along the list order from a random start, k = N / n.

    Parameters (scenario keys)
    --------------------------
    n : int or list of int
        Units in the sample (all starts together).
    kind : {"linear", "circular"}
        ``linear`` (default): positions ``floor(u + j k)``, j = 0..n-1, with u uniform on
        [0, k); a fractional k keeps the size exactly n.  ``circular``: a whole start s
        uniform on 0..N-1 and positions ``(s + floor(j k)) mod N``, wrapping round the end of
        the list (Lahiri's circular method when k is whole; Cochran 1977, sec. 8.1).
    starts : int
        r independent random starts (default 1), each taking n / r units with the interval
        K = r k, so n must be a multiple of r.  The r start samples are independent
        replicates of one systematic sample, which gives the between-start variance
        estimator (Wolter, Introduction to Variance Estimation, ch. 2, random groups).  Two
        starts can hit the same unit; it then counts twice, each time with weight N / n.
    sort_by : str, optional
        Sort the list by this column first (stable: ties keep the list order).  Sorting by
        a stratifying column gives implicit stratification: each group receives its
        proportional share of the sample, within one unit.  The frame must be loaded with the
        column as a sort key (a scenario does this from the designs' ``sort_by``).
    variance : {"srs", "successive_differences", "between_starts"} or a list of them
        A list scores every formula on the same draws (the first is the default).  ``srs``
        (default): the SRS formula (1 - f) s^2 / n, the usual practice, biased when the list
        order has structure (Cochran 1977, ch. 8).  ``successive_differences``: Wolter's
        v3 on the units in list order (see
        :func:`samplewright.estimation.systematic_variance.successive_difference_variance`).
        ``between_starts``: the r start samples are the PSUs (needs starts >= 2).

    Notes
    -----
    Inclusion probabilities.  One start, linear: unit i is taken when u falls in a set of
    length 1 out of [0, k), so pi_i = 1 / k = n / N exactly (also for a fractional k).
    Circular: unit i is taken for exactly n of the N starts, pi_i = n / N.  With r starts
    each start takes a unit with probability 1 / K = n / (r N), independently, so
    pi_i = 1 - (1 - n / (r N))^r and the expected number of selections of unit i is n / N;
    the estimators weight each selection by N / n, which is unbiased for the total.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(12.0)}), target="y")
    >>> blk = Systematic("every 3rd", n=4).draw(f, np.random.default_rng(1), B=2, keep_units=True)
    >>> np.diff(blk.units, axis=1).tolist()
    [[3, 3, 3], [3, 3, 3]]
    """

    method = "systematic"
    keys = METHOD_KEYS["systematic"]
    variances = ("srs", "successive_differences", "between_starts")
    count_text = "distinct random starts"

    def __init__(self, label: str, n, kind: str = "linear", starts: int = 1, sort_by: str | None = None,
                 variance: str = "srs"):
        super().__init__(label, n=n, kind=kind, starts=starts, sort_by=sort_by, variance=variance)

    # ------------------------------------------------------------------ checks
    def check(self, frame):
        n = self._positive_int("n", self.n)
        if n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame")
        if self.kind not in KINDS:
            raise InputError(f"design {self.label!r}: kind = {self.kind!r} is not known"
                             f"{closest(str(self.kind), KINDS)}")
        r = self._positive_int("starts", self.starts)
        if n % r:
            raise InputError(f"design {self.label!r}: n = {n} is not a multiple of starts = {r} "
                             f"(each of the {r} starts takes n / starts units)")
        self._check_variance()
        if "between_starts" in self.variance_names and r < 2:
            raise InputError(f"design {self.label!r}: variance = 'between_starts' needs starts = 2 or more "
                             f"(got starts = {r})")
        if "successive_differences" in self.variance_names and n < 2:
            raise InputError(f"design {self.label!r}: variance = 'successive_differences' needs n >= 2")
        if self.sort_by is not None:
            if not isinstance(self.sort_by, str) or not self.sort_by:
                raise InputError(f"design {self.label!r}: sort_by must be a column name, got {self.sort_by!r}")
            if self.sort_by not in frame.sort_orders:
                raise InputError(f"design {self.label!r}: sort_by column {self.sort_by!r} is not a sort key of "
                                 f"the frame (load the frame with sort_keys=[{self.sort_by!r}])")

    # ------------------------------------------------------------------ geometry
    def interval(self, frame) -> float:
        """The interval between the units of one start: K = starts x N / n."""
        return int(self.starts) * frame.N / int(self.n)

    def list_order(self, frame) -> np.ndarray:
        """Unit indices in the order the design walks (the list order, or sorted by ``sort_by``)."""
        return frame.order if self.sort_by is None else frame.sort_orders[self.sort_by]

    def positions(self, frame, rng: np.random.Generator, B: int) -> np.ndarray:
        """List positions (B, starts, n / starts) of B replicate samples."""
        n, N, r = int(self.n), frame.N, int(self.starts)
        m = n // r
        j = np.arange(m)
        if self.kind == "circular":
            s = rng.integers(0, N, size=(B, r))
            offsets = (j * N) // m  # floor(j K) in whole numbers, K = N / m
            return (s[..., None] + offsets) % N
        v = rng.random((B, r)) * N  # v = u m with u uniform on [0, K): floor(u + j K) = floor((v + j N) / m)
        x = np.empty((B, r, m))
        np.add(v[..., None], j * N, out=x)
        x /= m
        pos = x.astype(np.int64)  # not negative: truncation is the floor
        # (v + j N) / m < (j + 1) N / m <= N - N / m <= N - 1 below the last position: only the last can
        # round up to N, so only it is guarded
        np.minimum(pos[..., -1], N - 1, out=pos[..., -1])
        return pos

    # ------------------------------------------------------------------ drawing
    def _draw(self, frame, rng, B, keep_units):
        pos = self.positions(frame, rng, B)  # (B, r, m)
        in_order = self.kind == "linear" and int(self.starts) == 1  # positions already ascend along the list
        return self._block(frame, pos.reshape(B, -1), keep_units, in_order)

    def _block(self, frame, flat, keep_units, in_order):
        """The block of list positions ``flat`` (B, n), start after start: each unit a PSU, viewed with
        every listed variance formula (the draw is the same for all; see ``variants``).

        ``srs`` and ``successive_differences`` take the units as PSUs with the correction 1 - n / N
        (successive differences put them in list order through ``list_order``); ``between_starts``
        groups them by start (``psu``, as the clusters of a two-stage block) without a correction.
        """
        n, N, r = int(self.n), frame.N, int(self.starts)
        B = flat.shape[0]
        order = self.list_order(frame)
        names = self.variance_names
        views = {name: {"psu": None, "fpc": np.array([1.0 - n / N]), "within_fpc": None} for name in names}
        if "between_starts" in views:
            views["between_starts"] = {"psu": np.repeat(np.arange(r), n // r), "fpc": np.array([1.0]),
                                       "within_fpc": np.zeros((B, r))}
        neighbours = "successive_differences" in views and not in_order
        return SampleBlock(
            sums=frame.gather_through(order, flat, fill=False),  # rows read along the list order
            weight=np.full(n, N / n),
            psu_stratum=np.zeros(n, dtype=np.int64),
            clusters=np.zeros(B),
            strata=0,
            units=order[flat] if keep_units else None,
            variance=names[0],
            variants=views if len(names) > 1 else None,
            list_order=np.argsort(flat, axis=1, kind="stable") if neighbours else None,
            **views[names[0]],
        ).deferring(frame.unfilled)

    # ------------------------------------------------------------------ exact mode
    def _distinct_starts(self, frame):
        """Midpoints and lengths (as shares of k) of the start intervals in [0, k) that give distinct samples."""
        n, N = int(self.n), frame.N
        k = N / n
        j = np.arange(n)
        # the sample changes where u + j k crosses an integer: u = c - j k for whole c
        cuts = [np.arange(math.ceil(jj * k), math.floor(jj * k + k) + 1) - jj * k for jj in j]
        br = np.unique(np.concatenate([[0.0, k], *cuts]))
        br = br[(br >= 0) & (br <= k)]
        lo, hi = br[:-1], br[1:]
        keep = hi - lo > 1e-12 * k
        return (lo[keep] + hi[keep]) / 2.0, (hi[keep] - lo[keep]) / k

    def _check_enumerable(self):
        if self.kind != "linear" or int(self.starts) != 1:
            raise InputError(f"design {self.label!r}: exact mode covers linear systematic sampling with one start "
                             f"(kind = \"linear\", starts = 1)")

    def count_samples(self, frame):
        return len(self._distinct_starts(frame)[0])

    def enumerate(self, frame, chunk=20_000):
        """Linear systematic sampling with one random start: one sample per distinct start interval."""
        self._check_enumerable()
        n, N = int(self.n), frame.N
        k = N / n
        mid, prob = self._distinct_starts(frame)
        for a in range(0, mid.size, chunk):
            u = mid[a:a + chunk]
            pos = np.minimum(np.floor(u[:, None] + np.arange(n)[None, :] * k).astype(np.int64), N - 1)
            yield self._block(frame, pos, True, in_order=True), prob[a:a + chunk]

    # ------------------------------------------------------------------ probabilities
    def inclusion_probabilities(self, frame):
        n, N, r = int(self.n), frame.N, int(self.starts)
        if r == 1:
            return np.full(N, n / N)
        return np.full(N, 1.0 - (1.0 - n / (r * N)) ** r)

    def expected_hits(self, frame) -> np.ndarray:
        """Expected number of times each unit is selected (n / N; equals pi_i for one start)."""
        return np.full(frame.N, int(self.n) / frame.N)

    def expected_n(self, frame):
        """Selections per sample: exactly n (with several starts a unit may be selected twice)."""
        return float(self.n)

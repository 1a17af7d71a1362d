"""Cycles along a frame's list order, and the systematic intervals they make unsafe.

A systematic sample takes every k-th unit of the list.  When the target repeats with a
period P along the list and k is (close to) a multiple of P, every unit of a sample sits on
the same phase of the cycle: the estimate depends on the start far more than the SRS
variance formula admits, and the intervals it gives under-cover.  This module finds such
cycles in the frame itself (before any fieldwork) and lists the intervals to avoid.

Method
------
1. **Detrend.**  A smooth trend is removed first: the least-squares polynomial of degree
   :data:`TREND_DEGREE` (3, a cubic) in the list position.  A trend is not a cycle, and a
   smooth trend helps a systematic sample rather than hurting it (Cochran 1977, sec. 8.7).
2. **Periodogram.**  I_j = |sum_t r_t exp(-2 pi i j t / N)|^2 / N at the Fourier frequencies
   j = :data:`MIN_CYCLES` .. floor((N - 1) / 2): periods from N / MIN_CYCLES (at least four
   whole cycles along the list) down to just above 2.
3. **Significance: Fisher's g test** (Fisher 1929, Proc. R. Soc. A 125:54-59).  Under
   Gaussian white noise the m ordinates are independent exponentials, and the share of the
   largest one, g = max I_j / sum I_j, has the exact tail
   ``P(g > x) = sum_{k=1}^{floor(1/x)} (-1)^(k-1) C(m, k) (1 - k x)^(m-1)``.
   A period is declared when this p-value is at most the false-alarm rate ``alpha``
   (:data:`FALSE_ALARM`, 1%): on a list with no cycle, a period is reported with probability
   alpha (exactly, for Gaussian noise and no trend; the cubic trend removal changes the
   lowest ordinates slightly, which the tests show does not move the rate).
4. **More periods.**  The detected sinusoid is fitted by least squares at a refined
   frequency (Candan's three-bin estimator, IEEE Signal Processing Letters 18:351-354, 2011;
   from memory) together with those found before, and removed; its frequency bin and the two
   next to it leave the candidate set; the test is repeated on what is left, up to
   :data:`MAX_PERIODS` times (a sequential use of Fisher's test, common practice).  The
   white-noise false-alarm rate is that of the first test.
5. **Strength** of a period: the share of the detrended variance its fitted sinusoid
   carries, A^2 / 2 over mean(r^2), between 0 and 1.  The autocorrelation of the detrended
   list at the lag nearest the period is reported beside it.

Unsafe intervals (our rule)
---------------------------
A sample of n = N / k units steps through the cycle by ``k / P`` cycles per unit.  If
``k / P`` is near a whole number a >= 1 (the interval is near a multiple of the period), the
phases barely move: with delta = k / P - a, the cycle's part of the sample mean keeps the
factor ``D = |sin(pi n delta) / (n sin(pi delta))|`` of its amplitude (the Dirichlet kernel;
D = 1 when every unit sits on the same phase, about 0 once the phases sweep whole cycles).
An in-phase sinusoid of strength s then adds about ``s S^2 D^2`` to the variance of the
mean, against the SRS variance (1 - f) S^2 / n, so the interval is **unsafe** when

    s n D^2 / (1 - f) >= MATERIAL  (0.5)

-- the true variance is then at least 1.5 times what the SRS formula reports, and nominal
95% intervals cover at most about 89% (our threshold, from the normal approximation; not a
published rule).  The same test with ``delta = b k / P - 1`` for b = 2 .. :data:`MAX_PHASES`
covers a period near a multiple of k (P ~ b k: the sample sees only b points of each
cycle).  A pure sinusoid cancels there, but a peaked cycle does not; this second form is
applied to fundamental periods only (a harmonic's own multiples are covered by the first).

Examples
--------
>>> import numpy as np
>>> rng = np.random.default_rng(4)
>>> t = np.arange(2400)
>>> y = 10 * np.sin(2 * np.pi * t / 24) + rng.normal(0, 5, t.size)
>>> rep = detect_periods(y)
>>> round(rep.periods[0].period, 2)
24.0
>>> 24 in unsafe_intervals(rep.periods, len(y)) and 25 not in unsafe_intervals(rep.periods, len(y))
True
"""

from __future__ import annotations

import weakref
from dataclasses import asdict, dataclass, field

import numpy as np
from scipy.special import gammaln

#: probability of reporting a period on a list with no cycle (Gaussian white noise)
FALSE_ALARM = 0.01
#: degree of the polynomial trend removed before the periodogram
TREND_DEGREE = 3
#: a period must repeat at least this many times along the list to be tested
MIN_CYCLES = 4
#: at most this many periods are reported
MAX_PERIODS = 8
#: the "period near a multiple of k" rule checks up to this many phases per cycle
MAX_PHASES = 4
#: an aliased cycle matters when it adds at least this share of the SRS variance
MATERIAL = 0.5
#: the autocorrelation function is returned up to this lag (or N // 4)
ACF_LAGS = 200

DETREND_TEXT = (f"least-squares polynomial of degree {TREND_DEGREE} in the list position removed; "
                f"periodogram at the Fourier frequencies; Fisher's g test (Fisher 1929)")


@dataclass(frozen=True)
class Period:
    """One detected cycle along the list order."""

    period: float  # in list positions (units)
    strength: float  # share of the detrended variance carried by the fitted sinusoid
    amplitude: float  # of the fitted sinusoid, in units of the target
    autocorrelation: float  # of the detrended list at the lag nearest the period
    p_value: float  # of Fisher's g test at the step that found it
    harmonic_of: float | None = None  # the longer detected period this one is a harmonic of

    def as_dict(self) -> dict:
        return {k: (None if v is None else float(v)) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class OrderReport:
    """What the detector found on one list: the periods (strongest first) and the test details."""

    N: int
    alpha: float
    tested: int  # number of periodogram ordinates in the first test
    g: float  # Fisher's g of the first test (nan when nothing could be tested)
    p_value: float  # its p-value
    periods: tuple[Period, ...] = ()
    acf: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)  # lags 1..L
    method: str = DETREND_TEXT

    @property
    def significant(self) -> bool:
        return len(self.periods) > 0


# ---------------------------------------------------------------- building blocks
def detrend(x, degree: int = TREND_DEGREE) -> np.ndarray:
    """Residuals of ``x`` after a least-squares polynomial of ``degree`` in the position.

    A Legendre basis on positions scaled to [-1, 1] keeps the fit well conditioned.
    """
    x = np.asarray(x, dtype=float)
    N = x.shape[0]
    if N <= degree + 1:
        return x - x.mean()
    t = np.linspace(-1.0, 1.0, N)
    X = np.polynomial.legendre.legvander(t, degree)
    coef, *_ = np.linalg.lstsq(X, x, rcond=None)
    return x - X @ coef


def periodogram(r) -> np.ndarray:
    """I_j = |DFT_j(r)|^2 / N for j = 0 .. N // 2."""
    r = np.asarray(r, dtype=float)
    return np.abs(np.fft.rfft(r)) ** 2 / r.shape[0]


def autocorrelation(r, max_lag: int) -> np.ndarray:
    """Sample autocorrelation sum_t r_t r_{t+l} / sum_t r_t^2 of a mean-zero list, lags 1..max_lag."""
    r = np.asarray(r, dtype=float)
    N = r.shape[0]
    max_lag = int(min(max_lag, N - 1))
    if max_lag < 1:
        return np.zeros(0)
    size = 1 << int(np.ceil(np.log2(2 * N)))
    f = np.fft.rfft(r, size)
    acov = np.fft.irfft(f * np.conj(f), size)[: max_lag + 1]
    return acov[1:] / acov[0] if acov[0] > 0 else np.zeros(max_lag)


def fisher_g_pvalue(g: float, m: int) -> float:
    """Exact upper tail P(G > g) of Fisher's g statistic for m independent ordinates.

    Notes
    -----
    ``P(G > g) = sum_{k=1}^{floor(1/g)} (-1)^(k-1) C(m, k) (1 - k g)^(m-1)`` (Fisher 1929).
    When the first term is below 1 the terms fall fast and the alternating sum is stable;
    when it is not, the p-value is large and 1 is returned.

    Examples
    --------
    >>> round(fisher_g_pvalue(0.75, 2), 6)  # for m = 2, P(G > x) = 2 (1 - x)
    0.5
    """
    m = int(m)
    if m < 2 or not np.isfinite(g):
        return 1.0
    if g >= 1.0:
        return 0.0
    if g <= 1.0 / m:
        return 1.0
    K = min(int(np.floor(1.0 / g)), m)
    k = np.arange(1, K + 1, dtype=float)
    base = 1.0 - k * g
    keep = base > 0
    k, base = k[keep], base[keep]
    logt = gammaln(m + 1.0) - gammaln(k + 1.0) - gammaln(m - k + 1.0) + (m - 1.0) * np.log(base)
    if logt[0] >= 0.0:
        return 1.0
    terms = np.exp(logt) * np.where(k % 2 == 1, 1.0, -1.0)
    return float(min(1.0, max(0.0, terms.sum())))


def _refine(X: np.ndarray, j: int, N: int) -> float:
    """Fractional frequency bin j + delta by Candan's (2011) three-bin estimator."""
    if j <= 0 or j + 1 >= X.shape[0]:
        return float(j)
    num = X[j - 1] - X[j + 1]
    den = 2.0 * X[j] - X[j - 1] - X[j + 1]
    if den == 0:
        return float(j)
    c = np.pi / N
    delta = float(np.real(num / den)) * (np.tan(c) / c)
    return j + float(np.clip(delta, -0.5, 0.5))


def _design(N: int, freqs) -> np.ndarray:
    t = np.arange(N, dtype=float)
    cols = []
    for f in freqs:
        w = 2.0 * np.pi * f * t
        cols.extend([np.cos(w), np.sin(w)])
    return np.column_stack(cols)


# ---------------------------------------------------------------- the detector
def detect_periods(x, alpha: float = FALSE_ALARM, max_periods: int = MAX_PERIODS) -> OrderReport:
    """Find the periods of ``x`` (values in list order) after removing a smooth trend.

    See the module notes for the method and its sources.  Returns an :class:`OrderReport`
    whose ``periods`` are sorted strongest first.
    """
    x = np.asarray(x, dtype=float)
    N = int(x.shape[0])
    r = detrend(x)
    ss = float(np.dot(r, r))
    acf = autocorrelation(r, min(ACF_LAGS, N // 4))
    lo, hi = MIN_CYCLES, (N - 1) // 2
    if hi - lo + 1 < 3 or ss <= 1e-12 * max(1.0, float(np.dot(x, x))):
        return OrderReport(N=N, alpha=alpha, tested=max(0, hi - lo + 1), g=float("nan"), p_value=1.0, acf=acf)
    live = np.ones(hi - lo + 1, dtype=bool)
    resid = r
    found: list[tuple[float, float]] = []  # (frequency in cycles per unit, p-value)
    g0 = p0 = None
    for _ in range(max_periods):
        X = np.fft.rfft(resid)
        ords = np.abs(X[lo:hi + 1]) ** 2 / N
        total = float(ords[live].sum())
        if total <= 0:
            break
        i = int(np.argmax(np.where(live, ords, -1.0)))
        g = float(ords[i]) / total
        p = fisher_g_pvalue(g, int(live.sum()))
        if g0 is None:
            g0, p0 = g, p
        if p > alpha:
            break
        j = lo + i
        found.append((_refine(X, j, N) / N, p))
        live[max(0, i - 1): i + 2] = False
        if live.sum() < 3:
            break
        D = _design(N, [f for f, _ in found])
        coef, *_ = np.linalg.lstsq(D, r, rcond=None)
        resid = r - D @ coef
    periods = []
    if found:
        D = _design(N, [f for f, _ in found])
        coef, *_ = np.linalg.lstsq(D, r, rcond=None)
        var = ss / N
        for s, (f, p) in enumerate(found):
            amp = float(np.hypot(coef[2 * s], coef[2 * s + 1]))
            P = 1.0 / f
            lag = int(round(P))
            rho = float(acf[lag - 1]) if 1 <= lag <= acf.shape[0] else float(autocorrelation(r, lag)[-1])
            periods.append(Period(period=P, strength=min(1.0, amp * amp / 2.0 / var), amplitude=amp,
                                  autocorrelation=rho, p_value=p))
        periods = _label_harmonics(periods, N)
        periods.sort(key=lambda q: -q.strength)
    return OrderReport(N=N, alpha=alpha, tested=hi - lo + 1, g=float(g0), p_value=float(p0),
                       periods=tuple(periods), acf=acf)


def _label_harmonics(periods: list[Period], N: int) -> list[Period]:
    """Mark a period as a harmonic of a longer, stronger detected one when its frequency is within
    one Fourier bin of a whole multiple (h >= 2) of the longer one's; the strongest such wins."""
    out = []
    for q in periods:
        best = None
        for p0 in periods:
            if p0.period <= q.period * 1.5 or p0.strength < q.strength:
                continue
            h = round(p0.period / q.period)
            if h >= 2 and abs(N / q.period - h * N / p0.period) <= 1.0:
                if best is None or p0.strength > best.strength:
                    best = p0
        out.append(q if best is None else Period(**{**asdict(q), "harmonic_of": best.period}))
    return out


# ---------------------------------------------------------------- unsafe intervals
def aliasing_factor(delta, n):
    """|sin(pi n delta) / (n sin(pi delta))|: how much of a cycle survives in the mean of n units
    whose phases step by ``delta`` cycles (the Dirichlet kernel; 1 when they all share a phase).
    Works elementwise on arrays."""
    d = np.abs(np.asarray(delta, dtype=float))
    n = np.asarray(n, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        D = np.abs(np.sin(np.pi * n * d) / (n * np.sin(np.pi * d)))
    D = np.where(d < 1e-12, 1.0, D)
    return float(D) if D.ndim == 0 else D


def _ratios(k: np.ndarray, N: int, p: Period):
    """For intervals ``k`` and one period: sample sizes, the in-phase multiple a and its variance
    ratio s n D^2 / (1 - f), and for b = 2..MAX_PHASES the "b phases" ratios (module notes)."""
    n = np.maximum(1.0, np.round(N / k))
    scale = p.strength * n / (1.0 - np.minimum(n / N, 0.999999))
    x = k / p.period
    a = np.round(x)
    inphase = np.where(a >= 1, scale * aliasing_factor(x - a, n) ** 2, 0.0)
    phases = {}
    if p.harmonic_of is None:
        for b in range(2, MAX_PHASES + 1):
            d = b * x - 1.0
            phases[b] = (np.where(np.abs(d) < 0.5, scale * aliasing_factor(d, n) ** 2, 0.0), d)
    return n, x, a, inphase, phases


def interval_risks(k: float, N: int, periods) -> list[dict]:
    """Why the interval ``k`` is unsafe for a list of N units with these periods ([] if it is not).

    Each entry: interval, period, kind ("in phase" or "b phases"), multiple a (k ~ a P) or
    phases b (P ~ b k), the phase drift n |delta| over the sample, and the variance ratio
    s n D^2 / (1 - f) of the rule in the module notes.
    """
    k = float(k)
    if k < 1.0:
        return []
    out = []
    for p in periods:
        n, x, a, inphase, phases = _ratios(np.array([k]), N, p)
        if inphase[0] >= MATERIAL:
            out.append({"interval": k, "period": p.period, "kind": "in phase", "multiple": int(a[0]), "phases": 1,
                        "drift": float(n[0] * abs(x[0] - a[0])), "variance_ratio": float(inphase[0])})
            continue
        for b, (ratio, d) in phases.items():
            if ratio[0] >= MATERIAL:
                out.append({"interval": k, "period": p.period, "kind": f"{b} phases", "multiple": None,
                            "phases": b, "drift": float(n[0] * abs(d[0])), "variance_ratio": float(ratio[0])})
                break
    return out


#: whole intervals checked by default: 2 .. min(N // 2, MAX_INTERVAL)
MAX_INTERVAL = 5000


def unsafe_intervals(periods, N: int, k_max: int | None = None) -> list[int]:
    """Whole intervals 2 .. k_max (default min(N // 2, MAX_INTERVAL)) that :func:`interval_risks` flags."""
    k_max = min(N // 2, MAX_INTERVAL) if k_max is None else int(k_max)
    k = np.arange(2, k_max + 1, dtype=float)
    bad = np.zeros(k.shape, dtype=bool)
    for p in periods:
        _, _, _, inphase, phases = _ratios(k, N, p)
        bad |= inphase >= MATERIAL
        for ratio, _ in phases.values():
            bad |= ratio >= MATERIAL
    return k[bad].astype(int).tolist()


# ---------------------------------------------------------------- frames
_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def frame_order_report(frame, variable: int = 0, sort_by: str | None = None,
                       alpha: float = FALSE_ALARM) -> OrderReport:
    """The detector's report on one target of a frame along its list order (or a sort key's
    order), computed once per frame and kept while the frame lives."""
    per = _CACHE.setdefault(frame, {})
    key = (variable, sort_by, alpha)
    if key not in per:
        order = frame.order if sort_by is None else frame.sort_orders[sort_by]
        per[key] = detect_periods(frame.y[order, variable], alpha=alpha)
    return per[key]

"""Cycles along a frame's list order, and the systematic intervals they make unsafe.

A systematic sample takes every k-th unit of the list.  When the target repeats with a
period P along the list and k is (close to) a multiple of P, every unit of a sample sits on
the same phase of the cycle: the estimate depends on the start far more than the SRS
variance formula admits, and the intervals it gives under-cover.  This module finds such
cycles in the frame itself (before any fieldwork) and lists the intervals to avoid.

Method (O(N log N) time, O(N) memory: no N x d matrix is ever built)
------
1. **Detrend.**  When the list is grouped (each stratum, or each cluster, one contiguous
   block along the list), the group means are removed: a list sorted stratum by stratum is
   a step function, not a cycle, and systematic sampling along it is implicit
   stratification.  Otherwise a smooth trend is removed: the least-squares polynomial of
   degree :data:`TREND_DEGREE` (3, a cubic) in the list position, projected out one discrete
   orthogonal polynomial at a time (the Stieltjes three-term recurrence on the positions; each
   polynomial is one length-N vector).  A trend is not a cycle, and a smooth trend helps a
   systematic sample rather than hurting it (Cochran 1977, sec. 8.7).
2. **Periodogram** by the FFT: I_j = |sum_t r_t exp(-2 pi i j t / N)|^2 / N at the Fourier
   frequencies j = :data:`MIN_CYCLES` .. floor((N - 1) / 2): periods from N / MIN_CYCLES (at
   least four whole cycles along the list) down to just above 2.
3. **Significance: Fisher's g test** (Fisher 1929, Proc. R. Soc. A 125:54-59).  Under
   Gaussian white noise the m ordinates are independent exponentials, and the share of the
   largest one, g = max I_j / sum I_j, has the exact tail
   ``P(g > x) = sum_{k=1}^{floor(1/x)} (-1)^(k-1) C(m, k) (1 - k x)^(m-1)``.
   A period is declared when this p-value is at most the false-alarm rate ``alpha``
   (:data:`FALSE_ALARM`, 1%): on a list with no cycle, a period is reported with probability
   alpha (exactly, for Gaussian noise and no trend; the tests show the trend or group-mean
   removal does not move the rate).
4. **More periods.**  The detected sinusoid is fitted by least squares at a refined
   frequency (Candan's three-bin estimator, IEEE Signal Processing Letters 18:351-354, 2011;
   from memory) -- a 2 x 2 system whose cross-products are closed-form sums -- and removed;
   its frequency bin and the two next to it leave the candidate set; the test is repeated
   on what is left, up to :data:`MAX_PERIODS` times (sequential prewhitening with Fisher's
   test, common practice).  One back-fitting pass then refits each sinusoid with the others
   removed.  The white-noise false-alarm rate is that of the first test.
5. **Strength** of a period: the share of the detrended variance its fitted sinusoid
   carries, A^2 / 2 over mean(r^2), between 0 and 1.  The autocorrelation of the detrended
   list at the lag nearest the period is reported beside it.
6. **Harmonics.**  A cycle that is not a pure sinusoid (a peak, a step, a ramp) also has
   power at the harmonics h / P, h = 2, 3, ...  For every fundamental period, each harmonic
   below the Nyquist frequency whose largest periodogram ordinate within one bin of h N / P
   is significant against the noise floor (median ordinate / ln 2; Bonferroni over the
   harmonics tested at level ``alpha``) is measured from the periodogram: its power is the
   sum of I_j - floor over that bin and its two neighbours, times 2 / N (1 / N at the
   Nyquist frequency); its frequency is refined at its own peak (Candan's estimator), since
   h / P inherits h times the error of the fundamental's.

Unsafe intervals (our rule)
---------------------------
For an interval k the sample has n = N / k units, f = n / N.  Each cycle component c (a
detected period or a measured harmonic) of frequency phi_c = h / P and share s_c of the
list's variance S^2 adds to the variance of the sample mean about

    s_c S^2 D_n(k phi_c)^2 (1 - D_k(phi_c)^2),   D_m(x) = |sin(pi m x) / (m sin(pi x))|,

(the Dirichlet kernel: D_n(k phi) = 1 when k phi is a whole number -- every unit of the
sample sits on the same phase of that component -- and about 0 once the phases sweep whole
cycles; 1 - D_k(phi)^2 is the spread of the phase over the k starts).  The rest of the
variance (noise, share s_0 after the trend, groups and cycles) behaves as under SRS; the
trend and the group means add nothing.  The predicted ratio of the true variance of the
systematic mean to what the SRS formula (1 - f) S^2 / n reports is therefore

    R(k) = s_0 + sum_c s_c n D_n(k phi_c)^2 (1 - D_k(phi_c)^2) / (1 - f),

and the interval is **unsafe** when R(k) >= 1 + :data:`MATERIAL` = 1.5 (nominal 95% intervals
then cover at most about 89%; our threshold, from the normal approximation, not a published
rule).  When k divides N, R(k) computed from the periodogram itself is exact: the variance
over the k starts is (1 / N) sum_{m=1}^{k-1} I_{m N / k} (Parseval).  So b points per cycle
(P ~ b k) alias only the b-th harmonic: a pure sinusoid cancels there, a peaked cycle does
not, each by its own measured strength.

Examples
--------
>>> import numpy as np
>>> rng = np.random.default_rng(4)
>>> t = np.arange(2400)
>>> y = 10 * np.sin(2 * np.pi * t / 24) + rng.normal(0, 5, t.size)
>>> rep = detect_periods(y)
>>> round(rep.periods[0].period, 2)
24.0
>>> bad = unsafe_intervals(rep)
>>> 24 in bad and 25 not in bad and 12 not in bad
True
"""

from __future__ import annotations

import weakref
from dataclasses import asdict, dataclass, field
from math import gcd

import numpy as np
from scipy.special import chdtri, gammaln

#: probability of reporting a period on a list with no cycle (Gaussian white noise)
FALSE_ALARM = 0.01
#: degree of the polynomial trend removed before the periodogram
TREND_DEGREE = 3
#: a period must repeat at least this many times along the list to be tested
MIN_CYCLES = 4
#: at most this many periods are reported
MAX_PERIODS = 8
#: an interval is unsafe when the predicted variance ratio is at least 1 + MATERIAL
MATERIAL = 0.5
#: the autocorrelation function is returned up to this lag (or N // 4)
ACF_LAGS = 200
#: half-width, in Fourier bins, of the window a harmonic's power is summed over
HARMONIC_BINS = 1

DETREND_TEXT = (f"group means removed when the list is grouped, else a least-squares polynomial of degree "
                f"{TREND_DEGREE} in the list position; FFT periodogram at the Fourier frequencies; "
                f"Fisher's g test (Fisher 1929)")


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
class Component:
    """A sinusoidal part of the list that the unsafe-interval rule weighs: a detected period or a
    measured harmonic h of a detected fundamental period."""

    period: float  # of this sinusoid, in list positions
    share: float  # of the list's variance (about its mean, divisor N)
    fundamental: float  # the fundamental period it belongs to (itself when harmonic == 1)
    harmonic: int = 1

    def as_dict(self) -> dict:
        return {k: (float(v) if isinstance(v, float) else int(v)) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class OrderReport:
    """What the detector found on one list: the periods (strongest first), the components the
    unsafe-interval rule weighs, and the test details."""

    N: int
    alpha: float
    tested: int  # number of periodogram ordinates in the first test
    g: float  # Fisher's g of the first test (nan when nothing could be tested)
    p_value: float  # its p-value
    periods: tuple[Period, ...] = ()
    # lags 1..L; None when not asked for (a run's check needs it only for the periods found)
    acf: np.ndarray | None = field(default_factory=lambda: np.zeros(0), repr=False)
    method: str = DETREND_TEXT
    components: tuple[Component, ...] = ()
    noise_share: float = 1.0  # share of the variance left after groups or trend, and the components
    grouped: bool = False  # True when group means were removed instead of a trend

    @property
    def significant(self) -> bool:
        return len(self.periods) > 0


# ---------------------------------------------------------------- building blocks
def _inner(a, b):
    """sum_t a_t b_t (einsum: a threaded BLAS dot is slow on a busy machine for one vector pair)."""
    return np.einsum("i,i->", a, b)


def detrend(x, degree: int = TREND_DEGREE, groups=None) -> np.ndarray:
    """Residuals of ``x`` after removing the means of ``groups`` (codes 0..G-1), or, without
    groups, a least-squares polynomial of ``degree`` in the position.

    The polynomial is projected out one discrete orthogonal polynomial at a time: positions
    scaled to [-1, 1], p_0 = 1, p_{j+1} = (t - a_j) p_j - b_j p_{j-1} with a_j = <t p_j, p_j> /
    <p_j, p_j> and b_j = <p_j, p_j> / <p_{j-1}, p_{j-1}> (Stieltjes), so at most three length-N
    vectors are held; projecting on orthogonal vectors one by one gives the least-squares fit.
    """
    x = np.asarray(x, dtype=float)
    N = x.shape[0]
    if groups is not None:
        codes = np.asarray(groups)
        sizes = np.bincount(codes)
        means = np.bincount(codes, weights=x) / np.maximum(sizes, 1)
        r = means[codes]
        return np.subtract(x, r, out=r)  # x - means[codes], without a second length-N array
    r = x - x.mean()
    if N <= degree + 1:
        return r
    t = np.linspace(-1.0, 1.0, N)
    prev, p, work = np.zeros(N), np.ones(N), np.empty(N)  # three buffers reused: no array made per step
    norm_prev, norm = 1.0, float(N)
    for _ in range(degree):
        a = float(_inner(np.multiply(t, p, out=work), p)) / norm
        np.subtract(t, a, out=work)
        work *= p
        prev *= norm / norm_prev
        work -= prev  # (t - a) p - (norm / norm_prev) prev, operation by operation as written out
        prev, p, work = p, work, prev
        norm_prev, norm = norm, float(_inner(p, p))
        r -= np.multiply(p, float(_inner(r, p)) / norm, out=work)
    return r


def periodogram(r) -> np.ndarray:
    """I_j = |DFT_j(r)|^2 / N for j = 0 .. N // 2."""
    r = np.asarray(r, dtype=float)
    return np.abs(np.fft.rfft(r)) ** 2 / r.shape[0]


def _fast_length(m: int) -> int:
    """The smallest 2^a 3^b 5^c >= m: an FFT length numpy transforms quickly (scipy.fft is not
    imported for this: it costs most of a second at start-up)."""
    best, p5 = 1 << max(0, (m - 1).bit_length()), 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            best = min(best, p35 << max(0, (-(-m // p35) - 1).bit_length()))
            p35 *= 3
        p5 *= 5
    return best


def autocorrelation(r, max_lag: int) -> np.ndarray:
    """Sample autocorrelation sum_t r_t r_{t+l} / sum_t r_t^2 of a mean-zero list, lags 1..max_lag."""
    r = np.asarray(r, dtype=float)
    N = r.shape[0]
    max_lag = int(min(max_lag, N - 1))
    if max_lag < 1:
        return np.zeros(0)
    size = _fast_length(N + max_lag)  # zero padding beyond the largest lag: no wrap-around
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


def _exp_sum(theta: float, N: int) -> complex:
    """sum_{t=0}^{N-1} exp(i theta t) in closed form (a geometric sum)."""
    half = np.sin(theta / 2.0)
    if abs(half) < 1e-12:
        return complex(N)
    return complex(np.exp(0.5j * theta * (N - 1)) * np.sin(N * theta / 2.0) / half)


def _fit_sinusoid(r: np.ndarray, freq: float) -> tuple[float, float, np.ndarray]:
    """Least-squares a cos(w t) + b sin(w t), w = 2 pi freq, fitted to r: (a, b, fitted values).

    The 2 x 2 cross-product matrix is in closed form (sums of cos 2wt and sin 2wt); the right-hand
    side is the DFT of r at freq.  One length-N complex vector is built, no design matrix.
    """
    N = r.shape[0]
    w = 2.0 * np.pi * freq
    e = np.exp(1j * w * np.arange(N, dtype=float))
    z = complex(_inner(r, e))  # sum r cos + i sum r sin
    s2 = _exp_sum(2.0 * w, N)
    cc, ss, cs = (N + s2.real) / 2.0, (N - s2.real) / 2.0, s2.imag / 2.0
    det = cc * ss - cs * cs
    if det <= 1e-9 * N * N:
        return 0.0, 0.0, np.zeros(N)
    a = (ss * z.real - cs * z.imag) / det
    b = (cc * z.imag - cs * z.real) / det
    return a, b, a * e.real + b * e.imag


# ---------------------------------------------------------------- the detector
def detect_periods(x, alpha: float = FALSE_ALARM, max_periods: int = MAX_PERIODS, groups=None,
                   acf: bool = True) -> OrderReport:
    """Find the periods of ``x`` (values in list order) after removing a smooth trend, or the
    means of ``groups`` (codes along the list, each group one contiguous block).

    See the module notes for the method and its sources.  Returns an :class:`OrderReport`
    whose ``periods`` are sorted strongest first.  With ``acf=False`` the autocorrelations
    (``OrderReport.acf``) are left out (None) unless a period is found, whose autocorrelation
    is read from them; the periods are the same either way.
    """
    x = np.asarray(x, dtype=float)
    N = int(x.shape[0])
    r = detrend(x, groups=groups)
    ss = float(_inner(r, r))
    if N:
        dev = x - x.mean()
        ss_total = float(np.sum(np.multiply(dev, dev, out=dev)))  # sum (x - mean)^2
        del dev
    else:
        ss_total = 0.0
    lags = min(ACF_LAGS, N // 4)
    acf = autocorrelation(r, lags) if acf else None
    lo, hi = MIN_CYCLES, (N - 1) // 2
    base = {"N": N, "alpha": alpha, "acf": acf, "grouped": groups is not None,
            "noise_share": ss / ss_total if ss_total > 0 else 1.0}
    if hi - lo + 1 < 3 or ss <= 1e-12 * max(1.0, float(_inner(x, x))):
        return OrderReport(tested=max(0, hi - lo + 1), g=float("nan"), p_value=1.0, **base)
    live = np.ones(hi - lo + 1, dtype=bool)
    resid = r.copy()
    found: list[list] = []  # [frequency in cycles per unit, p-value, a, b]
    g0 = p0 = None
    X0 = None
    first = 0.0
    for _ in range(max_periods):
        X = np.fft.rfft(resid)
        if X0 is None:
            X0 = X  # the DFT of the detrended list, kept for the harmonics
        ords = np.abs(X[lo:hi + 1]) ** 2 / N
        total = float(ords[live].sum())
        if total <= 1e-10 * (first or total) or total <= 0:
            break  # nothing left but rounding: a noiseless list has no more periods to find
        first = first or total
        i = int(np.argmax(np.where(live, ords, -1.0)))
        g = float(ords[i]) / total
        p = fisher_g_pvalue(g, int(live.sum()))
        if g0 is None:
            g0, p0 = g, p
        if p > alpha:
            break
        f = _refine(X, lo + i, N) / N
        a, b, fit = _fit_sinusoid(resid, f)
        resid -= fit
        found.append([f, p, a, b])
        live[max(0, i - 1): i + 2] = False
        if live.sum() < 3:
            break
    periods = []
    if found:
        for item in found if len(found) > 1 else ():  # one back-fitting pass: each refitted, the others removed
            w = 2.0 * np.pi * item[0] * np.arange(N, dtype=float)
            resid += item[2] * np.cos(w) + item[3] * np.sin(w)
            item[2], item[3], fit = _fit_sinusoid(resid, item[0])
            resid -= fit
        var = ss / N
        if acf is None:
            acf = base["acf"] = autocorrelation(r, lags)
        for f, p, a, b in found:
            amp = float(np.hypot(a, b))
            P = 1.0 / f
            lag = round(P)
            rho = float(acf[lag - 1]) if 1 <= lag <= acf.shape[0] else float(autocorrelation(r, lag)[-1])
            periods.append(Period(period=P, strength=min(1.0, amp * amp / 2.0 / var), amplitude=amp,
                                  autocorrelation=rho, p_value=p))
        periods = _label_harmonics(periods, N)
        periods.sort(key=lambda q: -q.strength)
    components = _components(periods, X0, N, ss, ss_total, alpha) if periods else ()
    noise = max(0.0, ss / ss_total - sum(c.share for c in components))
    return OrderReport(tested=hi - lo + 1, g=float(g0), p_value=float(p0), periods=tuple(periods),
                       components=components, **{**base, "noise_share": noise})


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
            near = h >= 2 and abs(N / q.period - h * N / p0.period) <= 1.0
            if near and (best is None or p0.strength > best.strength):
                best = p0
        out.append(q if best is None else Period(**{**asdict(q), "harmonic_of": best.period}))
    return out


def _components(periods, X: np.ndarray, N: int, ss: float, ss_total: float, alpha: float) -> tuple:
    """The detected periods with their shares of the variance, and the significant harmonics of
    each fundamental measured from the DFT ``X`` of the detrended list (module notes, 6)."""
    var_total = ss_total / N
    ordinate = np.abs(X) ** 2 / N  # the periodogram I_j at each frequency j / N
    out = []
    for p in periods:
        h = 1 if p.harmonic_of is None else round(p.harmonic_of / p.period)
        out.append(Component(period=p.period, share=p.strength * (ss / N) / var_total,
                             fundamental=p.period if h == 1 else p.harmonic_of, harmonic=h))
    nyq = ordinate.shape[0] - 1  # the last bin: the Nyquist frequency 1/2 itself when N is even
    floor = float(np.median(ordinate[1:nyq])) / np.log(2.0) if nyq > 2 else 0.0
    weight = np.full(ordinate.shape[0], 2.0 / N)  # power of a sinusoid from its ordinates: 2 I / N,
    if N % 2 == 0:
        weight[nyq] = 1.0 / N  # but I / N at the Nyquist frequency, where it is cos(pi t) alone
    taken = [N / p.period for p in periods]  # bins already weighed: a window never counts twice
    fundamentals = [p.period for p in periods if p.harmonic_of is None]
    wanted = [(P, h) for P in fundamentals for h in range(2, int(P) + 1) if h * N / P <= nyq + 0.5]
    if not wanted or floor <= 0:
        return tuple(out)
    q = alpha / (3.0 * len(wanted))  # per ordinate: P(any of the 3 near a harmonic passes) <= alpha / tests
    cut = np.full(ordinate.shape[0], floor * np.log(1.0 / q))  # noise ordinates are exponential with mean floor,
    if N % 2 == 0:
        cut[nyq] = floor * chdtri(1, q)  # but chi-square with 1 degree of freedom at the Nyquist frequency
    for P, h in wanted:
        c = h * N / P
        if min(abs(b - c) for b in taken) < 2 * HARMONIC_BINS + 1:
            continue  # detected as a period of its own, or measured as another fundamental's harmonic
        j = min(round(c), nyq)
        if not np.any(ordinate[j - 1: j + 2] >= cut[j - 1: j + 2]):
            continue
        lo, hi = max(1, j - HARMONIC_BINS), min(nyq, j + HARMONIC_BINS) + 1
        power = max(0.0, float(np.sum(weight[lo:hi] * (ordinate[lo:hi] - floor))))
        taken.append(c)
        # the harmonic's own frequency, refined at its peak: h / P drifts by h times the error in 1 / P
        peak = j - 1 + int(np.argmax(ordinate[j - 1: j + 2])) if j + 1 <= nyq else j
        own = _refine(X, peak, N) if abs(_refine(X, peak, N) - c) <= 1.0 else c
        out.append(Component(period=N / own, share=power / var_total, fundamental=P, harmonic=h))
    return tuple(out)


# ---------------------------------------------------------------- unsafe intervals
def aliasing_factor(delta, n):
    """|sin(pi n delta) / (n sin(pi delta))|: how much of a cycle survives in the mean of n units
    whose phases step by ``delta`` cycles (the Dirichlet kernel; 1 when they all share a phase).
    Works elementwise on arrays."""
    d = np.abs(np.asarray(delta, dtype=float))
    d = np.abs(d - np.round(d))
    n = np.asarray(n, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        D = np.abs(np.sin(np.pi * n * d) / (n * np.sin(np.pi * d)))
    D = np.where(d < 1e-12, 1.0, D)
    return float(D) if D.ndim == 0 else D


def _contributions(k: np.ndarray, N: int, components) -> tuple[np.ndarray, np.ndarray]:
    """Sample sizes n = round(N / k) and, per component (rows), its term of R(k) (module notes)."""
    n = np.maximum(1.0, np.round(N / k))
    f = np.minimum(n / N, 0.999999)
    terms = np.zeros((len(components), k.shape[0]))
    for i, c in enumerate(components):
        phi = 1.0 / c.period
        spread = 1.0 - aliasing_factor(phi, k) ** 2
        terms[i] = c.share * n * aliasing_factor(k * phi, n) ** 2 * spread / (1.0 - f)
    return n, terms


def variance_ratio(k, rep: OrderReport):
    """Predicted ratio R(k) of the true variance of the systematic mean to the SRS formula's
    (module notes), for one interval or an array of them."""
    kk = np.atleast_1d(np.asarray(k, dtype=float))
    _, terms = _contributions(kk, rep.N, rep.components)
    R = rep.noise_share + terms.sum(axis=0)
    return float(R[0]) if np.ndim(k) == 0 else R


def interval_risks(k: float, rep: OrderReport) -> list[dict]:
    """Why the interval ``k`` is unsafe for the list behind ``rep`` ([] if it is not).

    One entry per component that adds at least a tenth of the SRS variance, largest first:
    interval, period (the fundamental), harmonic h, the multiple a (k ~ a P / h), the number of
    points of each cycle a sample sees (h / gcd(a, h), 1 when k is a multiple of P), the
    component's share and term, and the predicted variance ratio R(k) of the rule.
    """
    k = float(k)
    if k < 1.0 or not rep.components:
        return []
    R = variance_ratio(k, rep)
    if R < 1.0 + MATERIAL:
        return []
    _, terms = _contributions(np.array([k]), rep.N, rep.components)
    out = []
    for c, term in sorted(zip(rep.components, terms[:, 0]), key=lambda z: -z[1]):
        if term < 0.1:
            continue
        a = round(k / c.period)
        seen = c.harmonic // gcd(a, c.harmonic) if a >= 1 else c.harmonic
        out.append({"interval": k, "period": c.fundamental, "harmonic": c.harmonic, "multiple": a,
                    "phases": seen, "share": c.share, "term": float(term), "variance_ratio": R})
    return out


#: whole intervals checked by default: 2 .. min(N // 2, MAX_INTERVAL)
MAX_INTERVAL = 5000


def unsafe_intervals(rep: OrderReport, k_max: int | None = None) -> list[int]:
    """Whole intervals 2 .. k_max (default min(N // 2, MAX_INTERVAL)) where R(k) >= 1 + MATERIAL."""
    k_max = min(rep.N // 2, MAX_INTERVAL) if k_max is None else int(k_max)
    k = np.arange(2, k_max + 1, dtype=float)
    if not rep.components or k.size == 0:
        return []
    return k[variance_ratio(k, rep) >= 1.0 + MATERIAL].astype(int).tolist()


# ---------------------------------------------------------------- frames
_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _changes(c: np.ndarray) -> np.ndarray:
    """Where the list moves to another group: ``c[1:] != c[:-1]``."""
    return c[1:] != c[:-1]


def contiguous_groups(codes_along) -> bool:
    """True when every group occupies one contiguous block of the list (a grouped list).

    Codes 0..G-1 (a frame's) are counted, not sorted: the list is grouped when it has as many
    runs as distinct codes, and more than one."""
    c = np.asarray(codes_along)
    if c.size == 0:
        return False
    runs = 1 + int(np.count_nonzero(_changes(c)))
    if runs == 1:
        return False
    counted = c.dtype.kind in "iu" and int(c.min()) >= 0
    return runs == (np.count_nonzero(np.bincount(c)) if counted else np.unique(c).size)


def list_groups(frame, order) -> np.ndarray | None:
    """Group codes along ``order`` when the list is grouped by stratum and/or cluster (each a
    contiguous block; the finest such grouping), else None.

    Only the blocks matter (the detrending removes each block's mean): with both groupings
    contiguous, each pair of codes is one block too, numbered here by its place along the list."""
    along = (g[order] for g in (frame.stratum, frame.cluster) if g is not None)
    parts = [c for c in along if contiguous_groups(c)]
    if not parts:
        return None
    if len(parts) == 1:
        return parts[0]
    codes = np.zeros(parts[0].size, dtype=np.int64)
    np.cumsum(_changes(parts[0]) | _changes(parts[1]), out=codes[1:])
    return codes


def frame_order_report(frame, variable: int = 0, sort_by: str | None = None,
                       alpha: float = FALSE_ALARM, acf: bool = False) -> OrderReport:
    """The detector's report on one target of a frame along its list order (or a sort key's
    order), computed once per frame and kept while the frame lives.  A list grouped by stratum
    or cluster has its group means removed instead of a trend (module notes, 1).

    ``acf=True`` asks for the autocorrelations (``OrderReport.acf``) as well, which a run's
    checks do not need (see :func:`detect_periods`)."""
    per = _CACHE.setdefault(frame, {})
    key = (variable, sort_by, alpha)
    if key not in per or (acf and per[key].acf is None):
        order = np.asarray(frame.order if sort_by is None else frame.sort_orders[sort_by])
        per[key] = detect_periods(frame.y[order, variable], alpha=alpha, groups=list_groups(frame, order),
                                  acf=acf)
    return per[key]

"""Size-proportional and random-size designs against hand examples and published results.

Sources beside each check: Sampford (1967), Biometrika 54:499-513 (p(s) and pi_i = n p_i);
Sarndal, Swensson & Wretman (1992), Model Assisted Survey Sampling (SSW) for Poisson and
Bernoulli sampling and the certainty-unit rule; Cochran (1977), Sampling Techniques, for
Hansen-Hurwitz and the SRS variance; Rosen (1997) for Pareto order sampling; scipy.stats
as the reference for binomial distributions.  Frames are invented, for exercising code.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy import integrate, stats

from samplewright import Frame, InputError
from samplewright.designs import (
    DESIGN_CLASSES,
    Bernoulli,
    Pareto,
    Poisson,
    PPSSystematic,
    PPSWithReplacement,
    Sampford,
)
from samplewright.designs.pips import SampfordSampler, pips
from samplewright.estimation.registry import ESTIMATORS

SIZES = [2.0, 3.0, 1.0, 7.0, 4.0, 5.0, 2.5, 6.0]  # invented size measure


def size_frame(sizes=SIZES, seed=0):
    rng = np.random.default_rng(seed)
    x = np.asarray(sizes, dtype=float)
    y = 3.0 * x + rng.normal(0, 1.0, x.size)
    return Frame.from_dataframe(pd.DataFrame({"y": y, "invoice": x}), target="y", size="invoice")


# ------------------------------------------------------------------ pi_i and certainty units
def test_pips_hand_example_one_round():
    # by hand: X = 20, n = 2 gives 2 * 16 / 20 = 1.6 >= 1 for the large unit: it is taken with
    # certainty and the other draw is spread over the four small units, 1 * 1 / 4 each
    # (the iterative rule of SSW 1992, sec. 3.6 / Cochran 1977, sec. 9A.2)
    pi, certain, rounds = pips([1, 1, 1, 1, 16], 2)
    assert pi.tolist() == [0.25, 0.25, 0.25, 0.25, 1.0]
    assert certain.tolist() == [False, False, False, False, True]
    assert rounds == 1
    assert pi.sum() == pytest.approx(2.0)


def test_pips_hand_example_two_rounds():
    # by hand: x = (10, 5, 1, 1, 1, 1, 1), n = 3.  Round 1: 3 * 10 / 20 = 1.5 -> certain.
    # Round 2: n = 2 over X = 10: unit 2 gets 2 * 5 / 10 = 1.0 -> certain.  Round 3: n = 1
    # over five units of size 1: 0.2 each.  Sum = 3.
    pi, certain, rounds = pips([10, 5, 1, 1, 1, 1, 1], 3)
    assert pi.tolist() == pytest.approx([1.0, 1.0, 0.2, 0.2, 0.2, 0.2, 0.2])
    assert certain.sum() == 2 and rounds == 2
    assert pi.sum() == pytest.approx(3.0)


def test_pips_sum_to_n_and_proportional():
    # pi_i = n x_i / X when no unit reaches 1 (definition), and always sum to n
    x = np.array(SIZES)
    pi, certain, _ = pips(x, 3)
    assert not certain.any()
    np.testing.assert_allclose(pi, 3 * x / x.sum())
    rng = np.random.default_rng(4)
    for _ in range(20):
        x = rng.lognormal(0, 2, 30)
        n = int(rng.integers(1, 29))
        pi, certain, _ = pips(x, n)
        assert pi.sum() == pytest.approx(n)
        assert (pi <= 1).all() and (pi[certain] == 1).all()
        free = ~certain
        if free.any():  # the free units stay proportional to size
            np.testing.assert_allclose(pi[free] / x[free], (pi[free] / x[free])[0])


def test_size_measure_refused_when_not_positive():
    df = pd.DataFrame({"y": [1.0, 2, 3, 4], "invoice": [3.0, 0.0, 2.0, -1.0]})
    f = Frame.from_dataframe(df, target="y", size="invoice")
    for d in (Sampford("by size", n=2), PPSSystematic("by size", n=2), Pareto("by size", n=2),
              PPSWithReplacement("by size", n=2, replace=True), Poisson("by size", n=2)):
        with pytest.raises(InputError, match=r"size column 'invoice' must be above 0.*row\(s\) 3, 5"):
            d.check(f)


def test_unknown_variance_refused():
    with pytest.raises(InputError, match="variance = 'hartley' is not available.*hartley_rao"):
        Sampford("s", n=2, variance="hartley").check(size_frame())


# ------------------------------------------------------------------ Sampford's design
def sampford_p(pi, n):
    """Sampford (1967), eq. for p(s): proportional to (n - sum_s pi) prod_s pi / (1 - pi); all n-subsets."""
    subsets = list(itertools.combinations(range(len(pi)), n))
    w = np.array([(n - sum(pi[i] for i in s)) * np.prod([pi[i] / (1 - pi[i]) for i in s]) for s in subsets])
    return subsets, w / w.sum()


def test_sampford_pi_equals_n_x_over_X_and_joint_probabilities():
    f = size_frame()
    d = Sampford("s", n=3)
    d.check(f)
    x = np.array(SIZES)
    target = 3 * x / x.sum()
    subsets, p = sampford_p(target, 3)
    N = len(x)
    pi = np.zeros(N)
    pij = np.zeros((N, N))
    for s, ps in zip(subsets, p):
        for i in s:
            pi[i] += ps
            for j in s:
                pij[i, j] += ps
    # Sampford (1967): the design's inclusion probabilities are exactly n p_i = n x_i / X
    np.testing.assert_allclose(pi, target, atol=1e-12)
    # the package's pi_ij (its own enumeration) against this independent one
    np.testing.assert_allclose(d.joint_probabilities(f), pij, atol=1e-12)
    # fixed-size identity sum_{j != i} pi_ij = (n - 1) pi_i (SSW 1992, result 2.6.x; from memory)
    off = pij - np.diag(np.diag(pij))
    np.testing.assert_allclose(off.sum(axis=1), 2 * target, atol=1e-12)
    # Sampford (1967) shows pi_ij > 0 for every pair and pi_i pi_j - pi_ij > 0 (SYG weights)
    iu = np.triu_indices(N, 1)
    assert (pij[iu] > 0).all()
    assert ((np.outer(target, target) - pij)[iu] > 0).all()


def unequal_pi(N, n, top=None):
    """Invented pi proportional to k^1.5 (sum n); with ``top``, the largest set to ``top``."""
    x = np.arange(1, N + 1) ** 1.5
    pi = n * x / x.sum()
    if top is not None:
        rest = n - top
        pi = np.append(rest * pi[:-1] / pi[:-1].sum(), top)
    assert 0 < pi.min() and pi.max() < 1
    return pi


@pytest.mark.parametrize("N, n, top, L", [(6, 2, None, 64), (7, 3, 0.97, 2), (8, 4, 0.99, 3),
                                          (8, 2, 0.95, 1)])
def test_sampford_draw_reproduces_the_design(N, n, top, L):
    # every sample's frequency against Sampford's p(s) by enumeration (chi-square goodness of
    # fit, scipy.stats.chisquare), and each unit's inclusion frequency against pi_i with a
    # binomial z-bound (Sampford 1967: pi_i is exactly the target); segments of L units and
    # the block's band of r are exercised by the small L
    pi = unequal_pi(N, n, top)
    subsets, p = sampford_p(pi, n)
    sampler = SampfordSampler(pi)
    sampler.L = L
    R = 100_000
    s = sampler.draw(np.random.default_rng(11), R)
    assert s.shape == (R, n) and (np.diff(s, axis=1) > 0).all()  # n distinct units, sorted
    index = {t: k for k, t in enumerate(subsets)}
    counts = np.bincount([index[tuple(r)] for r in s.tolist()], minlength=len(subsets))
    res = stats.chisquare(counts, R * p)
    assert res.pvalue > 1e-4  # a z = 4 equivalent two-sided bound (normal tail 6e-5)
    freq = np.bincount(s.ravel(), minlength=N) / R
    assert (np.abs(freq - pi) <= Z * np.sqrt(pi * (1 - pi) / R)).all(), (freq, pi)


def test_sampford_draw_on_a_large_frame_keeps_pi():
    # N = 3,000, n = 300 (several segments, a band narrower than n): inclusion frequencies of
    # the 300 largest units against pi_i, binomial z-bounds (Sampford 1967: pi_i exact)
    x = np.random.default_rng(2).lognormal(0, 1, 3000)
    pi, certain, _ = pips(x, 300)
    pi = pi[~certain]
    R = 4_000
    s = SampfordSampler(pi).draw(np.random.default_rng(3), R)
    assert (np.diff(s, axis=1) > 0).all() and s.shape[1] == round(pi.sum())
    top = np.argsort(pi)[-300:]
    freq = np.bincount(s.ravel(), minlength=pi.size)[top] / R
    assert (np.abs(freq - pi[top]) <= Z * np.sqrt(pi[top] * (1 - pi[top]) / R)).all()


# ------------------------------------------------------------------ inclusion frequencies
def pareto_pi(lam, n):
    """Exact pi_i of Pareto order sampling by numerical integration (Rosen 1997's key distribution).

    Q_j = [U/(1-U)] / theta_j has P(Q_j <= t) = t theta_j / (1 + t theta_j); unit i is in the
    sample when fewer than n of the others have a smaller key.
    """
    lam = np.asarray(lam, dtype=float)
    theta = lam / (1 - lam)
    N = lam.size
    out = np.zeros(N)
    for i in range(N):
        others = np.delete(theta, i)

        def integrand(t, i=i, others=others):
            F = t * others / (1 + t * others)
            pmf = np.zeros(N)
            pmf[0] = 1.0
            for q in F:  # Poisson-binomial count of the others below t
                pmf[1:] = pmf[1:] * (1 - q) + pmf[:-1] * q
                pmf[0] *= 1 - q
            return theta[i] / (1 + t * theta[i]) ** 2 * pmf[:n].sum()

        out[i] = integrate.quad(integrand, 0, np.inf, limit=200)[0]
    return out


def inclusion_counts(design, frame, R, seed):
    blk = design.draw(frame, np.random.default_rng(seed), R, keep_units=True)
    units = blk.units
    real = np.ones(units.shape, dtype=bool) if blk.mask is None else blk.mask
    return np.bincount(units[real], minlength=frame.N), blk


@pytest.mark.parametrize("cls", [PPSSystematic, Sampford, Pareto, Poisson])
def test_inclusion_frequencies_match_pi(cls):
    f = size_frame()
    d = cls("by size", n=3)
    d.check(f)
    R = 30_000
    counts, _ = inclusion_counts(d, f, R, seed=5)
    pi = d.inclusion_probabilities(f)
    if cls is Pareto:  # Rosen (1997): Pareto's actual pi_i only approximate lambda_i; use the exact ones
        lam = pi
        pi = pareto_pi(lam, 3)
        # exact checks on the integrated pi: a fixed-size design's pi sum to n (Sarndal, Swensson &
        # Wretman 1992, result 2.6.2; to the quadrature's accuracy, 1e-15 here), and a larger lambda gives a
        # larger pi (Rosen 1997)
        assert pi.sum() == pytest.approx(3, abs=1e-9)
        assert (np.argsort(pi, kind="stable") == np.argsort(lam, kind="stable")).all()
    freq = counts / R
    bound = Z * np.sqrt(pi * (1 - pi) / R)  # binomial z-bound per unit
    assert (np.abs(freq - pi) <= bound).all(), (freq, pi)


def test_inclusion_frequencies_with_certainty_units():
    f = size_frame(SIZES[:-1] + [40.0])
    d = Sampford("s", n=3)
    d.check(f)
    pi = d.inclusion_probabilities(f)
    assert pi[-1] == 1.0 and pi.sum() == pytest.approx(3)
    assert "1 unit(s) with n x_i / X >= 1" in d.notes(f)[0]
    R = 20_000
    counts, _blk = inclusion_counts(d, f, R, seed=6)
    assert counts[-1] == R
    freq = counts / R
    free = pi < 1
    assert (np.abs(freq - pi)[free] <= Z * np.sqrt(pi * (1 - pi) / R)[free]).all()


def test_pps_with_replacement_expected_hits_and_bernoulli_frequencies():
    f = size_frame()
    R = 30_000
    d = PPSWithReplacement("wr", n=3, replace=True)
    d.check(f)
    counts, _ = inclusion_counts(d, f, R, seed=7)
    p = np.array(SIZES) / sum(SIZES)
    # hits of unit i over R samples of n independent draws: Binomial(R n, p_i)
    assert (np.abs(counts - R * 3 * p) <= Z * np.sqrt(R * 3 * p * (1 - p))).all()
    b = Bernoulli("b", n=3)
    b.check(f)
    counts, _ = inclusion_counts(b, f, R, seed=8)
    pi = 3 / f.N
    assert (np.abs(counts / R - pi) <= Z * np.sqrt(pi * (1 - pi) / R)).all()


# ------------------------------------------------------------------ random sample sizes
def poisson_binomial_pmf(pi):
    pmf = np.zeros(len(pi) + 1)
    pmf[0] = 1.0
    for q in pi:
        pmf[1:] = pmf[1:] * (1 - q) + pmf[:-1] * q
        pmf[0] *= 1 - q
    return pmf


def check_size_distribution(sizes, pmf, R):
    k = np.arange(pmf.size)
    mean = float(k @ pmf)
    var = float(((k - mean) ** 2) @ pmf)
    mu4 = float(((k - mean) ** 4) @ pmf)
    # mean within z * sd / sqrt(R); sample variance within z * sqrt((mu4 - var^2) / R)
    # (large-sample SE of a sample variance, e.g. Cochran 1977, sec. 2.x; from memory)
    assert abs(sizes.mean() - mean) <= Z * np.sqrt(var / R)
    assert abs(sizes.var(ddof=1) - var) <= Z * np.sqrt((mu4 - var**2) / R)
    return mean, var


def test_poisson_sample_size_mean_and_variance():
    f = size_frame()
    d = Poisson("p", n=3)
    d.check(f)
    R = 40_000
    blk = d.draw(f, np.random.default_rng(9), R)
    sizes = blk.mask.sum(axis=1)
    pi = d.inclusion_probabilities(f)
    mean, var = check_size_distribution(sizes, poisson_binomial_pmf(pi), R)
    # SSW 1992, sec. 3.5: E n_s = sum pi_i, V n_s = sum pi_i (1 - pi_i)
    assert mean == pytest.approx(pi.sum()) and var == pytest.approx((pi * (1 - pi)).sum())


def test_bernoulli_sample_size_is_binomial():
    f = size_frame()
    R = 40_000
    blk = Bernoulli("b", n=3).draw(f, np.random.default_rng(10), R)
    sizes = blk.mask.sum(axis=1)
    pmf = stats.binom.pmf(np.arange(f.N + 1), f.N, 3 / f.N)  # reference: scipy.stats.binom
    check_size_distribution(sizes, pmf, R)
    counts = np.bincount(sizes, minlength=f.N + 1)
    keep = R * pmf >= 5  # pool the sparse tail (common practice for chi-square cells)
    obs = np.append(counts[keep], counts[~keep].sum())
    exp = np.append(R * pmf[keep], R * pmf[~keep].sum())
    if exp[-1] < 5:  # the pooled tail is still sparse: fold it into the last kept cell
        obs, exp = np.append(obs[:-2], obs[-2:].sum()), np.append(exp[:-2], exp[-2:].sum())
    assert stats.chisquare(obs, exp).pvalue > 1e-4


# ------------------------------------------------------------------ variance estimators
def test_hartley_rao_and_brewer_reduce_to_srs_under_equal_sizes():
    # with pi_i = n / N both approximations equal the unbiased SRS estimator
    # N^2 (1 - f) s^2 / n (Cochran 1977, eq. 2.10), replicate by replicate
    rng = np.random.default_rng(12)
    y = rng.gamma(2.0, 3.0, 30)
    f = Frame.from_dataframe(pd.DataFrame({"y": y, "x": np.ones(30)}), target="y", size="x")
    n = 6
    for v in ("hartley_rao", "brewer"):
        d = Sampford("eq", n=n, variance=v)
        d.check(f)
        blk = d.draw(f, np.random.default_rng(13), 200, keep_units=True)
        est = ESTIMATORS["ht"](blk, f.N, f.V, 0.95, f.layout)
        s2 = y[blk.units].var(axis=1, ddof=1)
        se_srs = np.sqrt((1 - n / 30) * s2 / n)
        np.testing.assert_allclose(est.se[:, 0], se_srs, rtol=1e-10)


def test_hansen_hurwitz_variance_formula():
    # Cochran 1977, eq. 9A.8: v(t) = sum (y_i / p_i - t)^2 / (n (n - 1)), t = mean of y_i / p_i
    f = size_frame()
    d = PPSWithReplacement("wr", n=4, replace=True)
    d.check(f)
    blk = d.draw(f, np.random.default_rng(14), 50, keep_units=True)
    est = ESTIMATORS["ht"](blk, f.N, f.V, 0.95, f.layout)
    p = np.array(SIZES) / sum(SIZES)
    r = f.y[blk.units, 0] / p[blk.units]
    t = r.mean(axis=1)
    v = ((r - t[:, None]) ** 2).sum(axis=1) / (4 * 3)
    np.testing.assert_allclose(est.estimate[:, 0], t / f.N)
    np.testing.assert_allclose(est.se[:, 0], np.sqrt(v) / f.N)


def test_poisson_variance_formula():
    # SSW 1992, eq. for Poisson sampling: v = sum_s (1 - pi_i) y_i^2 / pi_i^2
    f = size_frame()
    d = Poisson("p", n=3)
    blk = d.draw(f, np.random.default_rng(15), 50, keep_units=True)
    est = ESTIMATORS["ht"](blk, f.N, f.V, 0.95, f.layout)
    pi = d.inclusion_probabilities(f)
    for b in range(50):
        u = blk.units[b][blk.mask[b]]
        v = ((1 - pi[u]) * f.y[u, 0] ** 2 / pi[u] ** 2).sum()
        assert est.se[b, 0] == pytest.approx(np.sqrt(v) / f.N, rel=1e-12, abs=1e-15)
        assert est.estimate[b, 0] == pytest.approx((f.y[u, 0] / pi[u]).sum() / f.N, rel=1e-12, abs=1e-15)


def test_same_seed_same_sample_for_every_new_design():
    f = size_frame()
    for method in ("pps", "pps_systematic", "sampford", "pareto", "poisson", "bernoulli"):
        d = DESIGN_CLASSES[method]("d", n=3, **({"replace": True} if method == "pps" else {}))
        d.check(f)
        a = d.draw(f, np.random.default_rng(3), 40, keep_units=True)
        b = d.draw(f, np.random.default_rng(3), 40, keep_units=True)
        np.testing.assert_array_equal(a.units, b.units)
        assert a.units.min() >= 0 and a.units.max() < f.N

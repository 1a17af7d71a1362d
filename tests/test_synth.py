"""The synthetic frame generator delivers the structure that was asked for.

- Realised ICC: the ANOVA estimator's large-sample standard error for C clusters of M units,
  SE(rho_hat) = sqrt(2 (1 - rho)^2 (1 + (M - 1) rho)^2 / (M (M - 1) (C - 1)))
  (Fisher 1925, Statistical Methods for Research Workers, sec. 39; as quoted by Donner 1986,
  Int. Stat. Review 54:67-82; from memory), gives the z-bound.
- Strata shares: whole-unit counts by largest remainder, so each is within one unit of share x N.
- Period: the periodogram of the list-ordered target peaks at frequency 1 / period
  (exact for a planted sinusoid with white noise, Fourier analysis).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import Z
from scipy import stats

from samplewright.diagnostics.inspection import anova_icc
from samplewright.population.synth import SyntheticSpec, generate


@pytest.mark.parametrize("icc", [0.05, 0.2, 0.5])
def test_realised_icc_matches_request(icc):
    C, M = 400, 25
    df = generate(SyntheticSpec(units=C * M, seed=13, clusters={"mean_size": M, "icc": icc}))
    sizes = df.groupby("cluster").size()
    assert sizes.nunique() == 1 and sizes.iloc[0] == M  # equal sizes when size_cv = 0
    got = anova_icc(df["y"], df["cluster"])
    se = math.sqrt(2 * (1 - icc) ** 2 * (1 + (M - 1) * icc) ** 2 / (M * (M - 1) * (C - 1)))
    assert abs(got - icc) < Z * se


def test_icc_holds_within_strata_and_with_unequal_sizes():
    # unequal cluster sizes have no simple closed-form SE for the ANOVA estimator, so the bound
    # comes from replication: 12 independently seeded frames, |mean - rho| < Z * sd / sqrt(12)
    # (the estimator's O(1/C) bias is far below that with about 500 clusters per stratum)
    estimates = []
    for seed in range(12):
        spec = SyntheticSpec(units=20000, seed=seed, skew="gamma", skewness=1.5,
                             strata=({"name": "a", "share": 0.5, "mean": 10, "sd": 3},
                                     {"name": "b", "share": 0.5, "mean": 40, "sd": 3}),
                             clusters={"mean_size": 20, "icc": 0.3, "size_cv": 0.5})
        df = generate(spec)
        assert df.groupby("cluster")["stratum"].nunique().max() == 1  # clusters nest in strata
        assert df.groupby("cluster").size().std() > 0  # unequal sizes were asked for
        for _, g in df.groupby("stratum"):
            estimates.append(anova_icc(g["y"], g["cluster"]))
    est = np.array(estimates)
    assert abs(est.mean() - 0.3) < Z * est.std(ddof=1) / math.sqrt(len(est))


def test_strata_shares_and_skewness():
    shares = [0.5, 0.3, 0.15, 0.05]
    skews = []
    for seed in range(12):
        spec = SyntheticSpec(units=9999, seed=seed, skew="lognormal", skewness=2.0,
                             strata=tuple({"name": f"s{i}", "share": s, "mean": 100, "sd": 10}
                                          for i, s in enumerate(shares)))
        df = generate(spec)
        counts = df["stratum"].value_counts().reindex([f"s{i}" for i in range(4)]).to_numpy()
        assert counts.sum() == 9999
        assert np.all(np.abs(counts - np.array(shares) * 9999) < 1.0)  # largest-remainder counts
        skews.append(stats.skew(df["y"]))  # equal stratum means and SDs: y's skewness is the noise's
    # the sample skewness of a lognormal parent has no handy closed-form SE: replicate over seeds
    g = np.array(skews)
    assert abs(g.mean() - 2.0) < Z * g.std(ddof=1) / math.sqrt(len(g))


def test_planted_period_is_the_periodogram_peak():
    N, period = 4096, 32
    df = generate(SyntheticSpec(units=N, seed=8, sd=5.0, period=period, amplitude=4.0))
    y = df["y"].to_numpy()
    power = np.abs(np.fft.rfft(y - y.mean())) ** 2
    peak = int(np.argmax(power[1:]) + 1)
    assert peak == N // period  # frequency index N / period


def test_size_measure_is_correlated_and_positive():
    df = generate(SyntheticSpec(units=5000, seed=2, size_correlation=0.8, size_cv=0.6))
    assert (df["size"] > 0).all()
    r = stats.pearsonr(np.log(df["size"]), df["y"]).statistic
    # Fisher z: SE of atanh(r) = 1 / sqrt(n - 3) (Fisher 1921)
    assert abs(math.atanh(r) - math.atanh(0.8)) < Z / math.sqrt(len(df) - 3)


def test_same_seed_same_frame():
    a = generate(SyntheticSpec(units=500, seed=4, clusters={"mean_size": 10, "icc": 0.1}))
    b = generate(SyntheticSpec(units=500, seed=4, clusters={"mean_size": 10, "icc": 0.1}))
    assert a.equals(b)

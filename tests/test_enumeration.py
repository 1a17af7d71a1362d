"""Simulated design moments against exact enumeration of every possible sample.

For a frame of twelve units the exact sampling distribution of each design is enumerated
here with plain Python, independently of the package: every sample, its probability, and
the estimate, standard error and t-interval the textbook formulas give for it (Cochran
1977, Sampling Techniques: SRS ch. 2, eqs. 2.8-2.10; cluster sampling of whole clusters as
SRS of cluster totals, ch. 9).  The replicate engine must then agree with the exact mean,
variance and coverage within a z-bound on its Monte Carlo error (Morris, White & Crowther
2019, Table 6, for the MCSEs).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from conftest import Z, assert_matches_exact, simulate_design

from samplewright.designs import SRS, Cluster, Systematic

CONF = 0.95
R = 20_000


def simulated(frame, design, estimator="ht"):
    return simulate_design(frame, design, estimator, replicates=R, seed=7, confidence=CONF)


def check_against_exact(reps, samples, truth):
    return assert_matches_exact(reps, samples, truth, confidence=CONF)


def srs_sample_stats(values, N):
    """Textbook SRS-without-replacement mean, SE and df of one sample (Cochran 1977, eqs. 2.8-2.10)."""
    n = len(values)
    ybar = sum(values) / n
    s2 = sum((v - ybar) ** 2 for v in values) / (n - 1)
    return ybar, math.sqrt((1 - n / N) * s2 / n), n - 1


def test_srs_matches_enumeration(small_frame):
    y = small_frame.y[:, 0].tolist()
    N, n = len(y), 4
    combos = list(itertools.combinations(range(N), n))
    samples = [(1 / len(combos), *srs_sample_stats([y[i] for i in c], N)) for c in combos]
    truth = sum(y) / N
    mean, var, _ = check_against_exact(simulated(small_frame, SRS("s", n=n)), samples, truth)
    assert mean == pytest.approx(truth, abs=1e-12)  # HT under SRS is unbiased (exactly)
    S2 = np.var(y, ddof=1)
    assert var == pytest.approx((1 - n / N) * S2 / n, rel=1e-12)  # Cochran 1977, eq. 2.8


def test_srs_with_replacement_matches_enumeration(small_frame):
    y = small_frame.y[:, 0].tolist()
    N, n = len(y), 3
    samples = []
    for draw in itertools.product(range(N), repeat=n):  # ordered draws, each with probability N^-n
        v = [y[i] for i in draw]
        ybar = sum(v) / n
        s2 = sum((a - ybar) ** 2 for a in v) / (n - 1)
        samples.append((N**-n, ybar, math.sqrt(s2 / n), n - 1))  # Cochran 1977, sec. 2.8 (no fpc)
    truth = sum(y) / N
    check_against_exact(simulated(small_frame, SRS("w", n=n, replace=True)), samples, truth)


@pytest.mark.parametrize("n", [3, 4, 5])  # k = 4, 3 (integer) and 2.4 (fractional)
def test_systematic_matches_enumeration(small_frame, n):
    y = small_frame.y[:, 0].tolist()
    N = len(y)
    k = N / n
    # start u ~ Uniform[0, k): positions floor(u + j k) change only where u + j k crosses an
    # integer, so the distinct samples are the intervals between those break points
    breaks = sorted({0.0, k} | {m - j * k for j in range(n) for m in range(N + 1) if 0 < m - j * k < k})
    samples = []
    for a, b in zip(breaks[:-1], breaks[1:]):
        u = (a + b) / 2
        pos = [math.floor(u + j * k) for j in range(n)]
        samples.append(((b - a) / k, *srs_sample_stats([y[i] for i in pos], N)))
    truth = sum(y) / N
    mean, _, _ = check_against_exact(simulated(small_frame, Systematic("k", n=n)), samples, truth)
    assert mean == pytest.approx(truth, abs=1e-9)  # every unit has inclusion probability n / N


def test_one_stage_cluster_matches_enumeration(small_frame):
    y = small_frame.y[:, 0]
    codes = small_frame.cluster
    C, m, N = small_frame.C, 3, small_frame.N
    totals = [float(y[codes == c].sum()) for c in range(C)]
    samples = []
    combos = list(itertools.combinations(range(C), m))
    for combo in combos:
        t = [totals[c] for c in combo]
        tbar = sum(t) / m
        s2 = sum((v - tbar) ** 2 for v in t) / (m - 1)
        # SRS of cluster totals: Y-hat = C tbar, v = C^2 (1 - m/C) s_t^2 / m (Cochran 1977, ch. 9)
        samples.append((1 / len(combos), C * tbar / N, C * math.sqrt((1 - m / C) * s2 / m) / N, m - 1))
    truth = float(y.mean())
    mean, _, _ = check_against_exact(simulated(small_frame, Cluster("c", clusters=m)), samples, truth)
    assert mean == pytest.approx(truth, abs=1e-12)


def test_two_stage_ht_is_unbiased_by_enumeration(small_frame):
    """Two stages: SRS of clusters, then SRS of units in each; HT is exactly unbiased (Cochran 1977, ch. 10)."""
    y = small_frame.y[:, 0]
    codes = small_frame.cluster
    C, m, k, N = small_frame.C, 2, 1, small_frame.N
    members = [np.flatnonzero(codes == c) for c in range(C)]
    exact = 0.0
    combos = list(itertools.combinations(range(C), m))
    for combo in combos:
        inner = list(itertools.product(*[itertools.combinations(members[c], k) for c in combo]))
        for pick in inner:
            est = sum((C / m) * (len(members[c]) / k) * y[list(u)].sum() for c, u in zip(combo, pick)) / N
            exact += est / (len(combos) * len(inner))
    assert exact == pytest.approx(float(y.mean()), abs=1e-12)
    reps = simulated(small_frame, Cluster("two", clusters=m, units_per_cluster=k))
    x = reps["estimate"].to_numpy()
    assert abs(x.mean() - exact) < Z * x.std(ddof=1) / math.sqrt(len(x))

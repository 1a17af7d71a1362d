"""Quantities that a run used to take from scipy.stats, now computed without importing it.

References: scipy.stats itself (``t.ppf`` and ``skew(bias=False)``); a run must give the same numbers.
"""

from __future__ import annotations

import subprocess
import sys
import warnings
from types import SimpleNamespace

import numpy as np
from scipy import stats

from samplewright.diagnostics.checks import skewness
from samplewright.estimation.intervals import t_interval


def test_t_interval_uses_scipys_t_quantile_bit_for_bit():
    rng = np.random.default_rng(4)
    df = np.r_[1.0, 2.0, 3.0, rng.integers(4, 5000, 300).astype(float), 1e7]
    est, se = rng.normal(size=(df.size, 2)), rng.uniform(0.1, 2.0, (df.size, 2))
    for confidence in (0.8, 0.95, 0.999):
        lo, hi = t_interval(est, se, df, confidence)
        q = stats.t.ppf(0.5 + confidence / 2.0, df)[:, None]  # scipy.stats
        np.testing.assert_array_equal(lo, est - q * se)
        np.testing.assert_array_equal(hi, est + q * se)


def test_skewness_matches_scipy_stats_skew_unbiased():
    rng = np.random.default_rng(9)
    y = np.column_stack([rng.lognormal(0.0, 1.0, 5000), rng.normal(5.0, 1.0, 5000), np.full(5000, 3.0),
                         1e9 + rng.normal(0.0, 1e-7, 5000)])
    got = skewness(SimpleNamespace(V=4, N=5000, y=y))
    with warnings.catch_warnings():  # scipy says the last column's variance is lost in rounding (its NaN)
        warnings.simplefilter("ignore", RuntimeWarning)
        want = stats.skew(y[:, [0, 1, 3]], axis=0, bias=False)  # scipy.stats; the constant column is 0
    np.testing.assert_array_equal(got[[0, 1, 3]], want)  # NaN where scipy gives NaN
    assert np.isnan(got[3])
    assert got[2] == 0.0


def test_a_run_does_not_import_scipy_stats():
    code = ("import sys, samplewright as sw\n"
            "sw.run(sw.scenario_from_dict({'frame': {'synthetic': {'units': 400}}, 'design': "
            "[{'label': 's', 'method': 'srs', 'n': 40}]}), replicates=50, seed=1)\n"
            "print('scipy.stats' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "False"

"""The violins' binned kernel density against scipy.stats.gaussian_kde (the density they drew before).

scipy's weighted Gaussian KDE with its default (Scott) bandwidth is the reference; the binned
density must match it to a small fraction of its peak, far below a pixel of the drawn violin.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import gaussian_kde

from samplewright.report.figures.sampling import weighted_density


@pytest.mark.parametrize("name", ["normal", "skewed", "outlier", "few", "ties"])
def test_binned_density_matches_scipy_gaussian_kde(name):
    rng = np.random.default_rng(17)
    x = {"normal": rng.normal(50.0, 3.0, 20_000), "skewed": rng.lognormal(0.0, 1.0, 5000),
         "outlier": np.r_[rng.normal(0.0, 1.0, 2000), 400.0], "few": rng.normal(0.0, 1.0, 12),
         "ties": rng.integers(0, 5, 3000).astype(float)}[name]
    w = rng.uniform(0.5, 1.5, x.size)
    w /= w.sum()
    coords = np.linspace(x.min(), x.max(), 100)  # the points matplotlib's violin_stats asks for
    want = gaussian_kde(x, weights=w)(coords)  # scipy.stats, Scott's factor n_eff^(-1/5)
    got = weighted_density(x, w, coords)
    assert np.abs(got - want).max() <= 1e-3 * want.max()


def test_binned_density_of_a_sample_without_spread_is_zero():
    coords = np.linspace(0.0, 1.0, 5)
    assert not weighted_density(np.full(10, 3.0), np.full(10, 0.1), coords).any()
    assert not weighted_density(np.array([1.0, 2.0]), np.array([1.0, 0.0]), coords).any()  # one value carries all

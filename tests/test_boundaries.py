"""Stratum boundary rules (designs/boundaries.py) against their published closed forms."""

import numpy as np
import pytest

from samplewright.decision.planning import allocate_strata
from samplewright.decision.take_all import take_all
from samplewright.designs.boundaries import cum_sqrt_f, geometric, stratum_codes
from samplewright.errors import InputError


@pytest.mark.parametrize("H", [2, 3, 5, 8])
def test_cum_sqrt_f_uniform_is_equally_spaced(H):
    # Dalenius and Hodges (1959): with a constant frequency the cumulative sqrt(f) is linear, so the
    # boundaries cut the range into H equal parts (exact here: J a multiple of H, equal class counts)
    x = np.linspace(0.0, 1.0, 40_001)
    b = cum_sqrt_f(x, H, classes=40 * H)
    assert b == pytest.approx(np.arange(1, H) / H, abs=1e-12)


@pytest.mark.parametrize("H", [3, 6])
def test_cum_sqrt_f_exponential_closed_form_within_one_class(H):
    # Dalenius and Hodges (1959): the boundaries cut the integral of sqrt(f) into H equal parts.  For the
    # exponential density f(x) = exp(-x) truncated to [0, B], int_0^y sqrt(f) = 2 (1 - exp(-y/2)), so
    # y_k = -2 log(1 - (k/H) (1 - exp(-B/2))).  The frame holds the exact quantiles of the density.
    N, B = 200_000, 8.0
    F_B = 1.0 - np.exp(-B)
    x = -np.log(1.0 - F_B * (np.arange(N) + 0.5) / N)
    J = 200
    b = cum_sqrt_f(x, H, classes=J)
    lo, hi = x.min(), x.max()
    k = np.arange(1, H) / H
    closed = -2.0 * np.log(1.0 - k * (1.0 - np.exp(-(hi - lo) / 2.0))) + lo
    assert np.abs(b - closed).max() <= (hi - lo) / J


@pytest.mark.parametrize("H", [2, 4, 7])
def test_geometric_equals_a_r_to_the_h(H):
    # Gunning and Horgan (2004): b_h = a r^h, r = (b / a)^(1/H)
    rng = np.random.default_rng(5)
    x = rng.lognormal(3.0, 1.2, 5000)
    a, b = x.min(), x.max()
    r = (b / a) ** (1.0 / H)
    assert geometric(x, H) == pytest.approx([a * r**h for h in range(1, H)], rel=1e-12)


def test_geometric_refuses_a_zero():
    with pytest.raises(InputError, match="above 0"):
        geometric([0.0, 1.0, 2.0], 2)


def test_stratum_codes_put_a_boundary_value_below():
    assert stratum_codes([1.0, 2.0, 2.5, 5.0, 9.0], [2.0, 5.0]).tolist() == [0, 0, 1, 1, 2]


def test_take_all_picks_the_outliers_and_needs_fewer_units():
    # Lavallee and Hidiroglou (1988), simplified (decision/take_all.py notes): with a few very large units
    # a take-all stratum cuts the units a target CV needs.  Reference: k = 0, two cumulative sqrt(f) strata,
    # Neyman for the fixed variance V = (cv Ybar)^2 with over-allocated strata taken whole (Cochran 1977,
    # sec. 5.5 and 5.8, by planning.allocate_strata, itself tested against Cochran in test_planning.py).
    rng = np.random.default_rng(2)
    x = np.concatenate([rng.uniform(1, 10, 2000), [500.0, 700.0, 900.0, 1200.0, 1500.0]])
    res = take_all(x, 3, cv=0.01)
    assert 5 <= res["take_all"] <= 400
    assert res["boundaries"][-1] < 500.0 and len(res["boundaries"]) == 2
    assert res["n"] >= res["take_all"] + 4
    codes = stratum_codes(x, cum_sqrt_f(x, 2))
    S_h = [x[codes == h].std(ddof=1) for h in range(2)]
    k0 = allocate_strata(np.bincount(codes), S_h, rule="neyman", variance=(0.01 * x.mean()) ** 2)["n"]
    assert res["n"] < k0


def test_default_classes_are_freedman_diaconis():
    # Freedman and Diaconis (1981): class width 2 IQR N^(-1/3); numpy's "fd" bins are an independent implementation
    from samplewright.designs.boundaries import default_classes

    rng = np.random.default_rng(8)
    x = rng.lognormal(2.0, 0.8, 5000)
    assert default_classes(x, 4) == len(np.histogram_bin_edges(x, "fd")) - 1
    assert default_classes(np.r_[np.ones(50), 2.0], 4) == 40  # IQR 0: the floor of 10 classes per stratum


def test_cum_sqrt_f_resolves_a_column_stretched_by_a_few_giants():
    # with the Freedman-Diaconis classes the bulk is cut into H strata although three units sit 10^4 times
    # above it (with 10 H equal-width classes every boundary would fall in the first class)
    rng = np.random.default_rng(3)
    x = np.r_[rng.lognormal(2.0, 0.5, 5000), 5e4, 7e4, 9e4]
    b = cum_sqrt_f(x, 5)
    assert len(b) == 4 and b[-1] < 100
    assert len(cum_sqrt_f(x, 5, classes=50)) == 1


def test_tidy_boundaries_cut_the_same_strata_with_short_numbers():
    from samplewright.designs.boundaries import tidy

    rng = np.random.default_rng(11)
    x = rng.lognormal(2.0, 1.0, 3000)
    b = cum_sqrt_f(x, 6)
    t = tidy(x, b)
    assert stratum_codes(x, t).tolist() == stratum_codes(x, b).tolist()  # the same partition, unit by unit
    assert sum(len(repr(v)) for v in t) < sum(len(repr(float(v))) for v in b)
    assert tidy([1.0, 2.0, 3.0], [2.0]) == [2.0]  # a boundary on a value keeps that value below it

"""Allocation rules and their whole-unit rounding (Cochran 1977, ch. 5)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from samplewright.designs.allocation import allocate, shares
from samplewright.errors import InputError


def test_proportional_and_equal_by_hand():
    # proportional n_h = n N_h / N (Cochran 1977, sec. 5.4): 10 * (50, 30, 20) / 100
    assert allocate(10, "proportional", [50, 30, 20]).tolist() == [5, 3, 2]
    assert allocate(9, "equal", [50, 30, 20]).tolist() == [3, 3, 3]


def test_optimal_allocation_hand_worked():
    # cost-optimal n_h ∝ N_h S_h / sqrt(c_h) (Cochran 1977, eq. 5.24); worked by hand:
    # N_h S_h / sqrt(c_h) = 400*10/2 = 2000, 100*20/1 = 2000, 500*4/2 = 1000 -> shares .4 .4 .2
    w = shares("optimal", [400, 100, 500], [10, 20, 4], [4, 1, 4])
    assert w.tolist() == pytest.approx([0.4, 0.4, 0.2])
    assert allocate(50, "optimal", [400, 100, 500], [10, 20, 4], [4, 1, 4]).tolist() == [20, 20, 10]


def test_neyman_caps_a_small_stratum_and_respreads():
    # Neyman would give the tiny, highly variable stratum more units than it has
    n_h = allocate(100, "neyman", [10, 1000, 1000], [1000, 1, 1])
    assert n_h[0] == 10 and n_h.sum() == 100  # census of stratum 1, the rest shared equally
    assert abs(int(n_h[1]) - int(n_h[2])) <= 1


def test_refusals():
    with pytest.raises(InputError, match="n = 5 cannot give every one of the 3 strata"):
        allocate(5, "proportional", [10, 10, 10])
    with pytest.raises(InputError, match="more than the 30 units"):
        allocate(31, "proportional", [10, 10, 10])
    with pytest.raises(InputError, match="not known"):
        allocate(10, "biggest", [10, 10, 10])


@settings(max_examples=80, deadline=None, derandomize=True)
@given(st.lists(st.integers(1, 200), min_size=1, max_size=8), st.data(),
       st.sampled_from(["equal", "proportional", "neyman", "optimal"]))
def test_rounding_invariants(N_h, data, rule):
    N_h = np.array(N_h)
    floor = np.minimum(2, N_h)
    n = data.draw(st.integers(int(floor.sum()), int(N_h.sum())))
    S_h = np.array(data.draw(st.lists(st.floats(0.0, 50.0), min_size=len(N_h), max_size=len(N_h))))
    c_h = np.array(data.draw(st.lists(st.floats(0.5, 20.0), min_size=len(N_h), max_size=len(N_h))))
    got = allocate(n, rule, N_h, S_h, c_h)
    assert got.sum() == n  # keeps the total
    assert np.all(got <= N_h)  # never more than a stratum holds
    assert np.all(got >= floor)  # two units where the stratum has them

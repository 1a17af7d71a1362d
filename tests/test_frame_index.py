"""The frame's group index (units sorted by stratum or cluster) against numpy's stable argsort."""

from __future__ import annotations

import numpy as np

from samplewright.population.frame import _group_index


def test_group_index_is_the_stable_sort_of_the_codes():
    rng = np.random.default_rng(12)
    cases = [(rng.integers(0, 7, 5000), 7), (np.sort(rng.integers(0, 300, 5000)), 300),
             (rng.integers(0, 70_000, 5000), 70_000), (np.zeros(1, dtype=np.int64), 1)]
    for codes, k in cases:
        idx, offsets = _group_index(codes, k)
        np.testing.assert_array_equal(idx, np.argsort(codes, kind="stable"))  # numpy's stable sort
        np.testing.assert_array_equal(np.diff(offsets), np.bincount(codes, minlength=k))
        assert idx.dtype == np.int64 and offsets[0] == 0 and offsets[-1] == codes.size

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


def test_one_target_frame_holds_its_values_once():
    # with one study variable, y, the gathered column and the value table share one buffer (views, not
    # copies): the frame holds N values once; several study variables keep y as its own row-major copy
    import pandas as pd

    from samplewright.population.frame import COST, COUNT, Frame

    rng = np.random.default_rng(5)
    df = pd.DataFrame({"y": rng.normal(size=500), "z": rng.normal(size=500), "band": rng.integers(0, 4, 500)})
    one = Frame.from_dataframe(df, target="y", stratum="band")
    assert one.values.flags.f_contiguous and one.column.flags.c_contiguous
    assert np.shares_memory(one.y, one.values) and np.shares_memory(one.column, one.values)
    assert one.y.base is one.values or one.y.base is one.values.base
    np.testing.assert_array_equal(one.y[:, 0], df["y"].to_numpy())  # the file's values, unchanged
    np.testing.assert_array_equal(one.values[:, COUNT], 1.0)
    np.testing.assert_array_equal(one.values[:, COST], 0.0)
    np.testing.assert_array_equal(one.gather(np.array([[3, 1]])), one.values[[3, 1]][None])  # numpy indexing
    two = Frame.from_dataframe(df, target=["y", "z"], stratum="band")
    assert two.y.flags.c_contiguous and not np.shares_memory(two.y, two.values)
    np.testing.assert_array_equal(two.values[:, :2], df[["y", "z"]].to_numpy())
    # sums by stratum: bincount against a plain loop over the units in list order
    loop = np.zeros((4, 2))
    for s, row in zip(df["band"], df[["y", "z"]].to_numpy()):
        loop[s] += row
    np.testing.assert_array_equal(two.stratum_means(), loop / np.bincount(df["band"])[:, None])


def test_label_codes_are_pandas_sorted_factorize():
    # labels become codes in one place; small whole numbers are counted instead of hashed, and every
    # path must give pandas.factorize(sort=True)'s codes and labels (types included)
    import pandas as pd

    from samplewright.config.validate import label_codes

    rng = np.random.default_rng(3)
    cases = [rng.integers(0, 50, 1000), rng.integers(0, 50, 1000).astype(np.uint8), np.array([5, 3, 3, 10**9]),
             np.array([-1, 2, 2]), np.array([0]), rng.integers(0, 50, 1000).astype(np.int32),
             np.array(["b", "a", "b"]), rng.normal(size=20).round(1)]
    for values in cases:
        codes, labels = label_codes(pd.Series(values))
        expect_codes, expect_labels = pd.factorize(pd.Series(values), sort=True)
        np.testing.assert_array_equal(codes, expect_codes)
        assert codes.dtype == np.int64
        assert labels == tuple(expect_labels.tolist())
        assert [type(v) for v in labels] == [type(v) for v in expect_labels.tolist()]

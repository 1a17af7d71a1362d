"""Parquet written in row groups reads back as the same table as one written whole."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.files import write_parquet


def test_row_groups_give_the_same_table(tmp_path):
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"replicate": np.arange(2500), "design": np.repeat(["a", "b"], 1250),
                       "estimate": rng.normal(size=2500), "n": rng.integers(1, 9, 2500).astype(float)})
    write_parquet(df, tmp_path / "groups.parquet", rows_per_group=700)
    write_parquet(df, tmp_path / "whole.parquet")
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "groups.parquet"), df)
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "whole.parquet"), df)


def test_a_column_blank_in_the_first_group_falls_back_to_one_piece(tmp_path):
    df = pd.DataFrame({"x": np.arange(10.0), "note": [None] * 5 + ["late"] * 5})
    write_parquet(df, tmp_path / "t.parquet", rows_per_group=4)
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "t.parquet"), df)
    assert not list(tmp_path.glob(".*.tmp"))

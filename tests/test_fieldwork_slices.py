"""Fieldwork blocks worked on in slices of replicates: the same numbers, bit for bit.

The adjustment, the adjusted sums and the estimates of a fieldwork block run slice by slice of
whole replicates (``fieldwork.SLICE_UNITS``), and raking builds per-unit values only for the
columns the estimators read.  Neither may move a number: every adjustment and estimator works
replicate by replicate, and the sums over a position's units are added in one fixed order.
The references are the same computation on the whole block, plain numpy (``np.linalg.pinv``,
``ndarray.sum``) and left-to-right addition of Python floats (IEEE 754 double arithmetic).
"""

from __future__ import annotations

from functools import reduce
from operator import add
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from samplewright.api import run
from samplewright.designs.block import SampleBlock
from samplewright.estimation.gram import gram_pinv
from samplewright.estimation.registry import value_columns
from samplewright.estimation.weighting import ResolvedAdjustment, _unit_sums
from samplewright.simulation import fieldwork
from samplewright.simulation.scenario import scenario_from_dict


def test_unit_sums_add_the_units_left_to_right():
    rng = np.random.default_rng(11)
    for k in (1, 3, 9, 20):
        a = rng.normal(0.0, 1.0, (4, 5, k, 3)) * 10.0 ** rng.integers(-8, 9, (4, 5, k, 3))
        got = _unit_sums(a)
        np.testing.assert_array_equal(got, a.sum(axis=2))  # the order numpy uses over a non-last axis
        for b, j, v in [(0, 0, 0), (3, 4, 2), (2, 1, 1)]:  # IEEE double addition, one unit after another
            assert got[b, j, v] == reduce(add, (float(x) for x in a[b, j, :, v]))


def test_raking_keep_returns_the_leading_columns_bit_for_bit():
    rng = np.random.default_rng(5)
    n_list, B, m, k = 50, 12, 7, 2
    first, second = rng.integers(0, 3, n_list), rng.integers(0, 2, n_list)
    first[:3], second[:2] = [0, 1, 2], [0, 1]
    adjustment = ResolvedAdjustment("raking", (first, second), (3, 2),
                                    (np.bincount(first) * 4.0, np.bincount(second) * 4.0))
    units = rng.integers(0, n_list, (B, m, k))
    w = rng.uniform(2.0, 9.0, (B, m, k))
    y = rng.normal(10.0, 3.0, (B, m, k, 4))
    e = np.ones((B, m, k), dtype=bool)
    r = rng.random((B, m, k)) < 0.8
    positions = np.ones((B, m), dtype=bool)
    u, count, failed = adjustment.apply(units, w, y, e, r, positions)
    for keep in (1, 2):
        u_keep, count_keep, failed_keep = adjustment.apply(units, w, y, e, r, positions, keep)
        assert u_keep.shape == (B, m, keep)
        np.testing.assert_array_equal(u_keep, u[..., :keep])
        np.testing.assert_array_equal(count_keep, count)
        np.testing.assert_array_equal(failed_keep, failed)


def test_value_columns_only_for_targets_only_estimators():
    plain, with_domains = SimpleNamespace(V=2, D=0), SimpleNamespace(V=2, D=1)
    assert value_columns(("ht", "hajek"), plain) == 2
    assert value_columns(("hajek", "greg"), plain) is None
    assert value_columns(("ratio",), plain) is None
    assert value_columns(("hajek",), with_domains) is None


def test_block_replicates_cuts_every_per_replicate_field():
    rng = np.random.default_rng(2)
    B, m = 5, 4
    block = SampleBlock(sums=rng.random((B, m, 3)), weight=rng.random((B, m)), psu_stratum=np.zeros(m, int),
                        fpc=np.array([0.9]), clusters=rng.random(B), mask=rng.random((B, m)) < 0.7,
                        units=rng.integers(0, 99, (B, m)), cluster_cost=rng.random(B),
                        within_fpc=rng.random((B, 2)), design_info={"x": 1})
    rows = slice(1, 4)
    part = block.replicates(rows)
    for name in ("sums", "weight", "clusters", "mask", "units", "cluster_cost", "within_fpc"):
        np.testing.assert_array_equal(getattr(part, name), getattr(block, name)[rows])
    assert part.psu_stratum is block.psu_stratum and part.fpc is block.fpc and part.design_info is block.design_info
    new = np.zeros((3, m, 2))
    assert block.replicates(rows, new).sums is new
    shared = SampleBlock(sums=block.sums, weight=np.ones(m), psu_stratum=block.psu_stratum, fpc=block.fpc,
                         clusters=block.clusters)
    assert shared.replicates(rows).weight is shared.weight  # one weight per position, for every replicate


def test_gram_pinv_mixed_batch_matches_each_matrix_alone():
    rng = np.random.default_rng(8)
    x = rng.normal(size=(20, 3))
    well = x.T @ x
    xs = np.column_stack([x[:, :2], x[:, 1]])  # a column listed twice: singular
    singular = xs.T @ xs
    out, plain = gram_pinv(np.stack([well, singular, well]))
    assert plain.tolist() == [True, False, True]
    np.testing.assert_allclose(out[0], np.linalg.pinv(well), rtol=1e-10)  # numpy's pseudo-inverse
    np.testing.assert_array_equal(out[0], gram_pinv(well[None])[0][0])
    np.testing.assert_array_equal(out[1], gram_pinv(singular[None])[0][0])
    np.testing.assert_allclose(out[1][:2, :2], np.linalg.inv(singular[:2, :2]), rtol=1e-10)
    assert not out[1][2].any() and not out[1][:, 2].any()


@pytest.fixture(scope="module")
def frame_csv(tmp_path_factory):
    """An invented frame: 600 units in 3 strata and 60 clusters of 10, with a region and an auxiliary."""
    rng = np.random.default_rng(30)
    unit = np.arange(600)
    stratum = np.array(["a", "b", "c"])[unit // 200]
    x = rng.uniform(10.0, 30.0, 600)
    df = pd.DataFrame({"stratum": stratum, "cluster": unit // 10, "x": x,
                       "region": np.array(["n", "s", "e"])[rng.integers(0, 3, 600)],
                       "y": 5.0 + 0.7 * x + rng.normal(0.0, 2.0, 600)})
    path = tmp_path_factory.mktemp("slices") / "frame.csv"
    df.to_csv(path, index=False)
    return path


def test_fieldwork_results_do_not_depend_on_the_slicing(frame_csv, monkeypatch):
    designs = [
        {"label": "raked", "method": "srs", "n": 60, "estimators": ["hajek"], "adjustment": "raking",
         "raking_margins": ["stratum", "region"]},
        {"label": "raked greg", "method": "srs", "n": 60, "estimators": ["hajek", "greg"],
         "adjustment": "raking", "raking_margins": ["stratum", "region"]},
        {"label": "clusters by class", "method": "cluster", "clusters": 6, "estimators": ["hajek"],
         "adjustment": "class"},
        {"label": "poststratified", "method": "stratified", "n": 45, "estimators": ["ht"],
         "adjustment": "poststrat", "adjustment_classes": "region"},
    ]
    sc = scenario_from_dict({"frame": {"path": str(frame_csv), "target": "y", "stratum": "stratum",
                                       "cluster": "cluster", "auxiliary": ["x"]},
                             "response": {"model": "logistic", "intercept": 2.0, "coefficients": {"x": -0.05}},
                             "design": designs}, base=frame_csv.parent)
    tables = {}
    for units in (1, 1 << 30):  # one replicate per slice; the whole block in one slice
        monkeypatch.setattr(fieldwork, "SLICE_UNITS", units)
        res = run(sc, replicates=120, seed=4, block_size=50)
        tables[units] = (res.summary, res.replicates)
    (s1, r1), (s2, r2) = tables.values()
    pd.testing.assert_frame_equal(s1, s2, check_exact=True)
    pd.testing.assert_frame_equal(r1, r2, check_exact=True)
    assert (s1["adjustment_failures"] < 120).all()

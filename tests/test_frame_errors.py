"""Frame errors: the bias each causes, against its closed form.

- Duplicate listings: a design-unbiased total estimator on the list estimates the list's
  total, E[t_HT] = sum_k d_k y_k with d_k the listings of unit k (Horvitz & Thompson 1952,
  unbiasedness for the population it samples), so the HT mean t / N_list estimates
  sum_k d_k y_k / sum_k d_k and is biased by that minus Ybar.
- Under-coverage: a census of the list gives the covered mean Ybar_c; the bias is
  Ybar_c - Ybar = W_u (Ybar_c - Ybar_u) with W_u the uncovered share (from
  Ybar = (1 - W_u) Ybar_c + W_u Ybar_u).
- Ineligible entries: screened out at fieldwork, they leave a domain estimator (Hajek over
  the eligible units) unbiased for the true mean (Sarndal, Swensson & Wretman 1992, ch. 10,
  domain estimation), while the HT mean t / N_list is scaled by N_eligible / N_list.
- Post-stratification to the true population counts repairs under-coverage that is random
  within the post-strata (within a post-stratum the covered units are a random subset).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright import Frame
from samplewright.api import run
from samplewright.errors import InputError
from samplewright.population.frame_errors import FrameErrorSpec, frame_error_from_dict, list_frame
from samplewright.simulation.scenario import scenario_from_dict


@pytest.fixture(scope="module")
def population():
    """An invented register of 800 wells in two districts (values only exercise the code)."""
    rng = np.random.default_rng(17)
    district = np.repeat(["lowland", "upland"], [500, 300])
    depth = np.where(district == "lowland", 12.0, 40.0) + rng.gamma(3.0, 3.0, 800)
    return pd.DataFrame({"depth": depth, "district": district, "owner": rng.choice(["public", "private"], 800)})


def scenario(tmp_path, df, designs, roles, **tables):
    df.to_csv(tmp_path / "frame.csv", index=False)
    return scenario_from_dict({"frame": {"path": "frame.csv", **roles}, "design": designs, **tables},
                              base=tmp_path)


def one(res, design, est):
    s = res.summary
    return s[(s.design == design) & (s.estimator == est)].iloc[0]


def test_listed_frame_counts_and_seed():
    f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(100.0)}), target="y")
    spec = FrameErrorSpec(undercoverage=0.1, duplicates=0.05, ineligible=0.03)
    a, b = list_frame(f, spec, seed=4), list_frame(f, spec, seed=4)
    assert a.counts == {"population_units": 100, "listed_units": 90 + round(0.05 * 90) + 3, "missing_units": 10,
                        "duplicated_units": round(0.05 * 90), "ineligible_entries": 3}
    np.testing.assert_array_equal(a.source, b.source)
    assert int((~a.eligible).sum()) == 3 and np.all(a.frame.y[~a.eligible] == 0.0)
    assert sorted(a.frame.order.tolist()) == list(range(a.frame.N))


def test_duplicate_listings_bias_ht_by_closed_form(tmp_path, population):
    R = 8000
    sc = scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 80, "estimators": ["ht"]}],
                  {"target": "depth"}, frame_error={"duplicates": 0.25})
    res = run(sc, replicates=R, seed=3)
    lf = list_frame(sc.load_frame(), sc.frame_error, seed=3)
    y = population["depth"].to_numpy()
    d = np.bincount(lf.source, minlength=len(y))  # listings per unit
    assert set(np.unique(d)) == {1, 2}
    closed = float(np.sum(d * y) / np.sum(d) - y.mean())
    row = one(res, "s", "ht")
    assert row["truth"] == pytest.approx(y.mean())  # the truth stays the true population's
    assert row["frame_bias"] == pytest.approx(closed, abs=1e-10)
    assert abs(row["bias"] - closed) < Z * row["bias_mcse"]
    assert abs(closed) > 10 * row["bias_mcse"]


def test_undercoverage_bias_is_covered_minus_full_mean(tmp_path, population):
    R = 8000
    sc = scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 80, "estimators": ["ht", "hajek"]}],
                  {"target": "depth", "stratum": "district"},
                  frame_error={"undercoverage": 0.5, "undercoverage_stratum": "upland"})
    res = run(sc, replicates=R, seed=8)
    lf = list_frame(sc.load_frame(), sc.frame_error, seed=8)
    y = population["depth"].to_numpy()
    covered = np.zeros(len(y), dtype=bool)
    covered[lf.source] = True
    assert covered.sum() == 800 - 150
    Wu = 1.0 - covered.mean()
    closed = y[covered].mean() - y.mean()
    assert closed == pytest.approx(Wu * (y[covered].mean() - y[~covered].mean()))  # the identity
    for est in ("ht", "hajek"):
        row = one(res, "s", est)
        assert row["frame_bias"] == pytest.approx(closed, abs=1e-10)
        assert abs(row["bias"] - closed) < Z * row["bias_mcse"]
    assert abs(closed) > 10 * one(res, "s", "hajek")["bias_mcse"]


def test_poststratifying_to_true_counts_repairs_random_undercoverage_within_strata(tmp_path, population):
    R = 6000
    designs = [{"label": "s", "method": "srs", "n": 100, "adjustment": "poststrat",
                "adjustment_classes": "district", "estimators": ["hajek"]}]
    sc = scenario(tmp_path, population, designs, {"target": "depth"},
                  frame_error={"undercoverage": 0.5, "undercoverage_column": "district",
                               "undercoverage_values": ["upland"]})
    res = run(sc, replicates=R, seed=10)
    row = one(res, "s", "hajek")
    y, d = population["depth"].to_numpy(), population["district"].to_numpy()
    lf = list_frame(sc.load_frame(), sc.frame_error, seed=10, columns={"district": d})
    covered = np.zeros(len(y), dtype=bool)
    covered[lf.source] = True
    # a census of the list, post-stratified to the true counts: sum_c W_c (covered mean_c - mean_c)
    closed = sum(np.mean(d == c) * (y[covered & (d == c)].mean() - y[d == c].mean()) for c in ("lowland", "upland"))
    assert row["frame_bias"] == pytest.approx(closed, abs=1e-10)
    assert abs(row["bias"] - closed) < Z * row["bias_mcse"]
    # over the random choice of the 150 missing upland wells that term has mean 0 and SD
    # W_u sqrt((1 - 150/300) S_u^2 / 150) (Cochran 1977, eq. 2.8 for the 150 covered of 300)
    Su2 = y[d == "upland"].var(ddof=1)
    assert abs(closed) < Z * np.mean(d == "upland") * math.sqrt(0.5 * Su2 / 150)
    plain = y[covered].mean() - y.mean()  # what the unadjusted estimator inherits
    assert abs(plain) > 10 * abs(closed)


def test_ineligible_entries_leave_hajek_unbiased_and_scale_ht(tmp_path, population):
    R = 8000
    sc = scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 80, "estimators": ["ht", "hajek"]}],
                  {"target": "depth"}, frame_error={"ineligible": 0.2}, cost={"per_attempt": 2.0, "per_complete": 5.0})
    res = run(sc, replicates=R, seed=13)
    y = population["depth"].to_numpy()
    N_list = 800 + 160
    hajek, ht = one(res, "s", "hajek"), one(res, "s", "ht")
    assert abs(hajek["bias"]) < Z * hajek["bias_mcse"]
    closed = y.sum() / N_list - y.mean()
    assert ht["frame_bias"] == pytest.approx(closed, abs=1e-10)
    assert abs(ht["bias"] - closed) < Z * ht["bias_mcse"]
    r = res.replicates
    r = r[r.estimator == "hajek"]
    # hypergeometric mean of the eligible units among 80 drawn from 960 listings, 800 of them eligible
    share = 800 / N_list
    sd = math.sqrt(80 * share * (1 - share) * (N_list - 80) / (N_list - 1))
    assert abs(r["eligible"].mean() - 80 * share) < Z * sd / math.sqrt(R)
    assert (r["attempted"] == 80).all() and (r["n"] == r["eligible"]).all()
    np.testing.assert_allclose(r["cost"], 2.0 * 80 + 5.0 * r["n"])  # ineligibles cost an attempt only
    assert hajek["response_rate"] == pytest.approx(1.0)


@pytest.mark.parametrize("table, words", [
    ({"undercoverage": 1.2}, "at most 1"),
    ({"undercoverage": 1.0}, "nothing on the list"),
    ({"undercoverage_stratum": "a"}, "need undercoverage"),
    ({"undercoverage": 0.1, "undercoverage_column": "x"}, "needs undercoverage_values"),
    ({"undercoverage": 0.1, "undercoverage_values": [1]}, "needs undercoverage_column"),
    ({"duplicate": 0.1}, "did you mean 'duplicates'"),
])
def test_frame_error_table_refusals(table, words):
    with pytest.raises(InputError, match=words):
        frame_error_from_dict(table)


def test_unknown_undercoverage_stratum(tmp_path, population):
    sc = scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 8}],
                  {"target": "depth", "stratum": "district"},
                  frame_error={"undercoverage": 0.2, "undercoverage_stratum": "uplands"})
    with pytest.raises(InputError, match="'uplands' is not a stratum.*did you mean 'upland'"):
        run(sc, replicates=5)

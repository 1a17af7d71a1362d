"""The cost model: stratum rates, cluster costs, clusters touched by unit samples, the cost-optimal
allocation from the model, and the [cost]/[goal]/cluster_cost checks.

Each per-replicate cost is recomputed here from the sampled unit indices (kept with
``keep_units``) by plain Python, independently of the vectorised code.  The expected number of
clusters an SRS touches is checked against scipy.stats.hypergeom (a cluster of M_c units is
missed with probability hypergeom(N, M_c, n).pmf(0)), within a Monte Carlo z-bound.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import Z, mc_tolerance
from scipy import stats

from samplewright import Frame
from samplewright.api import run
from samplewright.designs import SRS, Cluster, Stratified
from samplewright.designs.allocation import allocate
from samplewright.errors import InputError
from samplewright.estimation.cost import CostModel
from samplewright.simulation.scenario import scenario_from_dict


def _frame(cluster_cost=True, unit_cost=False):
    """Invented frame: 3 zones, 12 blocks of unequal size, a travel cost per block."""
    rng = np.random.default_rng(9)
    sizes = [5, 8, 6, 9, 4, 7, 10, 6, 5, 8, 7, 5]
    zone_of_block = ["east"] * 4 + ["north"] * 4 + ["west"] * 4
    travel = [10, 12, 9, 15, 30, 28, 33, 31, 5, 6, 7, 4]
    rows = []
    for b, m in enumerate(sizes):
        for _ in range(m):
            rows.append({"y": rng.normal(50, 10), "zone": zone_of_block[b], "block": f"b{b:02d}",
                         "travel": travel[b], "extra": float(rng.integers(0, 4))})
    df = pd.DataFrame(rows)
    kw = {"cluster_cost": "travel"} if cluster_cost else {}
    if unit_cost:
        kw["unit_cost"] = "extra"
    return df, Frame.from_dataframe(df, target="y", stratum="zone", cluster="block", **kw)


def test_stratum_rates_per_replicate():
    df, f = _frame(unit_cost=True)
    cm = CostModel(fixed=100.0, per_unit=3.0, per_unit_by_stratum=(("north", 11.0),))
    bound = cm.bind(f)
    blk = SRS("s", n=20).draw(bound, np.random.default_rng(1), B=50, keep_units=True)
    cost = cm.replicate_cost(blk, bound)
    rate = {"east": 3.0, "north": 11.0, "west": 3.0}
    for b in range(50):
        rows = df.iloc[blk.units[b]]
        want = 100.0 + sum(rate[z] for z in rows["zone"]) + rows["extra"].sum()
        assert cost[b] == pytest.approx(want)


def test_cluster_cost_column_for_cluster_designs():
    df, f = _frame()
    cm = CostModel(fixed=50.0, per_unit=2.0, per_cluster=4.0)
    for design in (Cluster("one", clusters=4), Cluster("two", clusters=4, units_per_cluster=3, cap_units=True)):
        blk = design.draw(f, np.random.default_rng(2), B=40, keep_units=True)
        cost = cm.replicate_cost(blk, f)
        for b in range(40):
            u = np.asarray(blk.units[b])
            u = u[u >= 0]
            visited = df.iloc[u]["block"].unique()
            travel = df.drop_duplicates("block").set_index("block").loc[visited, "travel"].sum()
            assert cost[b] == pytest.approx(50.0 + 2.0 * len(u) + 4.0 * 4 + travel)


def test_unit_designs_pay_no_cluster_cost_unless_asked():
    df, f = _frame()
    blk = SRS("s", n=15).draw(f, np.random.default_rng(3), B=30, keep_units=True)
    plain = CostModel(per_unit=1.0, per_cluster=5.0).replicate_cost(blk, f)
    assert np.all(plain == 15.0)
    touched = CostModel(per_unit=1.0, per_cluster=5.0, charge_touched_clusters=True).replicate_cost(blk, f)
    for b in range(30):
        rows = df.iloc[blk.units[b]]
        blocks = rows["block"].unique()
        travel = rows.drop_duplicates("block")["travel"].sum()
        assert touched[b] == pytest.approx(15.0 + 5.0 * len(blocks) + travel)


def test_expected_clusters_touched_by_srs_against_the_hypergeometric():
    # E[clusters touched] = sum_c (1 - P(no unit of cluster c)) with P = hypergeom(N, M_c, n).pmf(0)
    _df, f = _frame(cluster_cost=False)
    n, R = 12, 20000
    sc = scenario_from_dict({"frame": {"path": "unused.csv", "target": "y", "cluster": "block"},
                             "design": [{"label": "s", "method": "srs", "n": n, "estimators": ["ht"]}],
                             "cost": {"per_cluster": 1.0, "charge_touched_clusters": True}})
    res = run(sc, replicates=R, seed=5, frame=f)
    touched = res.replicates["cost"].to_numpy()
    sizes = f.cluster_sizes
    exact = float(np.sum(1.0 - stats.hypergeom(f.N, sizes, n).pmf(0)))
    assert abs(touched.mean() - exact) < mc_tolerance(touched.std(ddof=1), R, Z)


def test_optimal_allocation_uses_the_model_costs():
    df, f = _frame(unit_cost=True)
    sc = scenario_from_dict({"frame": {"path": "unused.csv", "target": "y", "stratum": "zone"},
                             "design": [{"label": "opt", "method": "stratified", "n": 24, "allocation": "optimal"}],
                             "cost": {"per_unit": 4.0, "per_unit_by_stratum": {"north": 25.0}}})
    res = run(sc, replicates=20, seed=1, frame=f)
    got = res.allocation.sort_values("stratum")["sample_units"].to_numpy()
    # c_h = stratum rate + mean of the unit_cost column (Cochran 1977, sec. 5.5: n_h ~ N_h S_h / sqrt(c_h))
    c_h = np.array([4.0, 25.0, 4.0]) + df.groupby("zone")["extra"].mean().to_numpy()
    S_h = np.sqrt(f.stratum_S2()[:, 0])
    assert got.tolist() == allocate(24, "optimal", f.N_h, S_h, c_h).tolist()
    # and differs from what equal costs (Neyman) would give
    assert got.tolist() != allocate(24, "neyman", f.N_h, S_h).tolist()


def test_stratified_design_cost_with_rates():
    _df, f = _frame()
    cm = CostModel(fixed=10.0, per_unit=2.0, per_stratum=7.0, per_unit_by_stratum=(("west", 9.0),))
    bound = cm.bind(f)
    d = Stratified("st", n=12, allocation="proportional")
    blk = d.draw(bound, np.random.default_rng(4), B=5)
    n_h = d.n_h(bound)  # east, north, west
    want = 10.0 + 7.0 * 3 + 2.0 * (n_h[0] + n_h[1]) + 9.0 * n_h[2]
    assert cm.replicate_cost(blk, bound) == pytest.approx(np.full(5, want))


# ------------------------------------------------------------------ checks at the boundary
def test_cluster_cost_must_be_one_per_cluster():
    df, _ = _frame()
    df.loc[3, "travel"] = 99
    with pytest.raises(InputError, match="differs within cluster 'b00'"):
        Frame.from_dataframe(df, target="y", cluster="block", cluster_cost="travel")
    df, _ = _frame()
    df.loc[0:4, "travel"] = -1
    with pytest.raises(InputError, match="negative"):
        Frame.from_dataframe(df, target="y", cluster="block", cluster_cost="travel")
    with pytest.raises(InputError, match="needs a cluster column"):
        Frame.from_dataframe(_frame()[0], target="y", cluster_cost="travel")
    df, _ = _frame()
    df["travel"] = df["travel"].astype(object)
    df.loc[2, "travel"] = "far"
    with pytest.raises(InputError, match="non-numeric"):
        Frame.from_dataframe(df, target="y", cluster="block", cluster_cost="travel")


def test_unknown_stratum_in_rates_is_refused_with_a_hint():
    _, f = _frame()
    with pytest.raises(InputError, match=r"stratum 'nort' .*did you mean 'north'"):
        CostModel(per_unit_by_stratum=(("nort", 3.0),)).bind(f)


def _doc(**extra):
    return {"frame": {"synthetic": {"units": 200}}, "design": [{"label": "s", "method": "srs", "n": 10}], **extra}


@pytest.mark.parametrize("extra,word", [
    ({"cost": {"per_unit_by_stratum": 3.0}}, "per_unit_by_stratum"),
    ({"cost": {"per_unit_by_stratum": {"a": -1.0}}}, "at least 0"),
    ({"cost": {"charge_touched_clusters": "yes"}}, "true or false"),
    ({"cost": {"per_unti": 3.0}}, "did you mean 'per_unit'"),
    ({"goal": {}}, "moe"),
    ({"goal": {"moe": 0.0}}, "above 0"),
    ({"goal": {"budget": -5.0}}, "budget"),
    ({"goal": {"moe": 1.0, "confidence": 1.5}}, "confidence"),
    ({"goal": {"moe": 1.0, "variable": "z"}}, "not a target"),
    ({"goal": {"margin": 1.0}}, "unknown key"),
])
def test_scenario_cost_and_goal_checks(extra, word):
    with pytest.raises(InputError, match=word):
        scenario_from_dict(_doc(**extra))


def test_cost_optimal_copy_keeps_other_design_attributes():
    # the run plan (build_plan) hands the model's c_h to an optimal stratified design through with_params;
    # attributes set after construction (e.g. a non-response adjustment) must survive
    _, f = _frame()
    d = Stratified("opt", n=12, allocation="optimal")
    d.adjustment = "kept"
    d.n_h(f)  # fills the per-frame memo
    e = CostModel(per_unit=2.0, per_unit_by_stratum=(("north", 8.0),)).for_design(d, f)
    assert e is not d and e.adjustment == "kept"
    assert e.stratum_costs == (2.0, 8.0, 2.0) and d.stratum_costs is None
    assert e.n_h(f).tolist() == allocate(12, "optimal", f.N_h, np.sqrt(f.stratum_S2()[:, 0]),
                                         [2.0, 8.0, 2.0]).tolist()

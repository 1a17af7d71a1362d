"""Stratified designs whose strata are bands of a numeric column cut by explicit boundaries."""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from samplewright import Frame, run, scenario_from_dict
from samplewright.cli.main import main
from samplewright.designs import Stratified
from samplewright.designs.allocation import allocate
from samplewright.errors import InputError


def small_frame() -> Frame:
    """12 units: an employee count (the size column) and a turnover (the target), invented."""
    emp = np.array([1, 2, 2, 3, 4, 5, 6, 8, 9, 12, 20, 35], dtype=float)
    y = np.array([3.0, 5, 4, 9, 10, 14, 13, 22, 25, 30, 61, 90])
    df = pd.DataFrame({"y": y, "emp": emp, "vat": 2 * emp + 1})
    return Frame.from_dataframe(df, target="y", size="emp", auxiliary="vat")


def cochran_5_6(y, codes, n_h):
    """Variance of the stratified mean, sum W_h^2 S_h^2 (1 - n_h/N_h) / n_h (Cochran 1977, eq. 5.6)."""
    N = y.size
    v = 0.0
    for h, n in enumerate(n_h):
        yh = y[codes == h]
        v += (yh.size / N) ** 2 * yh.var(ddof=1) * (1 - n / yh.size) / n
    return v


def exact_variance(design, frame):
    """Variance of the HT mean over every possible sample (exact enumeration)."""
    est, prob = [], []
    for block, p in design.enumerate(frame):
        w = np.broadcast_to(block.weight, block.sums.shape[:2])
        est.append((w * block.sums[..., 0]).sum(axis=1) / frame.N)
        prob.append(p)
    est, prob = np.concatenate(est), np.concatenate(prob)
    assert prob.sum() == pytest.approx(1.0)
    mean = float(prob @ est)
    assert mean == pytest.approx(float(frame.mean[0]))  # HT is unbiased (exact)
    return float(prob @ (est - mean) ** 2)


@pytest.mark.parametrize("allocation", ["proportional", "neyman", "equal"])
def test_bands_exact_variance_is_cochran_5_6(allocation):
    frame = small_frame()
    d = Stratified("bands", n=6, allocation=allocation, boundaries=[3, 8])
    d.check(frame)
    codes = np.searchsorted([3.0, 8.0], frame.size, side="left")  # b_h < x <= b_{h+1}
    assert np.bincount(codes).tolist() == [4, 4, 4]
    n_h = d.n_h(frame)
    assert n_h.sum() == 6 and (n_h >= 2).all()
    # exact enumeration against Cochran (1977) eq. 5.6
    assert exact_variance(d, frame) == pytest.approx(cochran_5_6(frame.y[:, 0], codes, n_h), rel=1e-12)


def test_take_all_band_is_taken_whole_and_adds_no_variance():
    frame = small_frame()
    d = Stratified("ta", n=7, allocation="proportional", boundaries=[4, 12], take_all=True)
    d.check(frame)
    codes = np.searchsorted([4.0, 12.0], frame.size, side="left")
    n_h = d.n_h(frame)
    assert n_h.tolist()[-1] == 2 and n_h.sum() == 7  # the 2 units above 12 taken whole
    pi = d.inclusion_probabilities(frame)
    assert (pi[codes == 2] == 1.0).all()
    # Cochran (1977) eq. 5.6 with the take-all term (1 - n_h / N_h) = 0
    assert exact_variance(d, frame) == pytest.approx(cochran_5_6(frame.y[:, 0], codes, n_h), rel=1e-12)


def test_bands_on_an_auxiliary_column():
    frame = small_frame()
    d = Stratified("aux", n=6, boundaries=[7.0, 17.0], stratify_by="vat")  # vat = 2 emp + 1: the same cut
    d.check(frame)
    assert d.strata_frame(frame).stratum.tolist() == Stratified("e", n=6, boundaries=[3, 8]).strata_frame(
        frame).stratum.tolist()


@pytest.mark.parametrize("params, match", [
    ({"boundaries": [8, 3]}, "boundaries must increase"),
    ({"boundaries": []}, "non-empty list"),
    ({"boundaries": ["a"]}, "finite numbers"),
    ({"boundaries": [1.5]}, "stratum 1 of 2 with 1 unit"),
    ({"boundaries": [3], "stratify_by": "nope"}, "stratify_by = 'nope'"),
    ({"take_all": True}, "take_all is given but boundaries"),
    ({"boundaries": [3, 8], "take_all": True, "n": 5}, "needs n >= 8"),
])
def test_bad_boundaries_are_refused(params, match):
    d = Stratified("bad", **{"n": 6, **params})
    with pytest.raises(InputError, match=match):
        d.check(small_frame())


def test_run_and_draw_refuse_with_one_error_line(tmp_path, capsys):
    small = pd.DataFrame({"y": small_frame().y[:, 0], "emp": small_frame().size})
    small.to_csv(tmp_path / "f.csv", index=False)
    (tmp_path / "s.toml").write_text('[frame]\npath = "f.csv"\ntarget = "y"\nsize = "emp"\n\n[[design]]\n'
                                     'label = "cut"\nmethod = "stratified"\nn = 6\nboundaries = [8, 3]\n')
    code = main(["run", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--replicates", "20"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith("error:") and "boundaries must increase" in err[0]


def test_run_and_draw_a_banded_design(tmp_path, capsys):
    small = pd.DataFrame({"y": small_frame().y[:, 0], "emp": small_frame().size})
    small.to_csv(tmp_path / "f.csv", index=False)
    (tmp_path / "s.toml").write_text('[frame]\npath = "f.csv"\ntarget = "y"\nsize = "emp"\n\n[[design]]\n'
                                     'label = "cut"\nmethod = "stratified"\nn = 7\nboundaries = [4, 12]\n'
                                     'take_all = true\n')
    assert main(["run", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--replicates", "50"]) == 0
    alloc = pd.read_csv(tmp_path / "o" / "allocation.csv")
    assert alloc["stratum"].tolist() == ["emp <= 4", "emp in (4, 12]", "emp > 12 (take-all)"]
    assert alloc["sample_units"].tolist() == [3, 2, 2]
    assert main(["draw", str(tmp_path / "s.toml"), "--design", "cut", "--out", str(tmp_path / "d.csv")]) == 0
    capsys.readouterr()
    sample = pd.read_csv(tmp_path / "d.csv")
    assert sorted(sample.loc[sample["stratum"] == "emp > 12 (take-all)", "emp"]) == [20.0, 35.0]


def test_cost_optimal_bands_take_unit_costs_from_the_frames_stratum_rates():
    # [cost.per_unit_by_stratum] is by the frame's own strata; a band's c_h is the mean rate of its units
    # (Cochran 1977, sec. 5.5: n_h proportional to N_h S_h / sqrt(c_h)), here computed by hand
    rng = np.random.default_rng(4)
    emp = np.round(rng.lognormal(2.0, 0.8, 400), 1)
    region = np.where(rng.random(400) < np.clip(emp / 20, 0.05, 0.95), "south", "north")  # south: larger firms
    y = 5 * emp + rng.normal(0, 4 + emp, 400)
    df = pd.DataFrame({"y": y, "emp": emp, "region": region})
    doc = {"frame": {"path": "f.csv", "target": "y", "size": "emp", "stratum": "region"},
           "cost": {"per_unit": 10.0, "per_unit_by_stratum": {"south": 40.0}},
           "design": [{"label": "cut", "method": "stratified", "n": 60, "allocation": "optimal",
                       "boundaries": [5.0, 12.0]}]}
    with tempfile.TemporaryDirectory() as d:
        df.to_csv(Path(d) / "f.csv", index=False)
        res = run(scenario_from_dict(doc, base=d), replicates=20, seed=1)
    codes = np.searchsorted([5.0, 12.0], emp, side="left")
    rate = np.where(region == "south", 40.0, 10.0)
    c_h = np.array([rate[codes == h].mean() for h in range(3)])
    S_h = np.array([y[codes == h].std(ddof=1) for h in range(3)])
    want = allocate(60, "optimal", np.bincount(codes), S_h, c_h)
    assert res.allocation["sample_units"].tolist() == want.tolist()

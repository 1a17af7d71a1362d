"""samplewright draw: the real sample, its selection record and the replay.

Checks against sources outside the project:
- inclusion frequencies over many seeded draws against each unit's pi_i, by the normal
  approximation to the binomial: |count - D pi| <= 4.5 sqrt(D pi (1 - pi)) (Bonferroni over the
  few hundred unit checks here keeps the family-wise error below 0.3%; the seeds are fixed);
- sum over the sample of the design weights: Horvitz-Thompson (1952) unbiased for N (Sarndal,
  Swensson & Wretman 1992, result 2.8.1; Hansen-Hurwitz for with-replacement designs, Cochran
  1977, sec. 9A.3), exactly N for SRS and stratified SRS (N_h / n_h summed over n_h units);
- a reserve list that extends the sample in random order: the first n + j of one random
  order is a simple random sample of size n + j, pi = (n + j) / N (Cochran 1977, sec. 2.2).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from samplewright import draw
from samplewright.cli.main import main
from samplewright.simulation.scenario import load_scenario, scenario_from_dict
from samplewright.simulation.selection import _bound_design, select

DRAWS = 2000
Z = 4.5


def _frame_df() -> pd.DataFrame:
    """16 units, two strata of 8, six clusters (sizes 3, 3, 2 in each stratum), one unit with a large size."""
    cluster = [0, 0, 0, 1, 1, 1, 2, 2, 3, 3, 3, 4, 4, 4, 5, 5]
    return pd.DataFrame({"unit": [f"u{i:02d}" for i in range(16)], "y": np.arange(16) * 3.0 + (np.arange(16) % 5),
                         "zone": ["A"] * 8 + ["B"] * 8, "plot": [f"p{c}" for c in cluster],
                         "x": list(range(1, 16)) + [40]})


DESIGNS = [
    {"label": "srs", "method": "srs", "n": 4},
    {"label": "srs wr", "method": "srs", "n": 4, "replace": True},
    {"label": "strat equal", "method": "stratified", "n": 6, "allocation": "equal"},
    {"label": "strat prop", "method": "stratified", "n": 7, "allocation": "proportional"},
    {"label": "strat neyman", "method": "stratified", "n": 6, "allocation": "neyman"},
    {"label": "strat optimal", "method": "stratified", "n": 6, "allocation": "optimal"},
    {"label": "sys linear", "method": "systematic", "n": 5},
    {"label": "sys circular", "method": "systematic", "n": 5, "kind": "circular"},
    {"label": "sys two starts", "method": "systematic", "n": 4, "starts": 2},
    {"label": "sys sorted", "method": "systematic", "n": 4, "sort_by": "x", "variance": "between_starts",
     "starts": 2},
    {"label": "cluster one", "method": "cluster", "clusters": 2},
    {"label": "cluster two", "method": "cluster", "clusters": 3, "units_per_cluster": 2, "cap_units": True},
    {"label": "sc srs", "method": "stratified_cluster", "clusters": 4},
    {"label": "sc pps two", "method": "stratified_cluster", "clusters": 4, "selection": "pps",
     "units_per_cluster": 2, "cap_units": True},
    {"label": "pps wr", "method": "pps", "n": 3, "replace": True},
    {"label": "pps sys", "method": "pps_systematic", "n": 4},
    {"label": "sampford", "method": "sampford", "n": 4},
    {"label": "poisson", "method": "poisson", "n": 4},
    {"label": "bernoulli", "method": "bernoulli", "n": 4},
]
#: Pareto's actual pi_i only approximate its lambda_i (Rosen 1997), so its frequencies are not held to them
PARETO = {"label": "pareto", "method": "pareto", "n": 4}


@pytest.fixture(scope="module")
def scenario_file(tmp_path_factory):
    folder = tmp_path_factory.mktemp("draw")
    _frame_df().to_csv(folder / "frame.csv", index=False)
    lines = ['title = "draw tests"', "[frame]", 'path = "frame.csv"', 'target = "y"', 'stratum = "zone"',
             'cluster = "plot"', 'size = "x"', 'id = "unit"']
    for d in DESIGNS + [PARETO, {"label": "sweep", "method": "srs", "n": [3, 5]},
                        {"label": "two stage one", "method": "cluster", "clusters": 3, "units_per_cluster": 1}]:
        lines.append("[[design]]")
        lines += [f"{k} = {json.dumps(v)}" for k, v in d.items()]
    path = folder / "scenario.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def _frequencies(scenario, label, reserve=0, prefix=None):
    """Times each unit is in the main sample (or in its first ``prefix`` rows, or with its reserves)
    over DRAWS seeded draws, the sample's pi column, and each draw's sum of design weights."""
    frame, design = _bound_design(scenario, label, None)
    counts = np.zeros(frame.N)
    pi_seen = np.full(frame.N, np.nan)
    sums = []
    for seed in range(DRAWS):
        sel = select(frame, design, seed, reserve)
        cols = sel.columns
        main = ~cols["reserve"]
        sums.append(cols["design_weight"][main].sum())
        rows = slice(None) if reserve and prefix is None else (main if prefix is None else slice(0, prefix))
        counts[np.unique(sel.units[rows])] += 1
        pi_seen[sel.units] = cols["inclusion_probability"]
    return frame, design, counts, pi_seen, np.array(sums)


def _assert_binomial(counts, pi, what):
    """Normal approximation to the binomial, unit by unit; pi = 0 or 1 must be met exactly."""
    sd = np.sqrt(DRAWS * pi * (1 - pi))
    exact = (pi == 0) | (pi == 1)
    assert np.all(counts[exact] == DRAWS * pi[exact]), what
    z = np.abs(counts - DRAWS * pi)[~exact] / sd[~exact]
    assert z.max(initial=0) <= Z, f"{what}: largest |z| {z.max():.2f}"


@pytest.mark.parametrize("spec", DESIGNS, ids=[d["label"] for d in DESIGNS])
def test_inclusion_frequencies_match_pi(scenario_file, spec):
    sc = load_scenario(scenario_file)
    frame, design, counts, pi_seen, sums = _frequencies(sc, spec["label"])
    pi = design.inclusion_probabilities(frame)
    _assert_binomial(counts, pi, spec["label"])
    seen = ~np.isnan(pi_seen)
    assert np.array_equal(pi_seen[seen], pi[seen])  # the file's pi is the design's
    # Horvitz-Thompson / Hansen-Hurwitz: the weights' sum is unbiased for N (4 Monte Carlo SEs)
    mcse = sums.std(ddof=1) / np.sqrt(DRAWS)
    assert abs(sums.mean() - frame.N) <= 4 * mcse + 1e-9, (sums.mean(), mcse)


@pytest.mark.parametrize("label", ["srs", "strat equal", "strat prop", "strat neyman", "strat optimal",
                                   "sys linear", "sys circular"])
def test_weights_sum_to_N_exactly(scenario_file, label):
    """N / n over n units (SRS, systematic with one start) or N_h / n_h over each stratum: exactly N."""
    sample = draw(load_scenario(scenario_file), label, seed=3)
    assert sample["design_weight"].sum() == pytest.approx(16, rel=1e-12)
    assert sample.attrs["selection"]["sum_of_weights"] == pytest.approx(16, rel=1e-12)


def test_two_stage_columns_multiply_to_pi(scenario_file):
    sc = load_scenario(scenario_file)
    for label in ("cluster two", "sc pps two"):
        s = draw(sc, label, seed=5)
        assert np.allclose(s["stage1_probability"] * s["stage2_probability"], s["inclusion_probability"],
                           rtol=1e-12)
        assert np.allclose(s["design_weight"], 1 / s["inclusion_probability"], rtol=1e-12)
        assert {"stratum", "psu"} <= set(s.columns) or label == "cluster two"


def test_with_replacement_rows_have_hits(scenario_file):
    sc = load_scenario(scenario_file)
    for label, n in (("srs wr", 4), ("pps wr", 3)):
        s = draw(sc, label, seed=11)
        assert s["unit"].is_unique and s["hits"].sum() == n
    s = draw(sc, "srs wr", seed=11)
    assert np.allclose(s["design_weight"], s["hits"] * 16 / 4)  # hits / (n p_i), p_i = 1 / N


def test_certainty_unit_is_flagged_and_recorded(scenario_file):
    s = draw(load_scenario(scenario_file), "sampford", seed=2)
    row = s[s["unit"] == "u15"]  # n x / X = 4 * 40 / 160 = 1: taken with certainty
    assert len(row) == 1 and bool(row["certainty"].iloc[0]) and row["design_weight"].iloc[0] == 1.0
    assert s.attrs["selection"]["certainty_units"] == [{"selection_order": int(row["selection_order"].iloc[0]),
                                                        "id": "u15"}]


def test_random_size_gives_the_size_drawn(scenario_file):
    sizes = {len(draw(load_scenario(scenario_file), "bernoulli", seed=s)) for s in range(12)}
    assert len(sizes) > 1


@pytest.mark.parametrize("label,reserve,larger", [
    ("srs", 3, lambda f: np.full(16, 7 / 16)),
    ("strat equal", 2, lambda f: np.full(16, 5 / 8)),
    ("two stage one", 1, lambda f: 3 / 6 * 2 / f.cluster_sizes[f.cluster]),
])
def test_reserves_extend_to_the_larger_design(scenario_file, label, reserve, larger):
    sc = load_scenario(scenario_file)
    frame, design, counts, _, _ = _frequencies(sc, label, reserve)
    _assert_binomial(counts, larger(frame), f"{label} main + reserves")
    for seed in range(20):  # disjoint from the main sample, listed after it
        sel = select(frame, design, seed, reserve)
        main = sel.units[~sel.columns["reserve"]]
        extra = sel.units[sel.columns["reserve"]]
        assert not set(main) & set(extra) and len(set(extra)) == len(extra)
        assert np.all(np.diff(sel.columns["reserve"].astype(int)) >= 0)


def test_first_reserve_extends_srs_in_order(scenario_file):
    """Main sample plus the first reserve only: an SRS of n + 1 (fails if reserves were listed in frame order)."""
    _, _, counts, _, _ = _frequencies(load_scenario(scenario_file), "srs", reserve=6, prefix=5)
    _assert_binomial(counts, np.full(16, 5 / 16), "srs main + first reserve")


def _run(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_same_seed_same_bytes_and_check(scenario_file, tmp_path, capsys):
    for suffix in ("csv", "parquet"):
        files = []
        for name in ("a", "b"):
            out = tmp_path / f"{name}_{suffix}.{suffix}"
            code, _, err = _run(["draw", str(scenario_file), "--design", "strat prop", "--seed", "42",
                                 "--reserve", "1", "--out", str(out)], capsys)
            assert code == 0, err
            files.append(out.read_bytes())
        assert files[0] == files[1]
        code, out, _ = _run(["draw", "--check", str(tmp_path / f"a_{suffix}.json")], capsys)
        assert code == 0 and out.startswith("ok: ") and out.count("\n") == 1


def test_check_catches_an_edited_sample_and_a_changed_scenario(scenario_file, tmp_path, capsys):
    out = tmp_path / "s.csv"
    assert _run(["draw", str(scenario_file), "--design", "sampford", "--seed", "9", "--out", str(out)], capsys)[0] == 0
    text = out.read_text().splitlines()
    cells = text[2].split(",")
    cells[-3] = "2.5"  # design_weight of data row 2
    out.write_text("\n".join(text[:2] + [",".join(cells)] + text[3:]) + "\n")
    code, _, err = _run(["draw", "--check", str(tmp_path / "s.json")], capsys)
    assert code == 2 and err.startswith("error:") and "data row 2, column 'design_weight'" in err
    assert err.count("\n") == 1
    # a scenario changed after the draw: refused, naming the file
    copy = tmp_path / "scenario.toml"
    copy.write_text(scenario_file.read_text())
    (tmp_path / "frame.csv").write_bytes((scenario_file.parent / "frame.csv").read_bytes())
    out2 = tmp_path / "t.csv"
    assert _run(["draw", str(copy), "--design", "srs", "--seed", "1", "--out", str(out2)], capsys)[0] == 0
    copy.write_text(copy.read_text().replace("draw tests", "draw tests, edited"))
    code, _, err = _run(["draw", "--check", str(tmp_path / "t.json")], capsys)
    assert code == 2 and "scenario file" in err and "changed since the draw" in err


def test_seed_from_entropy_is_printed_and_recorded(scenario_file, tmp_path, capsys):
    out = tmp_path / "e.csv"
    code, text, _ = _run(["draw", str(scenario_file), "--design", "srs", "--out", str(out)], capsys)
    assert code == 0
    seed = int(text.split("seed: ")[1].split()[0])
    record = json.loads((tmp_path / "e.json").read_text())
    assert record["seed"] == seed and f"--seed {seed}" in record["command"]
    assert _run(["draw", "--check", str(tmp_path / "e.json")], capsys)[0] == 0


@pytest.mark.parametrize("args,words", [
    (["--design", "nope"], "is not in the scenario"),
    (["--design", "sweep"], "choose one with --size"),
    (["--design", "sweep", "--size", "4"], "is not one of its sizes"),
    (["--design", "srs", "--reserve", "13"], "--reserve 13 is more than the 12"),
    (["--design", "strat equal", "--reserve", "6"], "stratum"),
    (["--design", "sampford", "--reserve", "1"], "cannot have reserves"),
])
def test_bad_input_one_error_line(scenario_file, tmp_path, capsys, args, words):
    code, _, err = _run(["draw", str(scenario_file), *args, "--out", str(tmp_path / "x.csv")], capsys)
    assert code == 2 and err.startswith("error:") and err.count("\n") == 1 and words in err, err
    assert not (tmp_path / "x.csv").exists() and not (tmp_path / "x.json").exists()


def test_existing_out_needs_force(scenario_file, tmp_path, capsys):
    out = tmp_path / "x.csv"
    out.write_text("keep me\n")
    code, _, err = _run(["draw", str(scenario_file), "--design", "srs", "--out", str(out)], capsys)
    assert code == 2 and "exists; use --force" in err and out.read_text() == "keep me\n"
    assert _run(["draw", str(scenario_file), "--design", "srs", "--out", str(out), "--force"], capsys)[0] == 0


def test_api_record_in_attrs():
    sc = scenario_from_dict({"frame": {"synthetic": {"units": 300, "seed": 4}},
                             "design": [{"label": "simple", "method": "srs", "n": 30}]})
    s = draw(sc, "simple", seed=8)
    rec = s.attrs["selection"]
    assert rec["seed"] == 8 and rec["variance_estimator"] == "psu" and rec["strata"][0]["sample_units"] == 30
    assert list(s.columns[-5:]) == ["selection_order", "inclusion_probability", "design_weight", "certainty",
                                    "reserve"]
    assert draw(sc, "simple", seed=8).equals(s)


def _pareto_pi(lam: np.ndarray, n: int) -> np.ndarray:
    """Exact inclusion probabilities of Pareto order sampling by its order-statistics integral.

    Unit i's ranking key Q_i = [U_i / (1 - U_i)] / theta_i, theta_i = lambda_i / (1 - lambda_i), has
    P(Q_i <= t) = t theta_i / (1 + t theta_i); unit i is in the sample when fewer than n of the
    others have keys below its own, so pi_i = int_0^inf f_i(t) P(#{j != i: Q_j <= t} <= n - 1) dt
    (Aires 1999, Methodology and Computing in Applied Probability 1:457-469; cited from memory).
    """
    from scipy.integrate import quad

    theta = lam / (1 - lam)

    def below(t, others, k):  # Poisson-binomial P(at most k of ``others`` below t), by recursion over units
        p = t * theta[others] / (1 + t * theta[others])
        dist = np.zeros(len(others) + 1)
        dist[0] = 1.0
        for q in p:
            dist[1:] = dist[1:] * (1 - q) + dist[:-1] * q
            dist[0] *= 1 - q
        return dist[:k + 1].sum()

    def density(s, i, others):  # t = s / (1 - s) maps (0, inf) onto (0, 1), keeping quad on a finite interval
        t = s / (1 - s)
        return theta[i] / (1 + t * theta[i]) ** 2 * below(t, others, n - 1) / (1 - s) ** 2

    out = []
    for i in range(lam.size):
        others = np.delete(np.arange(lam.size), i)
        out.append(quad(density, 0, 1, args=(i, others), limit=200, epsabs=1e-10)[0])
    return np.array(out)


def test_pareto_frequencies_match_its_exact_pi(scenario_file):
    """Pareto's weights are 1 / lambda_i (its target pi); its draws are held to its exact pi."""
    sc = load_scenario(scenario_file)
    frame, design, counts, pi_seen, _ = _frequencies(sc, "pareto")
    s = design.setup(frame)
    pi = np.ones(frame.N)  # the certainty unit (n x / X = 1) is always in
    pi[s["free"]] = _pareto_pi(s["pi_free"], s["n_free"])
    assert abs(pi.sum() - 4) < 1e-6  # a fixed-size design: the pi sum to n
    _assert_binomial(counts, pi, "pareto")
    seen = ~np.isnan(pi_seen)
    assert np.array_equal(pi_seen[seen], design.inclusion_probabilities(frame)[seen])


def test_rows_left_out_by_missing_drop_stay_out(tmp_path):
    """A frame with missing = "drop": the sample's rows are the frame's units, values as in the file."""
    pd.DataFrame({"id": ["a", "b", "c", "d", "e"], "y": [1, None, 3, 4, 5]}).to_csv(tmp_path / "f.csv", index=False)
    sc = scenario_from_dict({"frame": {"path": "f.csv", "target": "y", "id": "id", "missing": "drop"},
                             "design": [{"label": "all", "method": "srs", "n": 4}]}, base=tmp_path)
    s = draw(sc, "all", seed=1)
    assert sorted(s["id"]) == ["a", "c", "d", "e"]
    assert dict(zip(s["id"], s["y"])) == {"a": 1, "c": 3, "d": 4, "e": 5}
    assert (s["inclusion_probability"] == 1.0).all() and s["certainty"].all()


def test_check_refuses_a_damaged_or_edited_record(scenario_file, tmp_path, capsys):
    out = tmp_path / "r.csv"
    assert _run(["draw", str(scenario_file), "--design", "strat equal", "--seed", "4", "--out", str(out)],
                capsys)[0] == 0
    rec = tmp_path / "r.json"
    record = json.loads(rec.read_text())
    edited = {**record, "sum_of_weights": 17.0}
    rec.write_text(json.dumps(edited))
    code, _, err = _run(["draw", "--check", str(rec)], capsys)
    assert code == 2 and "field 'sum_of_weights'" in err and err.count("\n") == 1
    for bad in ("not json", json.dumps({**record, "seed": "4"}),
                json.dumps({**record, "sample": {**record["sample"], "file": "../r.csv"}})):
        rec.write_text(bad)
        code, _, err = _run(["draw", "--check", str(rec)], capsys)
        assert code == 2 and err.startswith("error: selection record") and err.count("\n") == 1, err

"""`samplewright inspect`: the frame report, its JSON keys and its refusals.

Stratum and cluster figures are checked against pandas group-bys (a general-purpose
reference library); the ICC against the ANOVA estimator written out here from its formula
(Donner 1986, Int. Stat. Review 54:67-82).  Frames are invented for exercising the command.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from samplewright.cli.main import main


@pytest.fixture
def cyclic_csv(tmp_path):
    """Hourly counts over 100 days with a daily cycle, in shuffled file order with an hour column."""
    rng = np.random.default_rng(12)
    hours = np.arange(2400)
    y = 100 + 40 * np.sin(2 * np.pi * hours / 24) + rng.normal(0, 10, hours.size)
    df = pd.DataFrame({"hour": hours, "count": y, "shift": np.where(hours % 24 < 12, "day", "night"),
                       "day": hours // 24, "half": np.where(hours < 1200, "first", "second")})
    df = df.sample(frac=1.0, random_state=3).reset_index(drop=True)
    df.loc[7, "count"] = np.nan
    path = tmp_path / "gate.csv"
    df.to_csv(path, index=False)
    return path, df


def _json(capsys, argv):
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def test_json_report_flags_the_planted_period(cyclic_csv, capsys):
    path, _ = cyclic_csv
    rep = _json(capsys, ["inspect", str(path), "--target", "count", "--order", "hour", "--json"])
    assert {"periods", "unsafe_intervals", "units", "missing", "strata", "clusters", "autocorrelation"} <= set(rep)
    assert rep["units"] == 2399 and rep["rows_dropped"] == 1 and rep["missing"] == {"count": 1}
    top = rep["periods"][0]
    assert set(top) >= {"period", "strength"}
    assert abs(top["period"] - 24) < 24**2 / 2399  # within one Fourier bin
    strengths = [p["strength"] for p in rep["periods"]]
    assert strengths == sorted(strengths, reverse=True)
    # a sinusoid: k = P and 2P are unsafe; k = P / 2 is not (two points per cycle cancel it)
    assert {24, 48} <= set(rep["unsafe_intervals"]) and not {12, 25} & set(rep["unsafe_intervals"])
    assert all(d["interval"] in rep["unsafe_intervals"] for d in rep["unsafe_detail"])


def test_file_order_shuffled_shows_no_period(cyclic_csv, capsys):
    """Without --order the list is the shuffled file order: the cycle is gone from the list."""
    path, _ = cyclic_csv
    rep = _json(capsys, ["inspect", str(path), "--target", "count", "--json", "--false-alarm", "0.001"])
    assert rep["periods"] == [] and rep["unsafe_intervals"] == []
    assert rep["fisher_p"] > 0.001


def test_strata_and_clusters_match_pandas(cyclic_csv, capsys):
    path, df = cyclic_csv
    rep = _json(capsys, ["inspect", str(path), "--target", "count", "--stratum", "half", "--cluster", "day",
                         "--json"])
    d = df.dropna(subset=["count"])
    g = d.groupby("half")["count"]
    for s in rep["strata"]:
        assert s["units"] == g.size()[s["stratum"]]
        assert s["mean"] == pytest.approx(g.mean()[s["stratum"]], rel=1e-12)
        assert s["sd"] == pytest.approx(g.std(ddof=1)[s["stratum"]], rel=1e-12)
    sizes = d.groupby("day").size()
    c = rep["clusters"]
    assert c["clusters"] == 100 and c["size_min"] == sizes.min() and c["size_max"] == sizes.max()
    # ANOVA ICC within strata by hand (days nested in halves): (MSB - MSW) / (MSB + (m0 - 1) MSW) with
    # MSB = sum M_hc (ybar_hc - ybar_h)^2 / (C - H), m0 = (N - sum_h sum_c M_hc^2 / N_h) / (C - H)
    # (one-way nested classification; Searle, Casella and McCulloch 1992, from memory)
    y = d["count"].to_numpy()
    cl = d.groupby(["half", "day"])["count"].agg(["size", "mean"]).reset_index()
    st = d.groupby("half")["count"].agg(["size", "mean"])
    M, N, C, H = cl["size"].to_numpy(float), len(y), len(cl), len(st)
    msb = np.sum(M * (cl["mean"].to_numpy() - st["mean"].loc[cl["half"]].to_numpy()) ** 2) / (C - H)
    msw = np.sum((y - d.groupby("day")["count"].transform("mean").to_numpy()) ** 2) / (N - C)
    m0 = (N - np.sum(M**2 / st["size"].loc[cl["half"]].to_numpy())) / (C - H)
    assert c["icc"] == pytest.approx((msb - msw) / (msb + (m0 - 1) * msw), rel=1e-10)


def test_text_report_names_period_and_unsafe_intervals(cyclic_csv, capsys):
    path, _ = cyclic_csv
    assert main(["inspect", str(path), "--target", "count", "--order", "hour", "--stratum", "shift"]) == 0
    out = capsys.readouterr().out
    assert "strata (2)" in out and "unsafe systematic intervals k: " in out and "Fisher" in out
    line = next(ln for ln in out.splitlines() if ln.startswith("unsafe systematic intervals"))
    assert " 24," in line and " 48," in line


@pytest.mark.parametrize("argv, words", [
    (["--target", "cout"], "target column 'cout' is not in the frame (did you mean 'count'?)"),
    (["--target", "count", "--order", "hours"], "order column 'hours'"),
    (["--target", "count", "--stratum", "shft"], "stratum column 'shft'"),
    (["--target", "count", "--false-alarm", "2"], "strictly between 0 and 1"),
])
def test_bad_input_exits_2_with_one_error_line(cyclic_csv, capsys, argv, words):
    path, _ = cyclic_csv
    assert main(["inspect", str(path), *argv]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and words in err and "Traceback" not in err


def test_missing_file_exits_2(tmp_path, capsys):
    assert main(["inspect", str(tmp_path / "nope.csv"), "--target", "y"]) == 2
    assert "does not exist" in capsys.readouterr().err

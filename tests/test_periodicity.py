"""The list-order period detector, its false-alarm rate, the unsafe-interval rule, and run's warning.

Sources: Fisher (1929, Proc. R. Soc. A 125:54-59) for the exact null distribution of g, the
largest periodogram ordinate's share under Gaussian white noise; the binomial distribution
for false-alarm counts over many seeds (bounds at Z standard errors).  Frames are invented.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy.stats import binomtest

from samplewright import scenario_from_dict
from samplewright.api import run
from samplewright.diagnostics.periodicity import (
    FALSE_ALARM,
    Component,
    OrderReport,
    _fast_length,
    autocorrelation,
    detect_periods,
    fisher_g_pvalue,
    frame_order_report,
    interval_risks,
    unsafe_intervals,
    variance_ratio,
)


# ------------------------------------------------------------------ Fisher's g
@pytest.mark.parametrize("x", [0.5, 0.6, 0.75, 0.9, 0.99])
def test_fisher_pvalue_two_ordinates(x):
    """For m = 2, E1 / (E1 + E2) is uniform, so P(g > x) = 2 (1 - x) for x >= 1/2 (derived)."""
    assert math.isclose(fisher_g_pvalue(x, 2), 2 * (1 - x), rel_tol=1e-12)


@pytest.mark.parametrize("m, x", [(10, 0.45), (50, 0.12), (400, 0.025)])
def test_fisher_pvalue_against_simulated_exponentials(m, x):
    """The tail of max/sum of m iid exponentials, simulated, within a binomial bound."""
    rng = np.random.default_rng(m)
    draws, over = 200_000, 0
    for _ in range(draws // 10_000):  # in chunks: memory O(10,000 m)
        e = rng.exponential(size=(10_000, m))
        over += int((e.max(axis=1) / e.sum(axis=1) > x).sum())
    p = fisher_g_pvalue(x, m)
    assert 0.005 < p < 0.3
    assert abs(over / draws - p) < Z * math.sqrt(p * (1 - p) / draws)


# ------------------------------------------------------------------ detection
@pytest.mark.parametrize("period, amp, sd, N", [(24.0, 2.0, 5.0, 2400), (37.3, 1.5, 3.0, 3000), (7.0, 1.0, 2.0, 700)])
def test_planted_cycle_is_found_in_noise(period, amp, sd, N):
    """Found in every one of 40 seeds, and the refined frequency (in Fourier bins) unbiased: the mean
    error over the seeds lies within Z Monte Carlo SEs of 0."""
    t = np.arange(N)
    errors = []
    for seed in range(40):
        rng = np.random.default_rng(seed)
        y = 50 + 0.002 * t + amp * np.sin(2 * np.pi * t / period + rng.uniform(0, 6.3)) + rng.normal(0, sd, N)
        rep = detect_periods(y)
        assert rep.periods, seed
        errors.append(N / rep.periods[0].period - N / period)
    e = np.array(errors)
    assert abs(e.mean()) < Z * e.std(ddof=1) / math.sqrt(e.size)


def test_two_cycles_strongest_first_and_harmonics_labelled():
    N = 4800
    t = np.arange(N)
    rng = np.random.default_rng(8)
    y = 3 * np.sin(2 * np.pi * t / 48) + 1.5 * np.sin(2 * np.pi * t / 16 + 1) + 2 * np.sin(2 * np.pi * t / 7.5) \
        + rng.normal(0, 1, N)
    rep = detect_periods(y)
    got = [round(p.period, 1) for p in rep.periods]
    assert got[:3] == [48.0, 7.5, 16.0]
    strengths = [p.strength for p in rep.periods]
    assert strengths == sorted(strengths, reverse=True)
    by = {round(p.period, 1): p for p in rep.periods}
    assert by[16.0].harmonic_of == pytest.approx(48.0, abs=0.1)  # 16 = 48 / 3
    assert by[7.5].harmonic_of is None  # 48 / 7.5 = 6.4 is not whole
    # the sinusoid's share of the detrended variance: A^2/2 over the total (1 + 4.5 + 1.125 + 2), within
    # Z SEs: a least-squares coefficient in white noise has variance 2 sigma^2 / N, so by the delta method
    # SE(strength) = A SE(A) / var = 3 sqrt(2 / N) / 8.625
    se = 3 * math.sqrt(2 / N) / 8.625
    assert abs(by[48.0].strength - 4.5 / 8.625) < Z * se


@pytest.mark.parametrize("alpha, N, trend", [(0.05, 500, False), (FALSE_ALARM, 501, False), (0.05, 600, True)])
def test_false_alarm_rate_on_white_noise(alpha, N, trend):
    """On Gaussian white noise (with or without a smooth non-polynomial trend) a period is reported
    at the stated rate: the count over 2000 seeds lies within Z binomial SEs of 2000 alpha."""
    seeds = 2000
    t = np.arange(N) / N
    alarms = 0
    for seed in range(seeds):
        y = np.random.default_rng(10_000 + seed).normal(size=N)
        if trend:
            y = y + 5 * np.sqrt(t)
        alarms += detect_periods(y, alpha=alpha).significant
    assert abs(alarms - seeds * alpha) < Z * math.sqrt(seeds * alpha * (1 - alpha))


def test_autocorrelation_matches_direct_sums_and_fft_lengths_are_smallest_smooth():
    """The FFT autocorrelation (zero padded to a 5-smooth length) equals the direct lagged sums."""
    r = np.random.default_rng(3).normal(size=997)
    r -= r.mean()
    direct = [np.dot(r[:-lag], r[lag:]) / np.dot(r, r) for lag in range(1, 60)]
    assert np.allclose(autocorrelation(r, 59), direct, rtol=0, atol=1e-12)

    def smooth(m):
        for p in (2, 3, 5):
            while m % p == 0:
                m //= p
        return m == 1

    for m in range(1, 500):  # brute force: the smallest 2^a 3^b 5^c >= m
        assert _fast_length(m) == next(x for x in range(m, 2 * m + 2) if smooth(x))


def test_too_short_or_constant_lists_report_nothing():
    assert not detect_periods(np.arange(8.0)).significant
    assert not detect_periods(np.full(500, 3.0)).significant


# ------------------------------------------------------------------ unsafe intervals
def _report(N, components, noise):
    return OrderReport(N=N, alpha=0.01, tested=0, g=0.0, p_value=0.0, components=tuple(components),
                       noise_share=noise)


def test_unsafe_rule_by_hand():
    """A pure sinusoid of period 24 carrying half the variance on N = 8760: R(k) of the module notes,
    term by term.  k = P/2, P/3, P/4 are safe: 2, 3 or 4 points per cycle cancel a sinusoid."""
    N = 8760
    rep = _report(N, [Component(period=24.0, share=0.5, fundamental=24.0)], 0.5)
    flagged = set(unsafe_intervals(rep, k_max=100))
    assert {24, 48, 72, 96} <= flagged  # k = a P: in phase
    assert not ({12, 8, 6, 25, 23, 7, 5, 10, 30} & flagged)
    # k = 12: 12 / 24 = 1/2 cycle per step, D_n = |sin(pi n / 2) / (n sin(pi / 2))| = 0 for even n = 730
    assert variance_ratio(12.0, rep) == pytest.approx(0.5, abs=1e-12)

    def by_hand(k):
        n = round(N / k)
        d = k / 24 - round(k / 24)
        Dn = 1.0 if d == 0 else abs(math.sin(math.pi * n * d) / (n * math.sin(math.pi * d)))
        Dk = abs(math.sin(math.pi * k / 24) / (k * math.sin(math.pi / 24)))
        return 0.5 + 0.5 * n * Dn**2 * (1 - Dk**2) / (1 - n / N)

    for k in (24.0, 24.1, 24.75, 47.0, 13.0):
        assert variance_ratio(k, rep) == pytest.approx(by_hand(k), rel=1e-9)
    risk = interval_risks(24.1, rep)[0]
    assert risk["harmonic"] == 1 and risk["multiple"] == 1 and risk["phases"] == 1
    assert risk["variance_ratio"] == pytest.approx(by_hand(24.1), rel=1e-9)
    # k = 24.75: the phases sweep 11 cycles (D = 0.0054), so the cycle averages out
    assert interval_risks(24.75, rep) == []
    # materiality: share 1e-4 x n 365 x D^2 (= 1) / (1 - 1/24) = 0.038, R = 1.038 < 1.5
    weak = _report(N, [Component(period=24.0, share=1e-4, fundamental=24.0)], 1.0)
    assert interval_risks(24, weak) == []
    # a harmonic h = 2 of share 0.2 flags k = P / 2 = 12 by its own strength: R = 0.8 + 0.2 x 730 x 2
    h = _report(N, [Component(period=12.0, share=0.2, fundamental=24.0, harmonic=2)], 0.8)
    risk = interval_risks(12, h)[0]
    assert risk["period"] == 24.0 and risk["harmonic"] == 2 and risk["phases"] == 2
    assert risk["variance_ratio"] == pytest.approx(0.8 + 0.2 * 730 * 1.0 / (1 - 730 / N), rel=1e-9)


def test_detector_result_is_cached_per_frame():
    sc = scenario_from_dict({"frame": {"synthetic": {"units": 960, "seed": 2, "period": 24, "amplitude": 20}},
                             "design": [{"label": "s", "method": "systematic", "n": 40}]})
    frame = sc.load_frame()
    assert frame_order_report(frame) is frame_order_report(frame)


# ------------------------------------------------------------------ run warns before simulating
def _cyclic(designs, order="random"):
    return scenario_from_dict({
        "frame": {"synthetic": {"units": 2400, "seed": 3, "period": 24, "amplitude": 30, "sd": 10, "order": order}},
        "design": designs,
    })


def test_run_warns_of_an_unsafe_interval_and_records_it(tmp_path):
    sc = _cyclic([{"label": "every 24th", "method": "systematic", "n": 100},
                  {"label": "every 25th", "method": "systematic", "n": 96},
                  {"label": "simple", "method": "srs", "n": 100}])
    said = []
    res = run(sc, replicates=600, seed=1, warn=said.append)
    unsafe = [w for w in said if "unsafe" in w]
    assert len(unsafe) == 1
    assert "'every 24th'" in unsafe[0] and "k = 24" in unsafe[0] and "period 24" in unsafe[0]
    res.write(tmp_path / "out")
    info = json.loads((tmp_path / "out" / "run.json").read_text())
    assert unsafe[0] in info["warnings"]
    s = res.summary.set_index(["design", "estimator"])
    # the failure the warning announces: coverage far below 95% (by more than Z MCSE), not at k = 25
    # exact binomial tests of the 600 interval hits against the nominal 95% (scipy.stats.binomtest)
    hits24 = round(s.loc[("every 24th", "ht"), "coverage"] * 600)
    hits25 = round(s.loc[("every 25th", "ht"), "coverage"] * 600)
    assert binomtest(hits24, 600, 0.95, alternative="less").pvalue < 1e-6
    assert binomtest(hits25, 600, 0.95, alternative="less").pvalue > 1e-4


def test_no_interval_warning_without_a_cycle():
    sc = scenario_from_dict({"frame": {"synthetic": {"units": 2400, "seed": 3}},
                             "design": [{"label": "every 24th", "method": "systematic", "n": 100}]})
    said = []
    run(sc, replicates=50, seed=1, warn=said.append)
    assert not [w for w in said if "unsafe" in w]


def test_tollgate_scenario_shows_the_failure_and_inspect_flags_the_period(capsys):
    """The shipped cycle scenario: k = 24 under-covers far beyond its MCSE and is warned about;
    k = 25 is not warned about and covers; inspect finds the 24-hour period."""
    from pathlib import Path

    from samplewright import load_scenario
    from samplewright.cli.main import main

    here = Path(__file__).resolve().parents[1] / "scenarios"
    sc = load_scenario(here / "tollgate_hours.toml")
    said = []
    res = run(sc, replicates=400, seed=5, warn=said.append)
    unsafe = [w for w in said if "unsafe" in w]
    assert any("'every 24th hour'" in w and "k = 24" in w and "period 24" in w for w in unsafe)
    assert not any("25th" in w for w in unsafe) and not any("sorted by hour" in w for w in unsafe)
    s = res.summary[res.summary.estimator == "ht"].set_index("design")
    bad, good = s.loc["every 24th hour"], s.loc["every 25th hour, successive differences"]
    assert bad["coverage"] + Z * max(bad["coverage_mcse"], math.sqrt(0.05 * 0.95 / 400)) < 0.95
    assert good["coverage"] > 0.95 - Z * math.sqrt(0.05 * 0.95 / 400)
    assert s.loc["every 24th hour, sorted by hour of day", "deff"] < 1
    assert main(["inspect", str(here / "data" / "tollgate_hours.csv"), "--target", "vehicles", "--order", "hour",
                 "--json"]) == 0
    rep = json.loads(capsys.readouterr().out)
    assert abs(rep["periods"][0]["period"] - 24) < 0.1 and 24 in rep["unsafe_intervals"]


# ------------------------------------------------------------------ grouped lists, found by counting
def _contiguous_by_definition(codes) -> bool:
    """Every group's positions form one run (last - first + 1 == its count), and there are several groups."""
    codes = np.asarray(codes)
    groups = {}
    for i, c in enumerate(codes.tolist()):
        first, _, count = groups.get(c, (i, i, 0))
        groups[c] = (first, i, count + 1)
    return len(groups) > 1 and all(last - first + 1 == count for first, last, count in groups.values())


def test_grouped_list_is_found_by_counting_codes():
    from samplewright.diagnostics.periodicity import contiguous_groups

    rng = np.random.default_rng(4)
    cases = [np.repeat([2, 0, 1], [5, 3, 4]), np.repeat([2, 0, 2], [5, 3, 4]), np.zeros(6, dtype=np.int64),
             rng.integers(0, 5, 50), np.repeat(np.arange(40), rng.integers(1, 6, 40)), np.array([3]),
             np.repeat([1, 7], [3, 2]).astype(np.uint8), np.array(["b", "b", "a"]), np.array(["b", "a", "b"])]
    for codes in cases:
        assert contiguous_groups(codes) == _contiguous_by_definition(codes), codes


def test_a_list_grouped_by_stratum_and_cluster_has_one_block_per_cluster():
    # both groupings contiguous: the blocks whose means are removed are the (stratum, cluster) pairs
    # (the partition np.unique gives over the pairs), numbered along the list
    from samplewright.diagnostics.periodicity import list_groups
    from samplewright.population.frame import Frame

    rng = np.random.default_rng(8)
    sizes = rng.integers(2, 6, 30)
    cluster = np.repeat(np.arange(30), sizes)
    df = pd.DataFrame({"y": rng.normal(size=cluster.size), "s": cluster // 10, "c": cluster})
    frame = Frame.from_dataframe(df, target="y", stratum="s", cluster="c")
    got = list_groups(frame, frame.order)
    pairs = np.unique(frame.stratum * 1000 + frame.cluster, return_inverse=True)[1]
    assert np.array_equal(got, pairs)  # here the list order is the sorted order of the pairs
    np.testing.assert_array_equal(np.flatnonzero(np.diff(got)) + 1, np.cumsum(sizes)[:-1])
    shuffled = Frame.from_dataframe(df.sample(frac=1.0, random_state=1), target="y", stratum="s", cluster="c")
    assert list_groups(shuffled, shuffled.order) is None


def test_run_check_skips_the_autocorrelations_but_finds_the_same_periods():
    sc = scenario_from_dict({"frame": {"synthetic": {"units": 960, "seed": 2, "period": 24, "amplitude": 20}},
                             "design": [{"label": "s", "method": "systematic", "n": 40}]})
    quiet = sc.load_frame()
    noise = scenario_from_dict({"frame": {"synthetic": {"units": 960, "seed": 2}},
                                "design": [{"label": "s", "method": "srs", "n": 40}]}).load_frame()
    assert frame_order_report(noise).acf is None and not frame_order_report(noise).significant
    assert frame_order_report(noise, acf=True).acf.shape == (200,)  # asked for: computed (lags 1..200)
    lean, full = frame_order_report(quiet), detect_periods(quiet.y[:, 0], acf=True)
    assert lean.significant and lean.periods == full.periods and lean.components == full.components
    np.testing.assert_array_equal(lean.acf, full.acf)  # a period found: the autocorrelations it reads

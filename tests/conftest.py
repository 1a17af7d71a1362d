"""Shared fixtures: small frames built in code, and helpers for Monte Carlo tolerances."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from samplewright import Frame

#: z-bound for Monte Carlo checks: |simulated - exact| < Z * MCSE.  With a few hundred
#: such checks in the suite, 4.0 keeps the chance of a false failure near 6e-5 per check
#: (normal tail), while fixed seeds make every run reproducible.
Z = 4.0


#: replicates of the shared finished demo run (enough for every table and figure; kept small for time)
DEMO_REPLICATES = 150


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """One finished run of `python -m samplewright demo` (with its report), made once per session.

    For end-to-end tests that only READ a finished run's outputs: they must not write into
    ``demo_run.out`` (copy it first).  Returns the folder and the process's exit code and output.
    """
    import subprocess
    import sys
    from types import SimpleNamespace

    out = tmp_path_factory.mktemp("finished") / "demo"
    proc = subprocess.run([sys.executable, "-m", "samplewright", "demo", "--out", str(out),
                           "--replicates", str(DEMO_REPLICATES)], capture_output=True, text=True, timeout=600,
                          check=False)
    return SimpleNamespace(out=out, returncode=proc.returncode, stdout=proc.stdout, stderr=proc.stderr,
                           replicates=DEMO_REPLICATES)


@pytest.fixture
def small_frame():
    """Twelve units in three strata and six clusters of two (values invented for exercising code)."""
    df = pd.DataFrame({
        "y": [3.0, 7.0, 1.0, 9.0, 4.0, 4.0, 12.0, 2.0, 8.0, 5.0, 6.0, 10.0],
        "band": ["a", "a", "a", "a", "b", "b", "b", "b", "c", "c", "c", "c"],
        "block": [1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6],
    })
    return Frame.from_dataframe(df, target="y", stratum="band", cluster="block")


def mc_tolerance(sd: float, replicates: int, z: float = Z) -> float:
    """z times the Monte Carlo SE of a mean of ``replicates`` draws with standard deviation ``sd``."""
    return z * sd / np.sqrt(replicates)


#: significance level of the exact binomial tests of coverage against the nominal level
COVERAGE_ALPHA = 1e-3


def assert_coverage_is_nominal(hits: int, replicates: int, nominal: float, what: str = "") -> None:
    """Coverage (``hits`` intervals of ``replicates`` holding the truth) against the nominal level.

    An exact two-sided binomial test (scipy.stats.binomtest) at COVERAGE_ALPHA: each replicate's
    interval covers or not, independently, with the true coverage as success probability
    (Morris, White & Crowther 2019, sec. 5, coverage as a binomial proportion).
    """
    from scipy import stats

    p = stats.binomtest(int(hits), int(replicates), nominal).pvalue
    assert p > COVERAGE_ALPHA, (what, hits, replicates, nominal, p)


def simulate_design(frame, design, estimator="ht", replicates=20_000, seed=7, confidence=0.95):
    """Replicate table of one design at one size (blocks of 1000), for checks against exact values."""
    from samplewright.simulation.engine import Cell, replicate_table, simulate
    from samplewright.simulation.plan import RunPlan

    cells = [Cell(design=design, design_index=0, size_index=0, estimators=(estimator,))]
    res = simulate(RunPlan(frame=frame, cells=tuple(cells), replicates=replicates, seed=seed, block_size=1000,
                           confidence=confidence))
    return replicate_table(res, cells, frame.variables)


def assert_matches_exact(reps, samples, truth, confidence=0.95, unbiased=False):
    """Simulated replicates against the exact design distribution of an enumeration.

    ``samples`` lists (probability, estimate, se, df) for every possible sample.  The mean,
    variance, coverage and mean estimated variance of the replicates must agree with the exact
    values within Z Monte Carlo SEs (Morris, White & Crowther 2019, Table 6; the MCSE of a
    sample variance is sqrt((m4 - var^2) / R), from the exact fourth central moment).
    Returns the exact (mean, variance, coverage).
    """
    import math

    from scipy import stats

    p = np.array([s[0] for s in samples])
    assert abs(p.sum() - 1.0) < 1e-12
    est = np.array([s[1] for s in samples])
    se = np.array([s[2] for s in samples])
    q = np.array([stats.t.ppf(0.5 + confidence / 2, s[3]) for s in samples])
    mean = float(p @ est)
    var = float(p @ (est - mean) ** 2)
    m4 = float(p @ (est - mean) ** 4)
    cover_exact = float(p @ ((est - q * se <= truth) & (truth <= est + q * se)))
    if unbiased:
        assert abs(mean - truth) < 1e-9  # HT is exactly unbiased over the design's samples
    x = reps["estimate"].to_numpy()
    n = len(x)
    assert abs(x.mean() - mean) < Z * math.sqrt(var / n) + 1e-12
    assert abs(x.var(ddof=1) - var) < Z * math.sqrt(max(m4 - var**2, 1e-300) / n)
    cover = float(((reps["lower"] <= truth) & (truth <= reps["upper"])).mean())
    assert abs(cover - cover_exact) < Z * math.sqrt(max(cover_exact * (1 - cover_exact), 1 / n) / n)
    v_exact = float(p @ se**2)
    v_sd = math.sqrt(float(p @ (se**2 - v_exact) ** 2))
    assert abs((reps["se"].to_numpy() ** 2).mean() - v_exact) < Z * v_sd / math.sqrt(n) + 1e-12
    return mean, var, cover_exact


#: a small scenario on a CSV frame with two bands, cut into several blocks (resume and block-file tests)
RESUMABLE_SCENARIO = """
seed = 21
replicates = 300
block_size = 100

[frame]
path = "frame.csv"
target = "y"
stratum = "band"

[[design]]
label = "simple"
method = "srs"
n = 20

[[design]]
label = "by band"
method = "stratified"
n = 20
"""


@pytest.fixture
def resumable_scenario_file(tmp_path):
    """RESUMABLE_SCENARIO and its frame written to tmp_path/inputs; the scenario's path."""
    rng = np.random.default_rng(5)
    band = np.repeat(["a", "b"], [150, 90])
    y = np.where(band == "a", 10.0, 30.0) + rng.normal(0, 3, band.size).round(3)
    folder = tmp_path / "inputs"
    folder.mkdir()
    pd.DataFrame({"y": y, "band": band}).to_csv(folder / "frame.csv", index=False)
    (folder / "scenario.toml").write_text(RESUMABLE_SCENARIO)
    return folder / "scenario.toml"


def interrupt_blocks_after(monkeypatch, blocks: int):
    """Make the engine raise KeyboardInterrupt (as Ctrl-C does) when it starts block ``blocks + 1``;
    returns the function that puts the real block runner back."""
    from samplewright.simulation import engine

    real, calls = engine.run_block, {"n": 0}

    def flaky(*a, **k):
        calls["n"] += 1
        if calls["n"] > blocks:
            raise KeyboardInterrupt
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", flaky)
    return lambda: monkeypatch.setattr(engine, "run_block", real)

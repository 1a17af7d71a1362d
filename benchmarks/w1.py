"""Scale benchmark W1, timed as users run it, against a naive pandas loop and a kernel process.

Workload W1: 1,000,000 units in 10 strata and 50,000 clusters of 20; four designs of about
n = 1,000 (SRS, stratified Neyman, systematic, one-stage cluster of 50 clusters); the
Horvitz-Thompson mean with its SE and t interval; 10,000 and 100,000 replicates per design.
The frame is written once to Parquet in a temporary folder and every timed process reads it.

Measured side by side in one run:

- the CLI: ``samplewright run w1.toml --out DIR --no-report`` and the same with the report, as
  child processes timed from start to exit (start-up, reading the frame, checks, simulation,
  evaluation, writing), peak resident memory from the child's own accounting
  (``/usr/bin/time``), at 10,000 and 100,000 replicates (and 1,000,000 without the report for
  memory), and ``--jobs 2`` against ``--jobs 1`` at 100,000; and ``samplewright report`` rebuilding
  the report of the 100,000-replicate run folder (400,000 replicate rows; median of three);
- the kernel process (``w1_kernel.py``): a separate Python process that imports numpy and
  pandas, reads the same Parquet frame and draws indices, gathers and sums, nothing else;
  timed the same way, start to exit;
- a naive pandas loop: one ``DataFrame.sample`` (or a per-stratum / per-cluster sample) per
  replicate with the same estimate, SE and interval, timed on a few replicates and scaled;
- in-process, for the profile: milliseconds per block of 500 of each step (draw, estimate,
  units and cost), and the simulation's cost per replicate against n and N (simulation only:
  no start-up, no frame reading, no writing).

Prints the ratios and writes ``benchmarks/results/w1.json``.
This is a script, not a test: ``python benchmarks/w1.py [--quick]``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from cli_timing import run_cli, save_results, write_scenario
from w1_scenario import w1_doc

from samplewright import Frame
from samplewright.api import run
from samplewright.simulation.scenario import scenario_from_dict


def timed(fn, repeat: int = 1):
    """Best wall time of ``repeat`` calls, and the last result."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


# ------------------------------------------------------------------ the naive loop
def naive_replicate(df, design, rng, info, z):
    """One replicate the way a hand-written pandas loop does it: sample, estimate, SE, interval."""
    N = info["N"]
    if design == "srs":
        s = df.sample(n=1000, random_state=rng)
        n = len(s)
        est = s["y"].mean()
        se = np.sqrt((1 - n / N) * s["y"].var() / n)
        dfree = n - 1
    elif design == "stratified neyman":
        parts = [g.sample(n=int(info["n_h"][h]), random_state=rng)
                 for h, (_, g) in enumerate(df.groupby("stratum", sort=True))]
        s = pd.concat(parts)
        agg = s.groupby("stratum", sort=True)["y"].agg(["mean", "var", "count"])
        W = info["N_h"] / N
        est = float((W * agg["mean"].to_numpy()).sum())
        se = float(np.sqrt((W**2 * (1 - agg["count"].to_numpy() / info["N_h"]) * agg["var"].to_numpy()
                            / agg["count"].to_numpy()).sum()))
        dfree = len(s) - len(agg)
    elif design == "systematic":
        k = N / 1000
        start = rng.uniform(0, k)
        s = df.iloc[np.floor(start + np.arange(1000) * k).astype(int)]
        n = len(s)
        est = s["y"].mean()
        se = np.sqrt((1 - n / N) * s["y"].var() / n)
        dfree = n - 1
    else:  # one-stage cluster
        ids = pd.Series(info["cluster_ids"]).sample(n=50, random_state=rng)
        s = df[df["cluster"].isin(ids)]
        tot = s.groupby("cluster")["y"].sum() * info["C"] / 50
        est = tot.sum() / N
        se = np.sqrt((1 - 50 / info["C"]) * 50 * tot.var()) / N
        dfree = 49
    q = stats.t.ppf(0.5 + z / 2, dfree)
    return est, se, est - q * se, est + q * se


def naive_loop(df, info, replicates: int, per_design: int, seed: int = 1):
    """Seconds per replicate of each design, measured on ``per_design`` replicates."""
    rng = np.random.default_rng(seed)
    out = {}
    for design in ("srs", "stratified neyman", "systematic", "one-stage cluster"):
        naive_replicate(df, design, rng, info, 0.95)  # warm-up
        t = time.perf_counter()
        for _ in range(per_design):
            naive_replicate(df, design, rng, info, 0.95)
        out[design] = (time.perf_counter() - t) / per_design
    return {"seconds_per_replicate": out, "timed_replicates_per_design": per_design,
            "scaled_seconds": sum(out.values()) * replicates}


# ------------------------------------------------------------------ scaling
def srs_scenario(n: int, R: int, units: int = 1000):
    return scenario_from_dict({"seed": 3, "replicates": R, "block_size": 500,
                               "frame": {"synthetic": {"units": units, "seed": 1}},
                               "design": [{"label": "srs", "method": "srs", "n": n, "estimators": ["ht"]}]})


def simple_frame(N: int, seed: int = 4) -> Frame:
    y = np.random.default_rng(seed).normal(100, 20, N)
    return Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")


def stages(sc, frame, B: int = 500, k: int = 10) -> dict:
    """Milliseconds per block of each step of ``run_block``, per design (best of ``k``)."""
    from samplewright.estimation.estimators import sample_units
    from samplewright.estimation.registry import ESTIMATORS
    from samplewright.simulation.engine import make_cells

    cells = make_cells(sc.designs, sc.estimators)
    rng = np.random.default_rng(5)
    out = {}
    for c in cells:
        c.design.check(frame)
        blk = c.design.draw(frame, rng, B)
        est = ESTIMATORS[c.estimators[0]]

        def best(fn):
            return round(min(timed(fn)[0] for _ in range(k)) * 1e3, 2)

        out[c.design.label] = {
            "draw": best(lambda d=c.design: d.draw(frame, rng, B)),
            "estimate_se_ci": best(lambda e=est, b=blk: e(b, frame.N, frame.V, 0.95, frame.layout)),
            "units_and_cost": best(lambda b=blk: (sample_units(b), sc.cost.replicate_cost(b, frame))),
        }
    return out


# ------------------------------------------------------------------ processes
def file_doc(replicates: int) -> dict:
    """W1 as a scenario file reading the Parquet frame (``w1.parquet`` beside it)."""
    doc = w1_doc(replicates)
    doc["frame"] = {"path": "w1.parquet", "target": "y", "stratum": "stratum", "cluster": "cluster", "id": "unit"}
    return doc


def cli(tmp: Path, name: str, replicates: int, *flags: str) -> dict:
    """``samplewright run w1.toml --out DIR [flags]`` as a child process (see ``cli_timing.run_cli``)."""
    path = write_scenario(file_doc(replicates), tmp / f"{name}.toml")
    got = run_cli(["run", str(path), "--out", str(tmp / f"out-{name}"), "--quiet", *flags], log=tmp / f"{name}.log")
    return {"replicates": replicates, "flags": list(flags), **got}


def kernel(tmp: Path, replicates: int, n_h) -> dict:
    """The kernel process (``w1_kernel.py``), timed start to exit like the CLI."""
    log = tmp / f"kernel-{replicates}.log"
    got = run_cli([str(tmp / "w1.parquet"), str(replicates), json.dumps([int(v) for v in n_h])], log=log,
                  python=[sys.executable, str(HERE / "w1_kernel.py")])
    return {"replicates": replicates, **got, **json.loads(log.read_text().strip().splitlines()[-1])}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2,000 and 10,000 replicates instead of 10,000 and 100,000")
    ap.add_argument("--out", default=str(HERE / "results" / "w1.json"))
    args = ap.parse_args(argv)
    quick = args.quick
    R1, R2 = (2000, 10_000) if quick else (10_000, 100_000)
    res: dict = {"workload": "W1", "replicates": [R1, R2], "quick": quick, "machine": {
        "cpus": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
        "load_average_at_start": os.getloadavg()[0],
        "note": "shared 2-core machine; the load average says how busy it was"},
        "timing": "CLI and kernel figures are whole child processes, start to exit (start-up and reading "
                  "the Parquet frame included); peak RSS is the child's own (/usr/bin/time %M)"}

    sc = scenario_from_dict(w1_doc(R1))
    t_frame, frame = timed(sc.load_frame)
    print(f"W1 frame: {frame.N} units, {frame.H} strata, {frame.C} clusters (built in {t_frame:.2f} s)")
    n_h = sc.designs[1].n_h(frame)
    with tempfile.TemporaryDirectory(prefix="w1-") as tmp:
        tmp = Path(tmp)
        sc.frame.dataframe().to_parquet(tmp / "w1.parquet", index=False)
        runs = {}
        for R in (R1, R2):
            runs[f"kernel_{R}"] = kernel(tmp, R, n_h)
            runs[f"cli_no_report_{R}"] = cli(tmp, f"noreport-{R}", R, "--no-report")
            runs[f"cli_report_{R}"] = cli(tmp, f"report-{R}", R)
            for key in (f"kernel_{R}", f"cli_no_report_{R}", f"cli_report_{R}"):
                print(f"{key:<24} {runs[key]['seconds']:>8.2f} s  peak {runs[key]['peak_rss_mib']:>6.0f} MiB",
                      flush=True)
        rebuilds = [run_cli(["report", str(tmp / f"out-report-{R2}")], log=tmp / f"rebuild-{i}.log") for i in range(3)]
        runs[f"report_rebuild_{R2}"] = {"rows": 4 * R2, **sorted(rebuilds, key=lambda r: r["seconds"])[1]}
        print(f"report_rebuild_{R2} (median of 3, {4 * R2} replicate rows) "
              f"{runs[f'report_rebuild_{R2}']['seconds']:.2f} s", flush=True)
        runs[f"cli_no_report_{R2}_jobs2"] = cli(tmp, f"jobs2-{R2}", R2, "--no-report", "--jobs", "2")
        print(f"cli_no_report_{R2}_jobs2 {runs[f'cli_no_report_{R2}_jobs2']['seconds']:.2f} s", flush=True)
        if not quick:
            runs["cli_no_report_1000000"] = cli(tmp, "noreport-1000000", 1_000_000, "--no-report")
            print(f"cli_no_report_1000000 {runs['cli_no_report_1000000']['seconds']:.2f} s  peak "
                  f"{runs['cli_no_report_1000000']['peak_rss_mib']:.0f} MiB", flush=True)
        res["processes"] = runs

    df = sc.frame.dataframe()
    info = {"N": len(df), "N_h": df.groupby("stratum").size().sort_index().to_numpy(), "n_h": n_h,
            "cluster_ids": np.unique(df["cluster"]), "C": frame.C}
    naive = naive_loop(df, info, R2, per_design=5 if quick else 20)
    res["naive"] = naive
    print(f"naive pandas loop: {naive['scaled_seconds']:.0f} s at {R2} replicates, scaled from "
          f"{naive['timed_replicates_per_design']} replicates per design "
          + ", ".join(f"{k} {v * 1e3:.1f} ms" for k, v in naive["seconds_per_replicate"].items()))

    def sec(key):
        return runs[key]["seconds"]

    res["ratios"] = {
        f"cli_no_report_over_kernel_process_{R1}": round(sec(f"cli_no_report_{R1}") / sec(f"kernel_{R1}"), 2),
        f"cli_report_over_kernel_process_{R1}": round(sec(f"cli_report_{R1}") / sec(f"kernel_{R1}"), 2),
        f"cli_no_report_over_kernel_process_{R2}": round(sec(f"cli_no_report_{R2}") / sec(f"kernel_{R2}"), 2),
        f"cli_report_over_kernel_process_{R2}": round(sec(f"cli_report_{R2}") / sec(f"kernel_{R2}"), 2),
        f"naive_over_cli_report_{R2}": round(naive["scaled_seconds"] / sec(f"cli_report_{R2}"), 1),
        f"jobs1_over_jobs2_{R2}": round(sec(f"cli_no_report_{R2}") / sec(f"cli_no_report_{R2}_jobs2"), 2),
    }
    res["cpu_seconds"] = {k: v["cpu_seconds"] for k, v in runs.items()}
    print("ratios (whole processes):", res["ratios"])

    res["stages_ms_per_block_of_500"] = stages(sc, frame)
    print("in-process, ms per block of 500 replicates:", res["stages_ms_per_block_of_500"])
    curve = []
    for n in ([250, 1000] if quick else [250, 500, 1000, 2000, 4000]):
        s = scenario_from_dict({**w1_doc(R1), "design": [{"label": "srs", "method": "srs", "n": n,
                                                        "estimators": ["ht"]}]})
        o = run(s, frame=frame)
        curve.append({"n": n, "us_per_replicate": round(o.info["simulation_seconds"] / R1 * 1e6, 2)})
    res["simulation_only_vs_n"] = curve
    print("in-process simulation only, us per replicate vs n (SRS):", [(c["n"], c["us_per_replicate"]) for c in curve])
    curve = []
    for N in ([10_000, 1_000_000] if quick else [10_000, 100_000, 1_000_000, 4_000_000]):
        o = run(srs_scenario(1000, R1), frame=simple_frame(N))
        curve.append({"N": N, "us_per_replicate": round(o.info["simulation_seconds"] / R1 * 1e6, 2)})
    res["simulation_only_vs_N"] = curve
    print("in-process simulation only, us per replicate vs N (SRS n=1000):",
          [(c["N"], c["us_per_replicate"]) for c in curve])

    peaks = {k: v["peak_rss_mib"] for k, v in runs.items() if k.startswith("cli_")}
    res["targets"] = {
        f"cli_no_report_within_2x_kernel_at_{R1}": res["ratios"][f"cli_no_report_over_kernel_process_{R1}"] <= 2,
        f"cli_report_within_3x_kernel_at_{R2}": res["ratios"][f"cli_report_over_kernel_process_{R2}"] <= 3,
        f"naive_at_least_100x_slower_at_{R2}": res["ratios"][f"naive_over_cli_report_{R2}"] >= 100,
        "peak_rss_below_400_mib": {k: v < 400 for k, v in peaks.items()},
        "jobs2_at_least_1.7x": res["ratios"][f"jobs1_over_jobs2_{R2}"] >= 1.7,
        f"report_of_{4 * R2}_rows_under_3_s": sec(f"report_rebuild_{R2}") < 3.0,
        "dask_within_20pct_of_jobs2": "not measured by this script",
    }
    print("targets met:", res["targets"])
    save_results(res, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())

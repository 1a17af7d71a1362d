"""Benchmark W2, the heavy designs, timed as a user runs them.

Workload W2: an invented frame of 20,000 units in 20 strata and 1,000 clusters of 20 (50 per
stratum) with a lognormal size measure, two auxiliaries and a second margin (region); designs
of n = 2,000: sampford, pareto, pps_systematic, pps with replacement (``method = "pps"``,
``replace = true``), poisson; a two-stage cluster sample (100 clusters x 5 units);
stratified_cluster with pps clusters (100 whole clusters, size-proportional); SRS with GREG on
the two auxiliaries; SRS under logistic non-response with raking on two margins.  10,000
replicates each (``--quick``: 1,000).

Each design is one scenario file in a temporary folder, run as ``samplewright run FILE --out
DIR --no-report --quiet`` in a child process and timed from process start to exit (start-up,
frame reading, checks, simulation, evaluation and writing included; nothing subtracted).  Right
before each design the reference, SRS with the Horvitz-Thompson estimator at n = 2,000 on the
same frame, is run the same way, and the design's cost is printed as a ratio to it (of wall
times, the target; and of CPU seconds, which a busy shared machine stretches less).  Writes
``benchmarks/results/w2.json``.  Usage: ``python benchmarks/w2.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from cli_timing import run_cli, save_results, write_scenario

N, STRATA, CLUSTER_SIZE, n = 20_000, 20, 20, 2000
TARGET_RATIO = 5.0

REFERENCE = {"label": "srs + ht", "method": "srs", "n": n, "estimators": ["ht"]}
DESIGNS = [
    {"label": "sampford", "method": "sampford", "n": n, "estimators": ["ht"]},
    {"label": "pareto", "method": "pareto", "n": n, "estimators": ["ht"]},
    {"label": "pps_systematic", "method": "pps_systematic", "n": n, "estimators": ["ht"]},
    {"label": "pps with replacement", "method": "pps", "n": n, "replace": True, "estimators": ["ht"]},
    {"label": "poisson", "method": "poisson", "n": n, "estimators": ["ht"]},
    {"label": "two-stage cluster 100 x 5", "method": "cluster", "clusters": 100, "units_per_cluster": 5,
     "estimators": ["ht"]},
    {"label": "stratified_cluster, pps clusters", "method": "stratified_cluster", "clusters": 100,
     "selection": "pps", "cluster_size": "size", "estimators": ["ht"]},
    {"label": "srs + greg (x1, x2)", "method": "srs", "n": n, "estimators": ["greg"]},
    {"label": "srs, logistic non-response, raking", "method": "srs", "n": n, "estimators": ["hajek"],
     "adjustment": "raking", "raking_margins": ["stratum", "region"]},
]
RESPONSE = {"model": "logistic", "intercept": 1.0, "coefficients": {"x1": 0.02}}


def make_frame(path: Path, seed: int = 20) -> None:
    """The invented W2 frame as Parquet (units in stratum, cluster order)."""
    rng = np.random.default_rng(seed)
    unit = np.arange(N)
    stratum = unit // (N // STRATA)
    cluster = unit // CLUSTER_SIZE
    size = rng.lognormal(0.0, 0.8, N) * (1.0 + 0.05 * stratum)
    x1 = 50.0 + 10.0 * rng.standard_normal(N) + 2.0 * stratum
    x2 = size * rng.lognormal(0.0, 0.3, N)
    cluster_effect = rng.normal(0.0, 3.0, N // CLUSTER_SIZE)[cluster]
    y = 20.0 + 0.8 * x1 + 4.0 * x2 + cluster_effect + rng.normal(0.0, 5.0, N)
    region = np.array(["north", "south", "east", "west"])[rng.integers(0, 4, N)]
    pd.DataFrame({"unit": unit, "stratum": [f"S{h:02d}" for h in stratum], "cluster": cluster, "size": size,
                  "x1": x1, "x2": x2, "region": region, "y": y}).to_parquet(path, index=False)


def scenario(design: dict, replicates: int) -> dict:
    doc = {"title": f"W2: {design['label']}", "seed": 2027, "replicates": replicates,
           "frame": {"path": "frame.parquet", "target": "y", "stratum": "stratum", "cluster": "cluster",
                     "size": "size", "auxiliary": ["x1", "x2"], "id": "unit"},
           "design": [design]}
    if design.get("adjustment"):
        doc["response"] = RESPONSE
    return doc


def timed_run(tmp: Path, name: str, design: dict, replicates: int) -> dict:
    path = write_scenario(scenario(design, replicates), tmp / f"{name}.toml")
    return run_cli(["run", str(path), "--out", str(tmp / f"out-{name}"), "--no-report", "--quiet", "--force"],
                   log=tmp / f"{name}.log")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1,000 replicates instead of 10,000")
    ap.add_argument("--out", default=str(HERE / "results" / "w2.json"))
    args = ap.parse_args(argv)
    R = 1000 if args.quick else 10_000
    res: dict = {"workload": "W2", "replicates": R, "n": n, "frame": {"units": N, "strata": STRATA,
                 "clusters": N // CLUSTER_SIZE, "cluster_size": CLUSTER_SIZE},
                 "machine": {"cpus": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
                             "load_average_at_start": os.getloadavg()[0]},
                 "timing": "each design is one `samplewright run --no-report` process, start to exit; the ratio "
                           "to SRS+HT (run just before it, same frame, same n, same replicates) includes "
                           "start-up, frame reading and writing the results", "designs": []}
    print(f"W2: {N} units, {STRATA} strata, {N // CLUSTER_SIZE} clusters of {CLUSTER_SIZE}; n = {n}; "
          f"{R} replicates per design")
    print("times are whole `samplewright run --no-report` processes (start-up included, nothing subtracted)")
    print(f"{'design':<38}{'seconds':>9}{'SRS+HT s':>10}{'ratio':>7}{'CPU ratio':>10}{'peak MiB':>10}")
    with tempfile.TemporaryDirectory(prefix="w2-") as tmp:
        tmp = Path(tmp)
        make_frame(tmp / "frame.parquet")
        for i, d in enumerate(DESIGNS):
            ref = timed_run(tmp, f"ref{i}", REFERENCE, R)
            got = timed_run(tmp, f"design{i}", d, R)
            ratio = got["seconds"] / ref["seconds"]
            res["designs"].append({"label": d["label"], "design": d, **got, "srs_ht_seconds": ref["seconds"],
                                   "ratio_to_srs_ht": round(ratio, 2),
                                   "cpu_ratio_to_srs_ht": round(got["cpu_seconds"] / ref["cpu_seconds"], 2),
                                   "ms_per_replicate": round(got["seconds"] / R * 1e3, 3),
                                   "within_target": ratio <= TARGET_RATIO})
            print(f"{d['label']:<38}{got['seconds']:>9.2f}{ref['seconds']:>10.2f}{ratio:>7.2f}"
                  f"{res['designs'][-1]['cpu_ratio_to_srs_ht']:>10.2f}{got['peak_rss_mib']:>10.0f}", flush=True)
    res["target"] = f"every design within {TARGET_RATIO:g} x SRS+HT (start-up included)"
    res["all_within_target"] = all(d["within_target"] for d in res["designs"])
    print(res["target"] + ":", "met" if res["all_within_target"] else "NOT met")
    save_results(res, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())

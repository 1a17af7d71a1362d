"""W1 in parallel, timed as users run it: ``--jobs 1``, ``--jobs 2`` and a dask cluster of two workers.

Workload W1 (``w1_scenario.py``, read from a Parquet file as in ``w1.py``), ``--no-report``.
Three commands, each a child process timed from start to exit with its own peak resident
memory (``cli_timing.run_cli``, through ``w1.cli``):

- ``samplewright run w1.toml --out DIR --no-report`` (one process, ``--jobs 1``);
- the same with ``--jobs 2`` (two forked worker processes);
- the same with ``--backend dask --scheduler ADDRESS``, ADDRESS being a dask.distributed
  ``LocalCluster(n_workers=2, threads_per_worker=1, processes=True)`` that this script starts
  before any timing.  Starting the cluster (and one small untimed run, in which the workers
  import samplewright) is NOT part of the timed command: a user runs the command against a
  cluster that is already up.  The command's time includes connecting to the scheduler,
  sending the frame to the workers, the blocks and collecting the results.  Its peak memory
  is the command's process only; the workers' own high-water marks are reported apart.

Each command runs ``--repeats`` times (default 3), interleaved (jobs 1, jobs 2, dask, jobs 1,
...), at 10,000 replicates and then 100,000; the median and the minimum are reported.  Every
run's ``summary.csv`` must be byte-identical to the first one at the same replicate count
(numbers never depend on ``--jobs`` or the backend); the script fails otherwise.

Prints the ratios and writes ``benchmarks/results/w1_parallel.json``.
This is a script, not a test: ``python benchmarks/w1_parallel.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from cli_timing import save_results
from w1 import cli
from w1_scenario import w1_doc

from samplewright.simulation.scenario import scenario_from_dict

MODES = ("jobs1", "jobs2", "dask")


def flags(mode: str, scheduler: str) -> list[str]:
    """The command-line options of each mode (all without the report)."""
    return {"jobs1": ["--no-report"], "jobs2": ["--no-report", "--jobs", "2"],
            "dask": ["--no-report", "--backend", "dask", "--scheduler", scheduler]}[mode]


def uptime() -> str:
    return subprocess.run(["uptime"], capture_output=True, text=True, check=False).stdout.strip()


def worker_facts() -> dict:
    """Run on a dask worker: its samplewright, its threads and its own peak resident memory (MiB)."""
    import resource
    import threading

    import samplewright

    return {"samplewright": samplewright.__file__, "threads": threading.active_count(),
            "peak_rss_mib": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)}


def stats_of(runs: list[dict]) -> dict:
    secs = [r["seconds"] for r in runs]
    return {"seconds": secs, "median_seconds": round(statistics.median(secs), 3), "min_seconds": min(secs),
            "peak_rss_mib": [r["peak_rss_mib"] for r in runs]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2,000 replicates only, one repeat")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--replicates", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--out", default=str(HERE / "results" / "w1_parallel.json"))
    args = ap.parse_args(argv)
    counts, repeats = ([2000], 1) if args.quick else (args.replicates, args.repeats)

    import distributed
    import numpy as np

    res: dict = {"workload": "W1", "replicates": counts, "repeats": repeats, "quick": args.quick, "machine": {
        "cpus": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
        "dask_distributed": distributed.__version__, "uptime_at_start": uptime(),
        "load_average_at_start": os.getloadavg()[0],
        "note": "shared 2-core machine (other sessions run on it); the load average says how busy it was"},
        "timing": "each figure is a whole `samplewright run ... --no-report` child process, start to exit "
                  "(start-up, reading the Parquet frame, checks, simulation, tables); peak RSS is that "
                  "process's own (/usr/bin/time %M: with --jobs 2 the largest of it and its forked workers; "
                  "with dask the command's process only, the workers' peaks are under dask_workers)",
        "dask": "a LocalCluster(n_workers=2, threads_per_worker=1, processes=True) started by the benchmark "
                "before any timing; its start-up and one untimed warm-up run (the workers' first import of "
                "samplewright) are NOT part of the timed command; connecting, sending the frame, the blocks "
                "and the results are"}
    print(f"uptime at start: {res['machine']['uptime_at_start']}", flush=True)

    with tempfile.TemporaryDirectory(prefix="w1par-") as tmp:
        tmp = Path(tmp)
        scenario_from_dict(w1_doc()).frame.dataframe().to_parquet(tmp / "w1.parquet", index=False)
        t = time.perf_counter()
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                      dashboard_address=None) as cluster, distributed.Client(cluster) as client:
            address = cluster.scheduler_address
            warm = cli(tmp, "warmup", 500, *flags("dask", address))
            res["dask_cluster_start_seconds_not_timed"] = round(time.perf_counter() - t, 2)
            print(f"dask LocalCluster at {address}: started and warmed up in "
                  f"{res['dask_cluster_start_seconds_not_timed']:.1f} s (not part of any timed command; "
                  f"warm-up run {warm['seconds']:.1f} s)", flush=True)
            runs: dict = {}
            for R in counts:
                got = {m: [] for m in MODES}
                for i in range(repeats):
                    for m in MODES:
                        got[m].append(cli(tmp, f"{m}-{R}-{i}", R, *flags(m, address)))
                        print(f"{R:>7} replicates  {m:<5} repeat {i + 1}: {got[m][-1]['seconds']:6.2f} s  "
                              f"peak {got[m][-1]['peak_rss_mib']:5.0f} MiB   load {os.getloadavg()[0]:.2f}",
                              flush=True)
                first = (tmp / f"out-jobs1-{R}-0" / "summary.csv").read_bytes()
                differ = [f"{m}-{R}-{i}" for m in MODES for i in range(repeats)
                          if (tmp / f"out-{m}-{R}-{i}" / "summary.csv").read_bytes() != first]
                if differ:
                    raise SystemExit(f"summary.csv differs from jobs1-{R}-0 in: {', '.join(differ)}")
                runs[str(R)] = {m: stats_of(got[m]) for m in MODES}
                runs[str(R)]["summaries_byte_identical"] = True
            res["dask_workers"] = list(client.run(worker_facts).values())
        res["processes"] = runs

    res["ratios"], res["targets"] = {}, {}
    for R, r in runs.items():
        med = {m: r[m]["median_seconds"] for m in MODES}
        low = {m: r[m]["min_seconds"] for m in MODES}
        res["ratios"][R] = {
            "jobs1_over_jobs2_median": round(med["jobs1"] / med["jobs2"], 2),
            "jobs1_over_jobs2_min": round(low["jobs1"] / low["jobs2"], 2),
            "dask_over_jobs2_median": round(med["dask"] / med["jobs2"], 2),
            "dask_over_jobs2_min": round(low["dask"] / low["jobs2"], 2),
        }
        res["targets"][R] = {"jobs2_at_least_1.7x_jobs1": res["ratios"][R]["jobs1_over_jobs2_median"] >= 1.7,
                             "dask_within_20pct_of_jobs2": res["ratios"][R]["dask_over_jobs2_median"] <= 1.2}
        print(f"{R} replicates, medians (min): " + ", ".join(f"{m} {med[m]:.2f} s ({low[m]:.2f})" for m in MODES))
        print(f"  ratios: {res['ratios'][R]}; targets met (on medians): {res['targets'][R]}")
    print("dask workers:", res["dask_workers"])
    res["machine"]["uptime_at_end"] = uptime()
    print(f"uptime at end: {res['machine']['uptime_at_end']}")
    save_results(res, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Scale benchmark W1: samplewright against a naive pandas loop and a lower-bound numpy kernel.

Workload W1: 1,000,000 units in 10 strata and 50,000 clusters of 20; four designs of about
n = 1,000 (SRS, stratified Neyman, systematic, one-stage cluster of 50 clusters); the
Horvitz-Thompson mean with its SE and t interval; 10,000 replicates per design.

Measured side by side in one run (the frame is built once and shared):

- samplewright end to end (simulation, replicate table and evaluation; frame already loaded);
- a naive pandas loop: one ``DataFrame.sample`` (or a per-stratum / per-cluster sample) per
  replicate with the same estimate, SE and interval, timed on a few replicates and scaled;
- a lower-bound numpy kernel: draw the indices and sum the values, nothing else (no
  distinctness, no SE, no interval, no bookkeeping).

Then scaling curves (time against replicates, n, N and --jobs) and the peak memory of W1
runs in a child process.  Prints the ratios and writes ``benchmarks/results/w1.json``.
This is a script, not a test: ``python benchmarks/w1.py [--quick]``.
"""

from __future__ import annotations

import argparse
import json
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from w1_scenario import w1_doc  # noqa: E402

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


# ------------------------------------------------------------------ the lower bound
def lower_bound(frame: Frame, n_h, replicates: int, block: int = 500, seed: int = 1, distinct: bool = False) -> float:
    """Draw the indices and sum the values, per design, in blocks; nothing else.

    With ``distinct``, the SRS and stratified indices are also sorted and checked for
    repeats (the least a without-replacement draw needs; the rare redraw is left out).
    """
    y = frame.y[:, 0].copy()
    ys = y[frame.strata_units]  # grouped by stratum beforehand (not timed)
    yo = y[frame.order]
    ct = frame.cluster_sums[:, 0].copy()
    N, C = frame.N, frame.C
    N_h, off = frame.N_h, frame.strata_offsets
    rng = np.random.default_rng(seed)
    sink = 0.0
    t = time.perf_counter()
    repeats = []

    def draw(high, k):
        idx = rng.integers(0, high, (block, k))
        if distinct:
            idx.sort(axis=1)
            repeats.append(bool((idx[:, 1:] == idx[:, :-1]).any()))  # a real draw redraws these few
        return idx

    for _ in range(replicates // block):
        sink += np.take(y, draw(N, 1000)).sum(axis=1)[0]
        s = 0.0
        for h in range(len(N_h)):
            s = s + np.take(ys, draw(N_h[h], int(n_h[h])) + off[h]).sum(axis=1)
        sink += s[0]
        k = N / 1000
        pos = (rng.random(block)[:, None] * k + np.arange(1000) * k).astype(np.int64)
        sink += np.take(yo, pos).sum(axis=1)[0]
        sink += np.take(ct, rng.integers(0, C, (block, 50))).sum(axis=1)[0]
    return time.perf_counter() - t


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
    from samplewright.estimation.estimators import ESTIMATORS, sample_units
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
            "draw": best(lambda: c.design.draw(frame, rng, B)),
            "estimate_se_ci": best(lambda: est(blk, frame.N, frame.V, 0.95, frame.layout)),
            "units_and_cost": best(lambda: (sample_units(blk), sc.cost.replicate_cost(blk, frame))),
        }
    return out


def peak_memory(replicates: int) -> dict:
    """Peak resident memory of a child process that builds W1 and runs it.

    Read from the child's own VmHWM (/proc/self/status): Linux carries ru_maxrss over
    fork and exec, so the child's ru_maxrss would start at this (large) process's peak.
    """
    code = (
        "import sys, resource, json; sys.path.insert(0, %r)\n"
        "def hwm():\n"
        "    try:\n"
        "        for line in open('/proc/self/status'):\n"
        "            if line.startswith('VmHWM:'): return int(line.split()[1])\n"
        "    except OSError: pass\n"
        "    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "from w1_scenario import w1_doc\n"
        "from samplewright.simulation.scenario import scenario_from_dict\n"
        "from samplewright.api import run\n"
        "sc = scenario_from_dict(w1_doc(%d)); f = sc.load_frame()\n"
        "base = hwm()\n"
        "res = run(sc, frame=f)\n"
        "print(json.dumps({'after_frame_kib': base, "
        "'peak_kib': hwm(), 'rows': len(res.replicates), "
        "'table_bytes': int(res.replicates.memory_usage(deep=True).sum())}))\n"
    ) % (str(HERE), replicates)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    m = json.loads(out.stdout.strip().splitlines()[-1])
    return {"replicates": replicates, "peak_mib": round(m["peak_kib"] / 1024, 1),
            "after_frame_mib": round(m["after_frame_kib"] / 1024, 1), "replicate_rows": m["rows"],
            "replicate_table_mib": round(m["table_bytes"] / 2**20, 1)}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller counts, for a smoke run")
    ap.add_argument("--out", default=str(HERE / "results" / "w1.json"))
    args = ap.parse_args(argv)
    quick = args.quick
    R = 2000 if quick else 10_000
    res: dict = {"workload": "W1", "replicates": R, "machine": {
        "cpus": __import__("os").cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
        "note": "shared 2-core machine (other work running at the same time)"}}

    sc = scenario_from_dict(w1_doc(R))
    t_frame, frame = timed(sc.load_frame)
    res["frame_seconds"] = round(t_frame, 3)
    print(f"W1 frame: {frame.N} units, {frame.H} strata, {frame.C} clusters (built in {t_frame:.2f} s)")

    # samplewright end to end (frame loaded)
    t_sw, out = timed(lambda: run(sc, frame=frame), repeat=2)
    res["samplewright_seconds"] = round(t_sw, 3)
    res["samplewright_simulation_seconds"] = out.info["simulation_seconds"]
    print(f"samplewright: {t_sw:.2f} s for 4 designs x {R} replicates "
          f"({out.info['simulation_seconds']:.2f} s drawing and estimating)")

    # lower bound
    n_h = sc.designs[1].n_h(frame)
    t_lb = min(lower_bound(frame, n_h, R, seed=s) for s in (1, 2))
    t_lbd = min(lower_bound(frame, n_h, R, seed=s, distinct=True) for s in (1, 2))
    res["lower_bound_seconds"] = round(t_lb, 3)
    res["lower_bound_distinct_seconds"] = round(t_lbd, 3)
    print(f"lower-bound kernel: {t_lb:.3f} s ({t_lbd:.3f} s with the sort and repeat check of a "
          f"without-replacement draw)")
    res["stages_ms_per_block_of_500"] = stages(sc, frame)
    print("where the time goes (ms per block of 500 replicates):", res["stages_ms_per_block_of_500"])

    # naive pandas loop
    df = sc.frame.dataframe()
    info = {"N": len(df), "N_h": df.groupby("stratum").size().sort_index().to_numpy(), "n_h": n_h,
            "cluster_ids": np.unique(df["cluster"]), "C": frame.C}
    naive = naive_loop(df, info, R, per_design=5 if quick else 20)
    res["naive"] = naive
    print(f"naive pandas loop: {naive['scaled_seconds']:.0f} s scaled from "
          f"{naive['timed_replicates_per_design']} replicates per design "
          + ", ".join(f"{k} {v * 1e3:.1f} ms" for k, v in naive["seconds_per_replicate"].items()))

    res["ratios"] = {"naive_over_samplewright": round(naive["scaled_seconds"] / t_sw, 1),
                     "samplewright_over_lower_bound": round(t_sw / t_lb, 2),
                     "samplewright_simulation_over_lower_bound":
                         round(out.info["simulation_seconds"] / t_lb, 2),
                     "samplewright_over_lower_bound_distinct": round(t_sw / t_lbd, 2)}
    print("ratios:", res["ratios"])

    # time against replicates (W1, all four designs)
    curve = []
    for r in ([1000, 2000, 4000] if quick else [2500, 5000, 10_000, 20_000]):
        t, _ = timed(lambda: run(sc, frame=frame, replicates=r))
        curve.append({"replicates": r, "seconds": round(t, 3), "ms_per_replicate_all_designs": round(t / r * 1e3, 4)})
    res["time_vs_replicates"] = curve
    print("time vs replicates:", [(c["replicates"], c["seconds"]) for c in curve])

    # time against n (SRS on the W1 frame)
    curve = []
    for n in ([250, 1000] if quick else [250, 500, 1000, 2000, 4000]):
        s = scenario_from_dict({**w1_doc(R), "design": [{"label": "srs", "method": "srs", "n": n,
                                                       "estimators": ["ht"]}]})
        t, o = timed(lambda: run(s, frame=frame))
        curve.append({"n": n, "seconds": round(t, 3), "us_per_replicate": round(o.info["simulation_seconds"] / R * 1e6, 2)})
    res["time_vs_n"] = curve
    print("time vs n (SRS):", [(c["n"], c["us_per_replicate"]) for c in curve])

    # time against N (SRS n = 1000): the per-replicate cost must not grow with N
    curve = []
    for N in ([10_000, 1_000_000] if quick else [10_000, 100_000, 1_000_000, 4_000_000]):
        f = simple_frame(N)
        s = srs_scenario(1000, R)
        t, o = timed(lambda: run(s, frame=f), repeat=2)
        curve.append({"N": N, "seconds": round(t, 3), "us_per_replicate": round(o.info["simulation_seconds"] / R * 1e6, 2)})
    res["time_vs_N"] = curve
    print("time vs N (SRS n=1000):", [(c["N"], c["us_per_replicate"]) for c in curve])

    # --jobs 1 against 2 on a 100,000-replicate run
    RJ = 20_000 if quick else 100_000
    t1, a = timed(lambda: run(sc, frame=frame, replicates=RJ, jobs=1))
    t2, b = timed(lambda: run(sc, frame=frame, replicates=RJ, jobs=2))
    same = a.replicates.equals(b.replicates)
    res["jobs"] = {"replicates": RJ, "jobs1_seconds": round(t1, 2), "jobs2_seconds": round(t2, 2),
                   "speedup": round(t1 / t2, 2), "identical_results": bool(same)}
    print(f"--jobs 1: {t1:.2f} s, --jobs 2: {t2:.2f} s, speed-up {t1 / t2:.2f}, identical: {same}")
    del a, b

    # peak memory of W1 runs (child processes)
    res["memory"] = [peak_memory(r) for r in ([R] if quick else [10_000, 100_000, 1_000_000])]
    print("peak memory:", [(m["replicates"], m["peak_mib"]) for m in res["memory"]])
    res["this_process_peak_mib"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)

    res["targets"] = {
        "naive_at_least_100x_slower": res["ratios"]["naive_over_samplewright"] >= 100,
        "within_3x_of_lower_bound": res["ratios"]["samplewright_over_lower_bound"] <= 3,
        "peak_memory_below_1_GiB": {str(m["replicates"]): m["peak_mib"] < 1024 for m in res["memory"]},
        "jobs2_at_least_1.6x": res["jobs"]["speedup"] >= 1.6,
    }
    print("targets met:", res["targets"])
    out_path = Path(args.out)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    out_path.write_text(json.dumps(res, indent=2) + "\n")
    print(f"written to {out_path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

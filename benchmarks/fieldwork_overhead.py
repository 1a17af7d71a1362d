"""What rehearsing fieldwork costs: the same replicate draws with and without non-response.

Usage: ``python benchmarks/fieldwork_overhead.py [--replicates R]``.  A synthetic frame of
200,000 units in 10 strata and 10,000 clusters of 20; three designs of about 1,000 units
(SRS, stratified proportional, one-stage cluster of 50 clusters), Hajek estimator.  Each
setting runs three times, alternating, and the fastest run counts; the script prints the
seconds and each setting's ratio to the plain run (full response, no adjustment, which
takes the engine's ordinary path).  Ratios, not absolute times, are the claim: the machine
is shared.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from samplewright import Frame
from samplewright.api import run
from samplewright.simulation.scenario import scenario_from_dict

DESIGNS = [{"label": "srs", "method": "srs", "n": 1000},
           {"label": "strat", "method": "stratified", "n": 1000},
           {"label": "clusters", "method": "cluster", "clusters": 50}]
SETTINGS = {
    "plain (full response)": ({}, None),
    "response 0.7, no adjustment": ({}, {"model": "constant", "rate": 0.7}),
    "response 0.7, class weights": ({"adjustment": "class"}, {"model": "constant", "rate": 0.7}),
    "stratum rates, raking": ({"adjustment": "raking", "raking_margins": ["st"]},
                              {"model": "stratum", "rates": {str(h): 0.5 + 0.04 * h for h in range(10)}}),
}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=4000)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    N = 200_000
    cl = np.arange(N) // 20
    df = pd.DataFrame({"y": rng.gamma(3.0, 10.0, N), "cl": cl, "st": cl % 10})
    frame = Frame.from_dataframe(df, target="y", stratum="st", cluster="cl")
    best = {}
    for _ in range(3):
        for name, (adj, resp) in SETTINGS.items():
            doc = {"frame": {"synthetic": {"units": 10}},
                   "design": [{**d, "estimators": ["hajek"], **adj} for d in DESIGNS]}
            if resp is not None:
                doc["response"] = resp
            sc = scenario_from_dict(doc)
            t = time.perf_counter()
            run(sc, replicates=args.replicates, seed=1, frame=frame)
            best[name] = min(best.get(name, float("inf")), time.perf_counter() - t)
    base = best["plain (full response)"]
    for name, sec in best.items():
        print(f"{name:32s} {sec:7.2f} s   ratio {sec / base:5.2f}")


if __name__ == "__main__":
    main()

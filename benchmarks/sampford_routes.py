"""Sampford's two exact rejective routes side by side, and the one the design picks.

Usage: ``python benchmarks/sampford_routes.py [--replicates B]``.  Lognormal sizes
(sigma 1) on frames of 2,000 and 20,000 units; for each sample size both routes of
``designs.pips.sampford_draw`` draw B samples (default 500, one block) three times,
alternating, and the fastest run counts; a route whose estimated acceptance is below 1e-3
is not timed (nan).  The script prints the seconds, the ratio
poisson / draws, and the route ``sampford_route`` chooses.  Ratios, not absolute times, are
the claim: the machine is shared.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from samplewright.designs.pips import pips, sampford_acceptance, sampford_draw, sampford_route

CASES = [(2_000, 20), (2_000, 50), (2_000, 100), (2_000, 400), (20_000, 200), (20_000, 400), (20_000, 1_000)]


def fastest(fn, repeats=3):
    best = float("inf")
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--replicates", type=int, default=500)
    B = ap.parse_args().replicates
    print(f"{'N':>7} {'n':>6} {'draws s':>9} {'poisson s':>10} {'poisson/draws':>14} chosen")
    for N, n in CASES:
        x = np.random.default_rng(N + n).lognormal(0.0, 1.0, N)
        pi, certain, _ = pips(x, n)
        free = pi[~certain]
        times = {}
        a_draws, a_pois = sampford_acceptance(free)
        for route, a in (("draws", a_draws), ("poisson", a_pois)):
            if a < 1e-3:  # more than about a thousand attempts per sample: not worth timing
                times[route] = float("nan")
                continue
            rng = np.random.default_rng(1)
            times[route] = fastest(lambda route=route: sampford_draw(rng, free, B, route))
        print(f"{N:>7} {n:>6} {times['draws']:>9.3f} {times['poisson']:>10.3f} "
              f"{times['poisson'] / times['draws']:>14.2f} {sampford_route(free)}  "
              f"(acceptance about {a_draws:.2g} / {a_pois:.2g})")


if __name__ == "__main__":
    main()

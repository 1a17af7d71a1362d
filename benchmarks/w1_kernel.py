"""The lower-bound kernel of W1 as a process of its own (run and timed by w1.py).

Usage: ``python benchmarks/w1_kernel.py FRAME.parquet REPLICATES N_H_JSON``.  Imports numpy
and pandas, reads the Parquet frame, and for each of W1's four designs draws the indices and
sums the values in blocks of 500, nothing else (no distinctness, no SE, no interval, no
bookkeeping, no output files).  Prints one JSON line with its own import, read and kernel times.
"""

from __future__ import annotations

import json
import sys
import time

t0 = time.perf_counter()
import numpy as np
import pandas as pd


def main(path: str, replicates: int, n_h: list[int], block: int = 500, seed: int = 1) -> dict:
    t1 = time.perf_counter()
    df = pd.read_parquet(path, columns=["y", "stratum", "cluster"])
    y = df["y"].to_numpy()
    codes = pd.factorize(df["stratum"], sort=True)[0]
    ys = y[np.argsort(codes, kind="stable")]
    N_h = np.bincount(codes)
    off = np.concatenate([[0], np.cumsum(N_h)[:-1]])
    ct = np.bincount(pd.factorize(df["cluster"])[0], weights=y)
    N, C = y.size, ct.size
    t2 = time.perf_counter()
    rng = np.random.default_rng(seed)
    sink = 0.0
    for _ in range(replicates // block):
        sink += np.take(y, rng.integers(0, N, (block, 1000))).sum(axis=1)[0]
        s = 0.0
        for h in range(N_h.size):
            s = s + np.take(ys, rng.integers(0, N_h[h], (block, n_h[h])) + off[h]).sum(axis=1)
        sink += s[0]
        k = N / 1000
        pos = (rng.random(block)[:, None] * k + np.arange(1000) * k).astype(np.int64)
        sink += np.take(y, pos).sum(axis=1)[0]
        sink += np.take(ct, rng.integers(0, C, (block, 50))).sum(axis=1)[0]
    t3 = time.perf_counter()
    return {"import_seconds": round(t1 - t0, 3), "read_seconds": round(t2 - t1, 3),
            "kernel_seconds": round(t3 - t2, 3), "sink": float(sink)}


if __name__ == "__main__":
    print(json.dumps(main(sys.argv[1], int(sys.argv[2]), json.loads(sys.argv[3]))))

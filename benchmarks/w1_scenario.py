"""Workload W1 of the scale benchmark: the scenario as a dict (shared by w1.py and profiling)."""

from __future__ import annotations


def w1_doc(replicates: int = 10_000, units: int = 1_000_000, n: int = 1000, clusters: int = 50,
           block_size: int = 500) -> dict:
    """1,000,000 units in 10 strata and 50,000 clusters of 20; four designs of about n = 1,000."""
    strata = [{"name": f"S{h:02d}", "share": 1.0, "mean": 50.0 + 10.0 * h, "sd": 5.0 + 2.0 * h}
              for h in range(10)]
    return {
        "title": "W1: scale benchmark (invented regional inventory)",
        "seed": 2026,
        "replicates": replicates,
        "block_size": block_size,
        "frame": {"synthetic": {"units": units, "seed": 7, "target": "y", "order": "random",
                                "strata": strata, "clusters": {"mean_size": 20, "icc": 0.1, "size_cv": 0.0}}},
        "design": [
            {"label": "srs", "method": "srs", "n": n, "estimators": ["ht"]},
            {"label": "stratified neyman", "method": "stratified", "n": n, "allocation": "neyman",
             "estimators": ["ht"]},
            {"label": "systematic", "method": "systematic", "n": n, "estimators": ["ht"]},
            {"label": "one-stage cluster", "method": "cluster", "clusters": clusters, "estimators": ["ht"]},
        ],
    }

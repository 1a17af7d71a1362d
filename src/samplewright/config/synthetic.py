"""The settings of a synthetic frame (``[frame.synthetic]``); population/synth.py generates it."""

from __future__ import annotations

from dataclasses import dataclass, field

KEYS = {
    "units": "number of units in the frame (required)",
    "seed": "seed of the generator (default 1)",
    "target": "name of the study-variable column (default 'y')",
    "mean": "mean of y when no strata are given (default 100)",
    "sd": "standard deviation of y within a stratum when no strata are given (default 20)",
    "skew": "'none' (normal), 'gamma' or 'lognormal' unit-level noise (default 'none')",
    "skewness": "skewness of the unit-level noise when skewed (default 2)",
    "order": "'random' (shuffled list) or 'grouped' (stratum by stratum, cluster by cluster); default 'random'",
    "trend": "rise of the mean from the first to the last unit of the list (default 0)",
    "period": "length of a cycle along the list order, in units (default: none)",
    "amplitude": "amplitude of the cycle (default 0)",
    "size_correlation": "correlation of log(size) with y; setting it adds a 'size' column",
    "size_mean": "mean of the size measure (default 100)",
    "size_cv": "coefficient of variation of log-size spread (default 0.5)",
    "strata": "list of tables {name, share, mean, sd}",
    "clusters": "table {mean_size, icc, size_cv}",
}
STRATUM_KEYS = ("name", "share", "mean", "sd")
CLUSTER_KEYS = ("mean_size", "icc", "size_cv")


@dataclass(frozen=True)
class SyntheticSpec:
    """Parameters of a synthetic frame (see :data:`KEYS`)."""

    units: int
    seed: int = 1
    target: str = "y"
    mean: float = 100.0
    sd: float = 20.0
    skew: str = "none"
    skewness: float = 2.0
    order: str = "random"
    trend: float = 0.0
    period: float | None = None
    amplitude: float = 0.0
    size_correlation: float | None = None
    size_mean: float = 100.0
    size_cv: float = 0.5
    strata: tuple = field(default_factory=tuple)  # of dicts name/share/mean/sd
    clusters: dict | None = None  # mean_size, icc, size_cv

    @property
    def has_strata(self) -> bool:
        return len(self.strata) > 0

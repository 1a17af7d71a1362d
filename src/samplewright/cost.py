"""Field cost of a sample: fixed, per unit, per cluster visited, per stratum set up.

The frame's ``unit_cost`` column, when bound, adds each sampled unit's own cost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .block import SampleBlock
from .estimators import sample_units, sampled_unit_cost


@dataclass(frozen=True)
class CostModel:
    """Linear cost model; every replicate's cost is computed from its own sample.

    cost = fixed + per_unit * units + per_cluster * clusters + per_stratum * strata
           + sum of the frame's unit_cost over the sampled units
    """

    fixed: float = 0.0
    per_unit: float = 0.0
    per_cluster: float = 0.0
    per_stratum: float = 0.0

    def replicate_cost(self, block: SampleBlock) -> np.ndarray:
        """Cost of each replicate in the block, shape (B,)."""
        n = sample_units(block)
        return (self.fixed + self.per_unit * n + self.per_cluster * block.clusters
                + self.per_stratum * block.strata + sampled_unit_cost(block))

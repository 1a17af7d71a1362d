"""Shared fixtures: small frames built in code, and helpers for Monte Carlo tolerances."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from samplewright import Frame

#: z-bound for Monte Carlo checks: |simulated - exact| < Z * MCSE.  With a few hundred
#: such checks in the suite, 4.0 keeps the chance of a false failure near 6e-5 per check
#: (normal tail), while fixed seeds make every run reproducible.
Z = 4.0


@pytest.fixture
def small_frame():
    """Twelve units in three strata and six clusters of two (values invented for exercising code)."""
    df = pd.DataFrame({
        "y": [3.0, 7.0, 1.0, 9.0, 4.0, 4.0, 12.0, 2.0, 8.0, 5.0, 6.0, 10.0],
        "band": ["a", "a", "a", "a", "b", "b", "b", "b", "c", "c", "c", "c"],
        "block": [1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6],
    })
    return Frame.from_dataframe(df, target="y", stratum="band", cluster="block")


def mc_tolerance(sd: float, replicates: int, z: float = Z) -> float:
    """z times the Monte Carlo SE of a mean of ``replicates`` draws with standard deviation ``sd``."""
    return z * sd / np.sqrt(replicates)

"""The fieldwork columns of the summary: response, full-response measures and the bias split.

See :mod:`samplewright.simulation.fieldwork` for the split of the bias into sampling, frame and
non-response parts.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.evaluation.measures import holds
from samplewright.simulation.fieldwork import FieldSetup

#: summary columns fieldwork adds (after the contract columns)
SUMMARY_EXTRA = [
    "adjustment", "mean_attempted", "mean_respondents", "response_rate", "cost_per_complete",
    "full_response_bias", "full_response_empirical_se", "full_response_rmse", "full_response_coverage",
    "full_response_mean_cost", "full_response_cost_per_complete",
    "sampling_bias", "sampling_bias_mcse", "frame_bias", "nonresponse_bias", "nonresponse_bias_mcse",
    "adjustment_failures",
]


def summary_columns(summary: pd.DataFrame, reps: pd.DataFrame, setup: FieldSetup, confidence: float) -> pd.DataFrame:
    """The summary with the fieldwork columns (:data:`SUMMARY_EXTRA`) appended."""
    names = list(setup.frame.layout.names)
    truth = dict(zip(setup.truth.layout.names, setup.truth.layout.truth))
    extra = []
    groups = {k: g for k, g in reps.groupby(["design", "size", "estimator", "variable"], sort=False)}
    for _, row in summary.iterrows():
        g = groups[(row["design"], row["size"], row["estimator"], row["variable"])]
        T = float(truth[row["variable"]])
        x, xf = g["estimate"].to_numpy(), g["full_estimate"].to_numpy()
        R = len(x)
        census = float(setup.census[(row["design"], row["estimator"])][names.index(row["variable"])])
        resp, att, elig = g["n"].mean(), g["attempted"].mean(), g["eligible"].mean()
        cost, fcost = g["cost"].mean(), g["full_cost"].mean()
        d = x - xf
        cover = float(np.mean(holds(g["full_lower"].to_numpy(), g["full_upper"].to_numpy(), T)))
        extra.append({
            "adjustment": setup.adjustments[row["design"]].method,
            "mean_attempted": float(att),
            "mean_respondents": float(resp),
            "response_rate": float(resp / elig) if elig > 0 else float("nan"),
            "cost_per_complete": float(cost / resp) if resp > 0 else float("nan"),
            "full_response_bias": float(xf.mean() - T),
            "full_response_empirical_se": float(xf.std(ddof=1)) if R > 1 else float("nan"),
            "full_response_rmse": float(np.sqrt(np.mean((xf - T) ** 2))),
            "full_response_coverage": cover,
            "full_response_mean_cost": float(fcost),
            "full_response_cost_per_complete": float(fcost / elig) if elig > 0 else float("nan"),
            "sampling_bias": float(xf.mean() - census),
            "sampling_bias_mcse": float(xf.std(ddof=1) / np.sqrt(R)) if R > 1 else float("nan"),
            "frame_bias": census - T,
            "nonresponse_bias": float(d.mean()),
            "nonresponse_bias_mcse": float(d.std(ddof=1) / np.sqrt(R)) if R > 1 else float("nan"),
            "adjustment_failures": int(g["adjustment_failed"].sum()),
        })
    return pd.concat([summary.reset_index(drop=True), pd.DataFrame(extra, columns=SUMMARY_EXTRA)], axis=1)

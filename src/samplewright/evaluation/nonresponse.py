"""The summary's non-response columns: the bias split into sampling, frame and non-response parts.

Per summary row (x: the estimate with non-response; x_full: the same replicate's full-response
estimate; C: the estimator on a census of the listed frame with the same adjustment; T: the true
population mean):

    bias = mean(x) - T = [mean(x_full) - C] + [C - T] + [mean(x - x_full)]
         = sampling_bias + frame_bias + nonresponse_bias

``nonresponse_bias_mcse`` is the MCSE of a mean of the paired differences x - x_full
(Morris, White & Crowther 2019, Table 6 applied to the differences), usually far smaller
than the MCSE of the bias itself because both share the sample.  The replicates and the census
come from :mod:`samplewright.simulation.fieldwork`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.evaluation import measures
from samplewright.simulation.fieldwork import FieldSetup

#: summary columns fieldwork adds (after the contract columns)
SUMMARY_EXTRA = [
    "adjustment", "mean_attempted", "mean_respondents", "response_rate", "cost_per_complete",
    "full_response_bias", "full_response_empirical_se", "full_response_rmse", "full_response_coverage",
    "full_response_mean_cost", "full_response_cost_per_complete",
    "sampling_bias", "sampling_bias_mcse", "frame_bias", "nonresponse_bias", "nonresponse_bias_mcse",
    "adjustment_failures",
]


def summary_columns(summary: pd.DataFrame, reps: pd.DataFrame, setup: FieldSetup) -> pd.DataFrame:
    """The summary with the fieldwork columns (:data:`SUMMARY_EXTRA`) right after the contract columns
    (the published-margin columns and ``variance`` follow)."""
    keys = [*measures.POINT_KEYS, "variable"]
    groups = {k: g for k, g in reps.groupby(keys, sort=False)}
    extra = []
    for _, row in summary.iterrows():
        g = groups[tuple(row[k] for k in keys)]
        extra.append(fieldwork_row(row["design"], row["estimator"], row["variable"],
                                   {k: g[k].to_numpy() for k in FIELD_ARRAYS}, setup))
    return with_fieldwork(summary, extra)


#: the replicate columns :func:`fieldwork_row` reads
FIELD_ARRAYS = ("estimate", "full_estimate", "n", "attempted", "eligible", "cost", "full_cost", "full_lower",
                "full_upper", "adjustment_failed")


def fieldwork_row(design: str, estimator: str, variable: str, g: dict, setup: FieldSetup) -> dict:
    """The fieldwork columns of one summary row from its replicate arrays ``g`` (:data:`FIELD_ARRAYS`, every
    replicate of the point and variable); the whole-table and the per-cell summaries both call this."""
    names = list(setup.frame.layout.names)
    T = float(dict(zip(setup.truth.layout.names, setup.truth.layout.truth))[variable])
    x, xf = g["estimate"], g["full_estimate"]
    census = float(setup.census[(design, estimator)][names.index(variable)])
    # means as a pandas Series takes them (its own summation), so both callers give the same bits
    resp, att, elig = (pd.Series(g[k]).mean() for k in ("n", "attempted", "eligible"))
    cost, fcost = pd.Series(g["cost"]).mean(), pd.Series(g["full_cost"]).mean()
    d = x - xf
    cover = float(measures.coverage(g["full_lower"], g["full_upper"], T))
    return {
        "adjustment": setup.adjustments[design].method,
        "mean_attempted": float(att),
        "mean_respondents": float(resp),
        "response_rate": float(resp / elig) if elig > 0 else float("nan"),
        "cost_per_complete": float(cost / resp) if resp > 0 else float("nan"),
        "full_response_bias": float(measures.expectation(xf) - T),
        "full_response_empirical_se": float(np.sqrt(measures.empirical_variance(xf))),
        "full_response_rmse": float(measures.rmse(xf, T)),
        "full_response_coverage": cover,
        "full_response_mean_cost": float(fcost),
        "full_response_cost_per_complete": float(fcost / elig) if elig > 0 else float("nan"),
        "sampling_bias": float(measures.expectation(xf) - census),
        "sampling_bias_mcse": measures.mean_mcse(xf),
        "frame_bias": census - T,
        "nonresponse_bias": float(measures.expectation(d)),
        "nonresponse_bias_mcse": measures.mean_mcse(d),
        "adjustment_failures": int(pd.Series(g["adjustment_failed"]).sum()),
    }


def with_fieldwork(summary: pd.DataFrame, extra: list[dict]) -> pd.DataFrame:
    """The summary with one :func:`fieldwork_row` per row placed after the contract columns."""
    summary = summary.reset_index(drop=True)
    contract = summary[measures.SUMMARY_COLUMNS]
    return pd.concat([contract, pd.DataFrame(extra, columns=SUMMARY_EXTRA),
                      summary.drop(columns=measures.SUMMARY_COLUMNS)], axis=1)

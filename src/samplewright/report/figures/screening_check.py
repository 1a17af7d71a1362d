"""Was the screen honest? Each shortlisted design's anticipated standard error against the rehearsed one."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.style import MC_Z, TRUTH_COLOUR, design_colours, new_figure, plain, styled


@styled
def screening_plot(candidates: pd.DataFrame, ax=None):
    """Anticipated SE of the HT mean (closed form, horizontal) against the rehearsal's empirical SE
    (vertical) with 95% Monte Carlo error bars, one point per shortlisted design; the dashed line is
    agreement.  MCSE(SE) = MCSE(variance) / (2 SE), the delta method."""
    rows = candidates[candidates["shortlisted"].astype(bool) & candidates["rehearsed_variance"].notna()]
    if ax is None:
        ax = new_figure(3.6).subplots()
    colours = design_colours(list(rows["design"]))
    for r in rows.itertuples(index=False):
        se = float(np.sqrt(r.rehearsed_variance))
        err = MC_Z * float(r.rehearsed_variance_mcse) / (2 * se) if se > 0 else 0.0
        ax.errorbar(r.anticipated_se, se, yerr=err, fmt="o", color=colours[r.design], capsize=3,
                    label=plain(r.design))
    lo = float(np.nanmin(np.r_[rows["anticipated_se"], np.sqrt(rows["rehearsed_variance"])]))
    hi = float(np.nanmax(np.r_[rows["anticipated_se"], np.sqrt(rows["rehearsed_variance"])]))
    pad = 0.08 * (hi - lo) if hi > lo else 0.1 * hi
    ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], linestyle="--", color=TRUTH_COLOUR, linewidth=1.0)
    ax.set_xlabel("Anticipated SE of the mean (closed form on the frame)")
    ax.set_ylabel("Rehearsed SE (spread of the estimates)")
    ax.set_title("Screening check: anticipated against rehearsed", loc="left")
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, fontsize=7.5)
    return ax

"""Warnings that are not errors: conditions a planner should know about before trusting a run.

Each check returns plain sentences; :func:`samplewright.api.run` hands them on once (the command
line prints them) and records them in run.json: warnings (``warning:`` lines, run.json
``warnings``) where a result may mislead, and notes (``note:`` lines, run.json ``notes``) for
facts of the set-up, such as how an allocation was rounded or that costs are not modelled.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from samplewright.population.frame import Frame

#: a stratum with fewer units than this is called tiny (common practice, no published source)
TINY_STRATUM = 5
#: a design sampling more than this share of the frame is flagged (common practice)
LARGE_FRACTION = 0.5
#: fewer replicates than this leave coverage MCSE above about 0.01 at 95% (Morris et al. 2019, sec. 5.3)
FEW_REPLICATES = 500


def frame_warnings(frame: Frame) -> list[str]:
    out = []
    if frame.roles.get("stratum") is not None:
        tiny = [str(frame.stratum_labels[h]) for h in np.flatnonzero(frame.N_h < TINY_STRATUM)]
        if tiny:
            out.append(f"tiny strata (fewer than {TINY_STRATUM} units): {', '.join(tiny[:10])}")
    if frame.roles.get("dropped_rows"):
        out.append(f"{frame.roles['dropped_rows']} frame rows with missing target values were dropped "
                   f"(missing = \"drop\")")
    return out


def variance_warnings(frame: Frame) -> list[str]:
    """One sentence per output variable without variance in the frame (its S^2 is 0).

    Design effects compare with the SRS variance, which is then 0: ``deff`` is empty where the
    design's estimates do not vary either and infinite where they do (see ``evaluate``).  A
    domain mean is named only when its target does vary.
    """
    L = frame.layout
    out = []
    for i, (name, s2) in enumerate(zip(L.names, L.S2)):
        if s2 > 0 or (i >= frame.V and L.S2[(i - frame.V) % frame.V] == 0):
            continue
        what = "target" if i < frame.V else "domain mean"
        out.append(f"{what} {name!r} has no variance in the frame (every unit has the value {L.truth[i]:g}): "
                   f"its design effects are undefined (deff is left empty where the estimates do not vary "
                   f"either, infinite where they do) and se_ratio is left empty where both SEs are 0")
    return out


def interval_warnings(frame: Frame, design) -> list[str]:
    """Sentences for a systematic design whose interval is unsafe for a cycle along its list order.

    The detector (``periodicity.frame_order_report``) runs once per frame, target and sort key
    and is cached with the frame; the rule is ``periodicity.interval_risks``.
    """
    if getattr(design, "method", None) != "systematic":
        return []
    from samplewright.diagnostics.periodicity import frame_order_report, interval_risks

    k = design.interval(frame)
    sort_by = getattr(design, "sort_by", None)
    along = "the list order" if sort_by is None else f"the list sorted by {sort_by!r}"
    out = []
    for v, name in enumerate(frame.variables):
        rep = frame_order_report(frame, v, sort_by)
        risks = interval_risks(k, rep)
        if not risks:
            continue
        risk = risks[0]  # one sentence per design and target: the component adding most, the others named
        p = next(q for q in rep.periods if q.period == risk["period"])
        head = (f"design {design.label!r} at size {design.size}: interval k = {k:.4g} is unsafe for target "
                f"{name!r}, which has a cycle of period {p.period:.4g} along {along} (strength {p.strength:.2f}, "
                f"Fisher's g p = {p.p_value:.2g}): ")
        if risk["phases"] == 1:
            why = (f"k is {risk['multiple']} x the period, so every unit of a sample sits on the same phase of "
                   f"the cycle; the estimate swings with the start")
        else:
            why = (f"k is {risk['multiple']}/{risk['harmonic']} of the period, so a sample sees only "
                   f"{risk['phases']} points of each cycle and the cycle's harmonic {risk['harmonic']} "
                   f"(share {risk['share']:.2f} of the variance) stays in the estimate")
        if design.variance_name == "between_starts":
            tail = " (the between-start SE still measures that spread honestly, at few degrees of freedom)"
        else:
            tail = (f"; the true variance is about {risk['variance_ratio']:.1f} times what the SRS formula "
                    f"reports, which the {design.variance_name} variance estimate does not see, so intervals "
                    f"will under-cover")
        others = sorted({r["period"] for r in risks[1:]} - {p.period})
        also = (f"; the interval is also unsafe for the periods {', '.join(f'{q:.3g}' for q in others)}"
                if others else "")
        out.append(head + why + tail + also)
    return out


def skewness(frame: Frame) -> np.ndarray:
    """Fisher's G1 of each target, bias-corrected: sqrt(n (n - 1)) / (n - 2) m3 / m2^1.5 with central
    moments m_k (Joanes & Gill 1998, The Statistician 47:183-189; the same steps as
    ``scipy.stats.skew(bias=False)``, without importing scipy.stats); 0 for a constant target,
    NaN (as scipy gives) where the variance is lost in rounding against the mean.
    """
    g1 = np.zeros(frame.V)
    varies = np.ptp(frame.y, axis=0) > 0 if frame.N > 2 else np.zeros(frame.V, dtype=bool)
    if varies.any():
        y = frame.y[:, varies]
        big = np.abs(y).max(axis=0)
        if (big > 1e100).any():  # G1 is scale-free, and a cube of 1e150 overflows: scaled only then, so
            y = y / big  # ordinary values keep the bits of scipy.stats.skew's steps
        n = y.shape[0]
        mean = y.mean(axis=0, keepdims=True)
        d = y - mean
        m2 = np.mean(d**2, axis=0)
        m3 = np.mean(d**2 * d, axis=0)
        lost = m2 <= (np.finfo(float).eps * mean[0]) ** 2
        with np.errstate(divide="ignore", invalid="ignore"):
            g1[varies] = np.where(lost, np.nan, ((n - 1.0) * n) ** 0.5 / (n - 2.0) * m3 / m2**1.5)
    return g1


def single_psu_warnings(design, block) -> list[str]:
    """A sentence when a sampled design stratum holds one PSU, whose variance cannot be estimated.

    The between-PSU variance of a stratum has m_h - 1 degrees of freedom: with one PSU (one unit,
    one cluster, or the one draw left beside certainty units) it is left out of the SEs.  The layout
    of PSUs in strata is the same in every replicate, so ``block``, one drawn replicate, shows it;
    random-size designs are skipped (their Poisson variance needs no second unit).
    """
    if block.mask is not None:
        return []
    slot = block.psu if block.psu is not None else np.arange(len(block.psu_stratum))
    psus = np.bincount(np.unique(np.column_stack([block.psu_stratum, slot]), axis=0)[:, 0],
                       minlength=len(block.fpc))
    single = int(((psus == 1) & (np.asarray(block.fpc) > 0)).sum())
    if not single:
        return []
    return [f"design {design.label!r} at size {design.size}: {single} sampled stratum/strata hold a single primary "
            f"sampling unit, whose variance cannot be estimated: the SEs leave it out (intervals too narrow, or "
            f"of zero width); draw at least two units or clusters per stratum"]


def one_unit_cluster_warnings(design, block) -> list[str]:
    """A sentence when a two-stage design draws one unit in sampled (not certainty) clusters.

    The within-cluster variance s_2i^2 of the unbiased two-stage estimator (Cochran 1977, Theorem 11.2) needs
    two units in the cluster; with one it is left out and the SEs run low (certainty clusters have their own
    note).  As in :func:`single_psu_warnings`, ``block``, one drawn replicate, shows the layout.
    """
    if block.psu is None or block.within_fpc is None:
        return []
    real = np.ones(len(block.psu), dtype=bool) if block.mask is None else block.mask[0]
    take = np.bincount(block.psu[real], minlength=block.within_fpc.shape[1])
    sampled = np.asarray(block.fpc)[block.psu_stratum[np.unique(block.psu, return_index=True)[1]]] > 0
    lonely = int(((take == 1) & (block.within_fpc[0] > 0) & sampled).sum())
    if not lonely:
        return []
    return [f"design {design.label!r} at size {design.size}: one unit is drawn in {lonely} sampled cluster(s), so "
            f"their within-cluster variance cannot be estimated and the two-stage SEs run low; draw at least two "
            f"units per cluster"]


def _may_hold_one_psu(frame: Frame, design) -> bool:
    """Whether a drawn replicate is needed to look for a lone PSU or unit: always for cluster designs; for
    unit designs only when fewer than two units are expected beside the certainty ones (a Sampford draw of a
    large frame costs as much as a block, so it is skipped where it cannot show one)."""
    if design.size_key == "clusters":
        return True
    pi = design.inclusion_probabilities(frame)
    return float(pi[pi < 1.0].sum()) < 2.0


def design_warnings(frame: Frame, cells, replicates: int | None) -> list[str]:
    """Warnings about the designs on this frame; ``replicates`` is None in exact mode (no Monte Carlo)."""
    out = []
    g1 = skewness(frame)
    small = {v: [] for v in frame.variables}  # variable -> designs/sizes below Cochran's bound
    for cell in cells:
        d = cell.design
        out.extend(interval_warnings(frame, d))  # systematic intervals in step with a cycle
        if _may_hold_one_psu(frame, d):
            layout = d.draw(frame, np.random.default_rng(0), 1)  # one replicate: the PSU layout of every replicate
            out.extend(single_psu_warnings(d, layout) + one_unit_cluster_warnings(d, layout))
        n = d.expected_n(frame)
        if n > LARGE_FRACTION * frame.N:
            out.append(f"design {d.label!r} at size {d.size} samples {n / frame.N:.0%} of the frame")
        for v, g in zip(frame.variables, g1):
            # Cochran (1977), sec. 2.15: the normal approximation needs n > 25 G1^2
            if n < 25.0 * g * g:
                small[v].append(f"{d.label} ({n:.0f})")
    for v, g in zip(frame.variables, g1):
        bound = 25 * g * g
        if bound >= frame.N:  # no sample size from this frame meets the rule: say what that means instead
            out.append(f"target {v!r} is so skewed (G1 = {g:.2f}) that Cochran's rule n > 25 G1^2 = {bound:.0f} "
                       f"asks for more units than the {frame.N} in the frame: the normal approximation cannot be "
                       f"reached by sampling more, so intervals may under-cover at every size; the rehearsal's "
                       f"coverage column shows by how much")
        elif small[v]:
            out.append(f"target {v!r} is skewed (G1 = {g:.2f}): Cochran's rule n > 25 G1^2 = {bound:.0f} "
                       f"is not met by {', '.join(small[v])}; intervals based on the normal approximation "
                       f"may under-cover")
    if replicates is not None and replicates < FEW_REPLICATES:
        mcse = np.sqrt(0.95 * 0.05 / replicates)
        out.append(f"only {replicates} replicates: coverage near 95% has a Monte Carlo SE of about {mcse:.3f}")
    return out


def design_notes(frame: Frame, cells) -> list[str]:
    """How the designs were set up (allocation to strata, certainty units): facts, not warnings."""
    return [note for cell in cells for note in cell.design.notes(frame)]


def cost_notes(cost, frame: Frame) -> list[str]:
    """One note when nothing in the scenario costs anything (no [cost] rate, no cost column)."""
    rates = [getattr(cost, f.name) for f in dataclasses.fields(cost) if isinstance(getattr(cost, f.name), float)]
    if any(rates) or cost.per_unit_by_stratum or frame.unit_cost is not None or frame.cluster_cost is not None:
        return []
    return [("costs are not modelled (no [cost] table and no unit_cost or cluster_cost column): mean_cost is 0 "
             "for every design, so designs are compared on precision alone")]

"""Frame diagnostics: intra-cluster correlation, stratum summaries, list-order structure."""

from __future__ import annotations

import numpy as np


def anova_icc(y, cluster, stratum=None) -> float:
    """ANOVA estimator of the intra-cluster correlation for clusters of unequal size, within
    strata when ``stratum`` is given (clusters nested in strata).

    Notes
    -----
    rho = (MSB - MSW) / (MSB + (m0 - 1) MSW), with MSW the within-cluster mean square
    (N - C degrees of freedom) and MSB the between-cluster mean square within strata,
    sum_h sum_c M_hc (ybar_hc - ybar_h)^2 / (C - H); m0 = (N - sum_h sum_c M_hc^2 / N_h) / (C - H)
    is the coefficient of the cluster variance component in E[MSB] (one-way nested
    classification; Searle, Casella and McCulloch 1992, Variance Components, ch. 3 and 4,
    from memory).  With one stratum this is Donner's estimator (Donner 1986, Int. Stat. Review
    54:67-82; for equal sizes m0 = M and it is the ANOVA form of Kish's roh, Kish 1965,
    sec. 5.6).  Stratum differences do not enter: the design samples within strata.
    """
    y = np.asarray(y, dtype=float)
    codes = np.unique(np.asarray(cluster), return_inverse=True)[1]
    C, N = int(codes.max()) + 1, len(y)
    M = np.bincount(codes, minlength=C).astype(float)
    means = np.bincount(codes, weights=y, minlength=C) / M
    if stratum is None:
        cs = np.zeros(C, dtype=np.int64)
    else:
        cs = np.zeros(C, dtype=np.int64)
        cs[codes] = np.unique(np.asarray(stratum), return_inverse=True)[1]  # clusters nested in strata
    H = int(cs.max()) + 1
    Nh = np.bincount(cs, weights=M, minlength=H)
    ybar_h = np.bincount(cs, weights=M * means, minlength=H) / Nh
    if C - H < 1 or N - C < 1:
        return float("nan")
    msb = float(np.sum(M * (means - ybar_h[cs]) ** 2) / (C - H))
    msw = float(np.sum((y - means[codes]) ** 2) / (N - C))
    m0 = (N - np.sum(np.bincount(cs, weights=M**2, minlength=H) / Nh)) / (C - H)
    denom = msb + (m0 - 1.0) * msw
    return (msb - msw) / denom if denom > 0 else 0.0


# ---------------------------------------------------------------- frame report (samplewright inspect)
def missing_counts(df) -> dict:
    """Blank cells per column of the raw table, for the columns that have any."""
    counts = df.isna().sum()
    return {str(k): int(v) for k, v in counts.items() if v}


def stratum_summary(frame, variable: int = 0) -> list[dict]:
    """Per stratum: label, N_h, exact mean and S_h (divisor N_h - 1) of one target."""
    means = frame.stratum_means()[:, variable]
    sds = np.sqrt(frame.stratum_S2()[:, variable])
    return [{"stratum": _plain(lab), "units": int(nh), "mean": float(m), "sd": float(s)}
            for lab, nh, m, s in zip(frame.stratum_labels, frame.N_h, means, sds)]


def cluster_summary(frame, variable: int = 0) -> dict | None:
    """Cluster count, the distribution of cluster sizes and the ANOVA ICC of one target (within
    strata when the frame has strata: :func:`anova_icc`)."""
    if frame.cluster is None:
        return None
    sizes = frame.cluster_sizes.astype(float)
    q = np.quantile(sizes, [0.0, 0.25, 0.5, 0.75, 1.0])
    stratum = frame.stratum if frame.roles.get("stratum") is not None else None
    icc = anova_icc(frame.y[:, variable], frame.cluster, stratum) if frame.N > frame.C else float("nan")
    return {"clusters": int(frame.C), "mean_size": float(sizes.mean()),
            "size_cv": float(sizes.std(ddof=1) / sizes.mean()) if frame.C > 1 else 0.0,
            "size_min": float(q[0]), "size_q1": float(q[1]), "size_median": float(q[2]), "size_q3": float(q[3]),
            "size_max": float(q[4]), "icc": float(icc)}


#: unsafe intervals whose reasons the report spells out
DETAIL = 200


def order_summary(frame, variable: int = 0, alpha: float | None = None, k_max: int | None = None) -> dict:
    """Periods of one target along the list order and the unsafe systematic intervals.

    ``periods`` is strongest first; ``unsafe_intervals`` lists the whole intervals 2 .. k_max
    (default min(N // 2, 5000)) where the predicted variance ratio R(k) of
    :mod:`samplewright.diagnostics.periodicity` is at least 1.5, and ``unsafe_detail`` gives the reason for
    the first :data:`DETAIL` of them (interval, fundamental period, harmonic, multiple, points per
    cycle, share, term, R(k)).  ``components`` are the cycle parts R(k) weighs, ``noise_share`` the
    rest; ``grouped_list`` is true when group means were removed instead of a trend.
    """
    from samplewright.diagnostics import periodicity as P

    rep = P.frame_order_report(frame, variable, alpha=P.FALSE_ALARM if alpha is None else alpha, acf=True)
    unsafe = P.unsafe_intervals(rep, k_max)
    detail = [r for k in unsafe[:DETAIL] for r in P.interval_risks(k, rep)]
    return {
        "method": rep.method,
        "grouped_list": rep.grouped,
        "false_alarm_rate": rep.alpha,
        "ordinates_tested": rep.tested,
        "fisher_g": None if not np.isfinite(rep.g) else float(rep.g),
        "fisher_p": float(rep.p_value),
        "periods": [p.as_dict() for p in rep.periods],
        "components": [c.as_dict() for c in rep.components],
        "noise_share": float(rep.noise_share),
        "autocorrelation": [float(a) for a in rep.acf],
        "unsafe_intervals": unsafe,
        "unsafe_detail": [{k: (float(v) if isinstance(v, (float, np.floating)) else v) for k, v in r.items()}
                          for r in detail],
        "unsafe_rule": (f"R(k) = noise share + sum over cycle components c (detected periods and measured "
                        f"harmonics h/P) of share_c x n x D_n(k/P_c)^2 x (1 - D_k(1/P_c)^2) / (1 - f) "
                        f">= {1 + P.MATERIAL}, n = N/k, D_m(x) = |sin(pi m x) / (m sin(pi x))|"),
    }


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value

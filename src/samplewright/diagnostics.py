"""Frame diagnostics: intra-cluster correlation, stratum summaries, list-order structure."""

from __future__ import annotations

import numpy as np


def anova_icc(y, cluster) -> float:
    """ANOVA estimator of the intra-cluster correlation for clusters of unequal size.

    Notes
    -----
    rho = (MSB - MSW) / (MSB + (m0 - 1) MSW), with MSB and MSW the between- and within-
    cluster mean squares and m0 = (N - sum M_i^2 / N) / (C - 1) the adjusted mean cluster
    size (Donner 1986, Int. Stat. Review 54:67-82; for equal sizes m0 = M and this is the
    ANOVA form of Kish's roh, Kish 1965, sec. 5.6).
    """
    y = np.asarray(y, dtype=float)
    codes = np.unique(np.asarray(cluster), return_inverse=True)[1]
    C, N = int(codes.max()) + 1, len(y)
    M = np.bincount(codes, minlength=C).astype(float)
    means = np.bincount(codes, weights=y, minlength=C) / M
    grand = y.mean()
    msb = float(np.sum(M * (means - grand) ** 2) / (C - 1))
    msw = float(np.sum((y - means[codes]) ** 2) / (N - C))
    m0 = (N - np.sum(M**2) / N) / (C - 1)
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
    """Cluster count, the distribution of cluster sizes and the ANOVA ICC of one target."""
    if frame.cluster is None:
        return None
    sizes = frame.cluster_sizes.astype(float)
    q = np.quantile(sizes, [0.0, 0.25, 0.5, 0.75, 1.0])
    icc = anova_icc(frame.y[:, variable], frame.cluster) if frame.C >= 2 and frame.N > frame.C else float("nan")
    return {"clusters": int(frame.C), "mean_size": float(sizes.mean()),
            "size_cv": float(sizes.std(ddof=1) / sizes.mean()) if frame.C > 1 else 0.0,
            "size_min": float(q[0]), "size_q1": float(q[1]), "size_median": float(q[2]), "size_q3": float(q[3]),
            "size_max": float(q[4]), "icc": float(icc)}


#: unsafe intervals whose reasons the report spells out
DETAIL = 200


def order_summary(frame, variable: int = 0, alpha: float | None = None, k_max: int | None = None) -> dict:
    """Periods of one target along the list order and the unsafe systematic intervals.

    ``periods`` is strongest first; ``unsafe_intervals`` lists the whole intervals 2 .. k_max
    (default min(N // 2, 5000)) the rule of :func:`samplewright.periodicity.interval_risks`
    flags, and ``unsafe_detail`` gives the reason for the first :data:`DETAIL` of them
    (interval, period, kind, drift, variance ratio).
    """
    from . import periodicity as P

    rep = P.frame_order_report(frame, variable, alpha=P.FALSE_ALARM if alpha is None else alpha)
    unsafe = P.unsafe_intervals(rep.periods, frame.N, k_max)
    detail = [r for k in unsafe[:DETAIL] for r in P.interval_risks(k, frame.N, rep.periods)]
    return {
        "method": rep.method,
        "false_alarm_rate": rep.alpha,
        "ordinates_tested": rep.tested,
        "fisher_g": None if not np.isfinite(rep.g) else float(rep.g),
        "fisher_p": float(rep.p_value),
        "periods": [p.as_dict() for p in rep.periods],
        "autocorrelation": [float(a) for a in rep.acf],
        "unsafe_intervals": unsafe,
        "unsafe_detail": [{k: (float(v) if isinstance(v, (float, np.floating)) else v) for k, v in r.items()}
                          for r in detail],
        "unsafe_rule": (f"k near a multiple of a period P (k/P = a + delta) or P near a multiple of k "
                        f"(b k/P = 1 + delta, b = 2..{P.MAX_PHASES}, fundamental periods), with "
                        f"strength x n x D^2 / (1 - f) >= {P.MATERIAL}, n = N/k, "
                        f"D = |sin(pi n delta) / (n sin(pi delta))|"),
    }


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value

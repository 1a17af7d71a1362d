"""samplewright inspect FRAME --target COL: what a frame looks like before a design is chosen.

Units and blank cells; per-stratum sizes, means and SDs; cluster sizes and the ANOVA ICC;
and, along the list order, the cycles of the target (after removing a smooth trend) with the
systematic intervals they make unsafe (see :mod:`samplewright.diagnostics.periodicity`).
"""

from __future__ import annotations

import json

NAME = "inspect"
HELP = "report a frame's strata, clusters and list-order cycles, and the systematic intervals to avoid"
#: intervals listed in the text report (the JSON lists them all)
SHOWN = 40


def _rate(text: str) -> float:
    import argparse

    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number, got {text!r}") from None
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"must lie strictly between 0 and 1, got {text!r}")
    return v


def add_arguments(p) -> None:
    from samplewright.cli.arguments import whole_number

    p.add_argument("frame", help="frame file (.csv, .tsv, .xlsx or .parquet)")
    p.add_argument("--target", required=True, help="study-variable column (required)")
    p.add_argument("--order", help="column giving the list order (default: the file order)")
    p.add_argument("--stratum", help="stratum column (default: none, one stratum)")
    p.add_argument("--cluster", help="cluster column (default: none, no clusters)")
    add_reading_arguments(p)
    p.add_argument("--json", action="store_true",
                   help="print one JSON object instead of the text report (default: off)")
    p.add_argument("--false-alarm", type=_rate, default=None,
                   help="chance of reporting a period on a list with no cycle (default: 0.01)")
    p.add_argument("--max-interval", type=whole_number(2), default=None,
                   help="largest interval k checked for safety (default: N / 2, at most 5000)")


def add_reading_arguments(p) -> None:
    """The [frame] reading keys as flags of the same names (see the README's frame keys)."""
    from samplewright.cli.arguments import whole_number

    g = p.add_argument_group("reading the frame file (default: detected from the file)")
    g.add_argument("--separator", help="column separator: ',' ';' '|' or 'tab' (default: detected from the file)")
    g.add_argument("--decimal", help="decimal mark: '.' or ',' (default: detected from the file)")
    g.add_argument("--thousands",
                   help="thousands separator: ',' '.' ' ' \"'\" or '' for none (default: detected from the file)")
    g.add_argument("--encoding", help="text encoding, e.g. utf-8, utf-16, cp1252 "
                                      "(default: detected: UTF-8, UTF-16 by BOM, else cp1252)")
    g.add_argument("--percent", action="store_true", default=None, help="read '12%%' as 0.12 (default: off)")
    g.add_argument("--sheet", help="spreadsheet sheet: a name, or a 0-based index given as digits (default: the first)")
    g.add_argument("--header-row", type=whole_number(1), default=None,
                   help="spreadsheet row (1-based) holding the column names (default: 1)")


def reading_flags(args) -> dict:
    """The reading flags given on the command line, checked as the [frame] keys are."""
    from samplewright.config.validate import reading_options

    given = {k: getattr(args, k) for k in ("separator", "decimal", "thousands", "encoding", "percent", "sheet",
                                           "header_row") if getattr(args, k) is not None}
    if given.get("separator") == "tab":
        given["separator"] = "\t"
    if isinstance(given.get("sheet"), str) and given["sheet"].isdigit():
        given["sheet"] = int(given["sheet"])
    return reading_options(given, NAME)


def frame_report(path, target: str, order=None, stratum=None, cluster=None, false_alarm=None,
                 max_interval=None, reading=None) -> dict:
    """The inspect report as a dict (what ``--json`` prints); ``reading`` holds the [frame] reading keys."""
    from samplewright.diagnostics.inspection import (
        cluster_summary,
        missing_counts,
        order_summary,
        stratum_summary,
    )
    from samplewright.population.frame import Frame
    from samplewright.population.reading import read_table

    df = read_table(path, **(reading or {}))
    blanks = missing_counts(df)
    frame = Frame.from_dataframe(df, target=target, stratum=stratum, cluster=cluster, order=order,
                                 missing="drop", source=str(path))
    y = frame.y[:, 0]
    rep = {
        "frame": str(path),
        "rows": len(df),
        "units": frame.N,
        "rows_dropped": int(frame.roles.get("dropped_rows", 0)),
        "target": target,
        "order": order or "file order",
        "missing": blanks,
        "target_summary": {"mean": float(y.mean()), "sd": float(y.std(ddof=1)) if frame.N > 1 else 0.0,
                           "min": float(y.min()), "max": float(y.max())},
        "strata": stratum_summary(frame) if stratum is not None else None,
        "clusters": cluster_summary(frame),
    }
    rep.update(order_summary(frame, 0, alpha=false_alarm, k_max=max_interval))
    return rep


def format_report(rep: dict) -> str:
    """The text form of :func:`frame_report`."""
    out = [f"frame {rep['frame']}: {rep['units']} units, target {rep['target']!r}, list order: {rep['order']}"]
    if rep["rows_dropped"]:
        out.append(f"  {rep['rows_dropped']} of {rep['rows']} rows dropped: target blank or not a number")
    if rep["missing"]:
        out.append("  blank cells: " + ", ".join(f"{k} {v}" for k, v in rep["missing"].items()))
    t = rep["target_summary"]
    out.append(f"  target: mean {t['mean']:.4g}, sd {t['sd']:.4g}, range {t['min']:.4g} .. {t['max']:.4g}")
    if rep["strata"]:
        out.append("")
        out.append(f"strata ({len(rep['strata'])}):")
        out.append(f"  {'stratum':<16} {'N_h':>8} {'mean':>12} {'S_h':>12}")
        for s in rep["strata"]:
            out.append(f"  {s['stratum']!s:<16} {s['units']:>8d} {s['mean']:>12.4g} {s['sd']:>12.4g}")
    c = rep["clusters"]
    if c:
        out.append("")
        out.append(f"clusters: {c['clusters']}, size mean {c['mean_size']:.3g} (CV {c['size_cv']:.2f}); "
                   f"min {c['size_min']:.0f}, quartiles {c['size_q1']:.0f} / {c['size_median']:.0f} / "
                   f"{c['size_q3']:.0f}, max {c['size_max']:.0f}")
        within = ", within strata" if rep["strata"] else ""
        out.append(f"  intra-cluster correlation (ANOVA estimator{within}): {c['icc']:.4f}")
    out.append("")
    out.append(f"list order: {rep['method']}; false-alarm rate {rep['false_alarm_rate']:g} "
               f"({rep['ordinates_tested']} ordinates tested)")
    if rep["grouped_list"]:
        out.append("  the list runs stratum by stratum or cluster by cluster: group means removed, not a trend")
    if not rep["periods"]:
        p = rep["fisher_p"]
        out.append(f"  no period found (largest ordinate: Fisher's g p = {p:.3g})")
    else:
        out.append(f"  {'period':>10} {'strength':>9} {'amplitude':>10} {'acf':>7} {'p-value':>9}  note")
        for p in rep["periods"]:
            note = f"harmonic of {p['harmonic_of']:.4g}" if p["harmonic_of"] else ""
            out.append(f"  {p['period']:>10.4g} {p['strength']:>9.3f} {p['amplitude']:>10.4g} "
                       f"{p['autocorrelation']:>7.3f} {p['p_value']:>9.2g}  {note}")
    acf = rep["autocorrelation"]
    if acf:
        lags = [1, 2, 3, 4, 5] + [round(p["period"]) for p in rep["periods"][:3]]
        shown = sorted({lag for lag in lags if 1 <= lag <= len(acf)})
        out.append("  autocorrelation of the detrended target: "
                   + ", ".join(f"lag {lag} {acf[lag - 1]:+.3f}" for lag in shown))
    unsafe = rep["unsafe_intervals"]
    out.append("")
    if unsafe:
        head = ", ".join(str(k) for k in unsafe[:SHOWN])
        more = f" ... ({len(unsafe)} in all)" if len(unsafe) > SHOWN else ""
        out.append(f"unsafe systematic intervals k: {head}{more}")
        out.append(f"  rule: {rep['unsafe_rule']}")
    else:
        out.append("unsafe systematic intervals k: none found")
    return "\n".join(out)


def main(args) -> int:
    rep = frame_report(args.frame, args.target, order=args.order, stratum=args.stratum, cluster=args.cluster,
                       false_alarm=args.false_alarm, max_interval=args.max_interval, reading=reading_flags(args))
    if args.json:
        print(json.dumps(rep, indent=2, default=_jsonable))
    else:
        print(format_report(rep))
    return 0


def _jsonable(v):
    import numpy as np  # here, not at start-up: the command line starts without numpy

    if isinstance(v, np.generic):
        return v.item()
    return str(v)

"""samplewright plan: closed-form sample sizes, stratified allocations and the optimal cluster take.

Three questions, chosen by the flags given:

- a mean (``--sd S --moe E``) or a proportion (``--proportion P --moe E``), with ``--population``,
  ``--confidence``, ``--deff`` and ``--response-rate``;
- a stratified allocation: strata from ``--strata FILE.csv`` (columns ``units``, ``sd``, optional
  ``cost`` and ``stratum``) or from ``--stratum-units/--stratum-sd/--stratum-cost`` lists, with
  ``--allocation RULE`` and one of ``--n``, ``--budget`` (and ``--fixed-cost``) or ``--moe``;
- the units per cluster of a two-stage sample: ``--icc RHO --cluster-cost C1 --unit-cost C2``
  (optionally ``--budget``).

``--json`` prints one JSON object holding every intermediate and the formula used.
"""

from __future__ import annotations

import json

from samplewright.errors import InputError

NAME = "plan"
HELP = "sample size for a mean or proportion, a stratified allocation, or the optimal cluster take"

STRATA_COLUMNS = ("stratum", "units", "sd", "cost")


def add_arguments(p) -> None:
    g = p.add_argument_group("a mean or a proportion")
    g.add_argument("--sd", type=float, help="population standard deviation S of the variable (a mean; default: none)")
    g.add_argument("--proportion", type=float,
                   help="expected proportion P, in (0, 1) (0.5 is the safe guess; default: none)")
    g.add_argument("--moe", type=float, help="margin of error E (half-width of the interval); with strata, "
                                             "the target for the stratified mean (default: none)")
    g.add_argument("--population", type=int, help="population size N (applies the finite population correction; "
                   "default: none, no correction)")
    g.add_argument("--confidence", type=float, default=0.95, help="confidence level (default: 0.95)")
    g.add_argument("--deff", type=float, default=1.0, help="design effect to inflate by (default: 1.0)")
    g.add_argument("--response-rate", type=float, default=1.0,
                   help="expected share of units that respond, in (0, 1] (default: 1.0)")
    s = p.add_argument_group("stratified allocation")
    s.add_argument("--strata", metavar="FILE.csv", help="strata table with columns units, sd and optionally "
                                                        "cost and stratum (a label) (default: none)")
    s.add_argument("--stratum-units", metavar="N1,N2,...", help="stratum sizes N_h, comma-separated (default: none)")
    s.add_argument("--stratum-sd", metavar="S1,S2,...", help="stratum standard deviations S_h (default: none)")
    s.add_argument("--stratum-cost", metavar="C1,C2,...", help="cost per unit c_h in each stratum (default: 1 each)")
    s.add_argument("--allocation", default="neyman",
                   help="equal, proportional, neyman or optimal (cost-weighted) (default: neyman)")
    s.add_argument("--n", type=int, help="total sample size to allocate (default: none, from --moe or --budget)")
    s.add_argument("--budget", type=float, help="total budget (stratified: c0 + sum c_h n_h; cluster: "
                                                "c0 + clusters x (c1 + c2 m)) (default: none)")
    s.add_argument("--fixed-cost", type=float, help="c0, the part of the budget that does not depend on n "
                                                    "(default: 0)")
    c = p.add_argument_group("units per cluster (two-stage)")
    c.add_argument("--icc", type=float, help="intra-cluster correlation rho, in (0, 1) (default: none)")
    c.add_argument("--cluster-cost", type=float, help="cost of taking one more cluster (c1) (default: none)")
    c.add_argument("--unit-cost", type=float, help="cost of one more unit inside a cluster (c2) (default: none)")
    p.add_argument("--json", action="store_true", help="print one JSON object with every intermediate (default: off)")


def _floats(text: str, flag: str) -> list[float]:
    out = []
    for i, part in enumerate(str(text).split(",")):
        try:
            out.append(float(part))
        except ValueError:
            raise InputError(f"{flag}: value {i + 1} ({part.strip()!r}) is not a number") from None
    return out


def _read_strata(path: str):
    from samplewright.config.validate import closest
    from samplewright.population.reading import read_table

    df = read_table(path)
    for col in df.columns:
        if col not in STRATA_COLUMNS:
            raise InputError(f"--strata {path!r}: unknown column {col!r}{closest(col, STRATA_COLUMNS)}")
    for col in ("units", "sd"):
        if col not in df.columns:
            raise InputError(f"--strata {path!r}: missing column {col!r} (need units and sd; cost optional)")
    import pandas as pd

    arrays = {}
    for col in ("units", "sd", "cost"):
        if col not in df.columns:
            continue
        num = pd.to_numeric(df[col], errors="coerce")
        if num.isna().any():
            row = int(num.isna().to_numpy().argmax()) + 2
            raise InputError(f"--strata {path!r}: column {col!r} row {row}: {df[col].iloc[row - 2]!r} "
                             f"is not a number")
        arrays[col] = num.to_numpy(dtype=float)
    labels = df["stratum"].astype(str).tolist() if "stratum" in df.columns else None
    return arrays["units"], arrays["sd"], arrays.get("cost"), labels


def _refuse(args, flags, mode):
    for f in flags:
        if getattr(args, f.lstrip("-").replace("-", "_")) is not None:
            raise InputError(f"{f} is not used when {mode}")


def main(args) -> int:
    from samplewright.decision import planning

    stratified = args.strata is not None or args.stratum_units is not None
    cluster = args.icc is not None or args.cluster_cost is not None or args.unit_cost is not None
    if stratified and cluster:
        raise InputError("give strata (--strata or --stratum-units) or a cluster take (--icc), not both")
    fixed_cost = 0.0 if args.fixed_cost is None else args.fixed_cost
    if stratified:
        _refuse(args, ("--sd", "--proportion", "--population"), "allocating strata")
        if args.deff != 1.0 or args.response_rate != 1.0:
            raise InputError("--deff and --response-rate are not used when allocating strata")
        if args.strata is not None:
            if args.stratum_units is not None or args.stratum_sd is not None or args.stratum_cost is not None:
                raise InputError("give strata either as --strata FILE.csv or as --stratum-* lists, not both")
            units, sd, cost, labels = _read_strata(args.strata)
        else:
            if args.stratum_sd is None:
                raise InputError("--stratum-units needs --stratum-sd (one standard deviation per stratum)")
            units = _floats(args.stratum_units, "--stratum-units")
            sd = _floats(args.stratum_sd, "--stratum-sd")
            cost = None if args.stratum_cost is None else _floats(args.stratum_cost, "--stratum-cost")
            labels = None
        res = planning.allocate_strata(units, sd, cost, rule=args.allocation, n=args.n, budget=args.budget,
                                       moe=args.moe, confidence=args.confidence, fixed_cost=fixed_cost,
                                       labels=labels)
        text = _strata_text(res)
    elif cluster:
        _refuse(args, ("--sd", "--proportion", "--population", "--moe", "--n"), "planning a cluster take")
        for f in ("icc", "cluster_cost", "unit_cost"):
            if getattr(args, f) is None:
                raise InputError(f"the cluster take needs --icc, --cluster-cost and --unit-cost "
                                 f"(missing --{f.replace('_', '-')})")
        if args.budget is None:
            _refuse(args, ("--fixed-cost",), "planning a cluster take without --budget")
        res = planning.optimal_cluster_take(args.cluster_cost, args.unit_cost, args.icc, budget=args.budget,
                                            fixed_cost=fixed_cost)
        text = _cluster_text(res)
    else:
        _refuse(args, ("--n", "--budget", "--fixed-cost"), "sizing a mean or a proportion")
        if args.moe is None:
            raise InputError("--moe is required (the margin of error to reach)")
        if args.sd is None and args.proportion is None:
            raise InputError("give --sd S (for a mean) or --proportion P (for a proportion), with --moe")
        res = planning.sample_size(args.moe, confidence=args.confidence, sd=args.sd, proportion=args.proportion,
                                   population=args.population, deff=args.deff, response_rate=args.response_rate)
        text = _size_text(res)
    print(json.dumps(res, indent=2) if args.json else text)
    return 0


def _g(v) -> str:
    return f"{v:.6g}"


def _size_text(r: dict) -> str:
    what = f"sd {_g(r['sd'])}" if r["quantity"] == "mean" else f"proportion {_g(r['proportion'])}"
    lines = [(f"sample size for a {r['quantity']} ({what}) to +-{_g(r['moe'])} at {r['confidence']:.0%} "
              f"confidence (z = {r['z']:.4f})"),
             f"  n0 = {r['formula'].split(';')[0][5:]} = {r['n0']:.2f}"]
    if r["deff"] != 1.0:
        lines.append(f"  x design effect {_g(r['deff'])}: {r['n_after_deff']:.2f}")
    if r["population"] is not None:
        lines.append(f"  finite population correction, N = {r['population']} ({r['fpc_formula']}): "
                     f"{r['n_after_fpc']:.2f}")
    if r["response_rate"] != 1.0:
        lines.append(f"  / response rate {_g(r['response_rate'])}: {r['n_after_response']:.2f}")
    lines.append(f"n = {r['n']} (rounded up)")
    lines += [f"note: {x}" for x in r["notes"]]
    return "\n".join(lines)


def _strata_text(r: dict) -> str:
    if r["mode"] == "fixed_n":
        head = f"total n = {r['n']}"
    elif r["mode"] == "budget":
        head = f"budget {_g(r['budget'])} (fixed part {_g(r['fixed_cost'])})"
    else:
        head = f"target variance {_g(r['target_variance'])}"
        if "target_moe" in r:
            head += f" (margin +-{_g(r['target_moe'])})"
    lines = [f"{r['rule']} allocation for {head}: {r['formula']}",
             f"{'stratum':>10} {'units':>8} {'sd':>10} {'cost':>8} {'share':>7} {'n (real)':>10} {'n':>7}"]
    for s in r["strata"]:
        lines.append(f"{s['stratum']:>10} {s['units']:>8} {_g(s['sd']):>10} {_g(s['cost']):>8} "
                     f"{s['share']:>7.4f} {s['n_real']:>10.2f} {s['n']:>7}" + ("  (whole)" if s["taken_whole"]
                                                                               else ""))
    lines.append(f"n = {r['n']}; variance of the mean {r['variance']:.6g}, SE {r['se']:.6g}, "
                 f"margin +-{r['moe']:.6g} at {r['confidence']:.0%}; cost {r['cost']:.6g}")
    return "\n".join(lines)


def _cluster_text(r: dict) -> str:
    lines = [(f"units per cluster: m_opt = sqrt((c1 / c2) (1 - rho) / rho) = sqrt(({_g(r['cluster_cost'])} / "
              f"{_g(r['unit_cost'])}) x (1 - {_g(r['icc'])}) / {_g(r['icc'])}) = {r['m_opt']:.3f} (Kish 1965)"),
             f"n = {r['n']} units per cluster; design effect 1 + (m - 1) rho = {r['deff']:.3f}"]
    if "budget" in r:
        fixed = f" less the fixed cost {_g(r['fixed_cost'])}" if r["fixed_cost"] else ""
        lines.append(f"budget {_g(r['budget'])}{fixed} pays for {r['clusters']} clusters x {r['n']} units = "
                     f"{r['units']} units (cost {_g(r['cost'])})")
    return "\n".join(lines)

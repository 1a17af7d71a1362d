"""Every figure of the report, drawn from a run's result tables only (never re-simulating).

One module per figure (:mod:`.sampling`, :mod:`.bias`, :mod:`.coverage`, :mod:`.se_check`,
:mod:`.intervals`, :mod:`.cost_precision`, :mod:`.allocation`, :mod:`.frame_order`), the shared look in
:mod:`.style` and the choice of rows in :mod:`.rows`.  Each plot function takes the tables it needs and
``ax=None`` (``fig=None`` for a faceted figure), draws on a new figure when none is given, returns it,
and never calls ``plt.show()``; in a notebook a returned Figure shows inline.

:data:`FIGURES` lists the report's figures in report order: file stem, heading, caption, and when a
run has the data for each.

Examples
--------
>>> from samplewright import scenario_from_dict, run
>>> sc = scenario_from_dict({"frame": {"synthetic": {"units": 300, "seed": 3}},
...                          "design": [{"label": "simple", "method": "srs", "n": 30}]})
>>> res = run(sc, replicates=100, seed=1)
>>> ax = coverage_plot(res.summary, confidence=0.95)
>>> ax.get_xlabel()
'Share of intervals that hold the true value (%)'
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from matplotlib.figure import Figure

from samplewright.config.validate import closest
from samplewright.report.figures.allocation import allocation_plot
from samplewright.report.figures.bias import bias_plot
from samplewright.report.figures.cost_precision import cost_precision_plot
from samplewright.report.figures.coverage import coverage_plot
from samplewright.report.figures.frame_order import frame_order_plot
from samplewright.report.figures.goal_map import goal_map_plot
from samplewright.report.figures.intervals import interval_panel, interval_plot, zip_order
from samplewright.report.figures.proposal_boundaries import boundaries_plot
from samplewright.report.figures.rows import all_rows, cell_label, primary_rows
from samplewright.report.figures.sampling import sampling_distribution
from samplewright.report.figures.screening_check import screening_plot
from samplewright.report.figures.se_check import se_plot
from samplewright.report.figures.stress_lines import stress_lines_plot
from samplewright.report.figures.stress_tiles import stress_tiles_plot
from samplewright.report.figures.style import (
    DPI,
    FIG_WIDTH,
    PALETTE,
    design_colours,
    design_order,
    estimator_name,
    new_figure,
    plain,
)
from samplewright.report.verdict import labels_of

__all__ = ["DPI", "FIGURES", "FIG_WIDTH", "PALETTE", "FigureSpec", "all_rows", "allocation_plot", "bias_plot",
           "boundaries_plot", "cell_label", "cost_precision_plot", "coverage_plot", "design_colours", "design_order",
           "estimator_name", "figure_names", "frame_order_plot", "goal_map_plot", "goals_of", "interval_panel",
           "interval_plot", "keep_sizes", "make_figure", "picks_of", "plain", "primary_rows", "sampling_distribution",
           "screening_plot", "se_plot", "stress_lines_plot", "stress_tiles_plot", "zip_order"]


@dataclass(frozen=True)
class FigureSpec:
    """A report figure: its file stem, heading, how to read it, and when a run has it."""

    name: str
    heading: str
    caption: str
    per_variable: bool
    available: Callable  # (result) -> bool
    draw: Callable  # (result, variable, keep) -> Figure
    #: the caption of an exact run (every possible sample, no simulation error), when it must differ
    exact_caption: str = ""


def _fig(ax_or_fig):
    return ax_or_fig if isinstance(ax_or_fig, Figure) else ax_or_fig.figure


def _labels(res) -> dict:
    """The run's words for money and units (run.json ``labels``, recommendation.json ``units``)."""
    return labels_of(res.info, res.recommendation if isinstance(res.recommendation, dict) else None)


def _confidence(res) -> float:
    return float((res.info or {}).get("confidence", 0.95))


def goals_of(res, variable=None) -> dict:
    """The run's budget and MOE goals (recommendation.json ``goal``, or run.json), for ``variable``.

    A goal about another study variable than ``variable`` is left out.
    """
    out = {}
    for src in ((res.recommendation or {}).get("goal"), (res.info or {}).get("goal")):
        if isinstance(src, dict):
            if variable is not None and src.get("variable") not in (None, variable):
                continue
            for k in ("budget", "moe"):
                if src.get(k) is not None and k not in out:
                    out[k] = src[k]
    return out


def picks_of(res, variable=None) -> dict:
    """The recommended points (for ``variable``, when given), named for the figure."""
    rec = res.recommendation or {}
    out = {}
    for key, name in (
        ("cheapest_meeting_moe", "cheapest meeting the margin"),
        ("best_within_budget", "most precise within budget"),
    ):
        p = rec.get(key)
        if isinstance(p, dict) and p.get("design") is not None:
            if variable is not None and p.get("variable") not in (None, variable):
                continue
            out[name] = p
    return out


def keep_sizes(res) -> dict:
    """design -> size to show when a figure cannot show every size (the recommended picks first)."""
    keep = {}
    for p in picks_of(res).values():
        keep.setdefault(p["design"], p.get("size"))
    return keep


def _var(res, variable):
    return variable if variable is not None else res.summary["variable"].iloc[0]


def _has_rows(res) -> bool:
    return res.summary is not None and len(res.summary) > 0


def _has_reps(res) -> bool:
    return _has_rows(res) and res.replicates is not None and len(res.replicates) > 0


def _order_entries(res) -> list:
    entries = (res.info or {}).get("frame_order") or []
    order = getattr(res, "frame_order", None)
    if order is None or not len(order):
        return []
    have = set(zip(order["order"], order["variable"]))
    return [e for e in entries if (e.get("order"), e.get("variable")) in have and e.get("periods")]


def _draw_order(res, var, keep):
    entries = _order_entries(res)
    fig = new_figure(0.3 + 3.6 * len(entries))
    axes = fig.subplots(len(entries), 1, squeeze=False)[:, 0]
    for ax, e in zip(axes, entries):
        frame_order_plot(res.frame_order, e, res.summary, ax=ax)
    return fig


def _shortlist(res):
    """The rehearsed shortlist of a ``propose`` run (rows of ``res.candidates``), or None."""
    cand = getattr(res, "candidates", None)
    if cand is None or "rehearsed_variance" not in cand:
        return None
    rows = cand[cand["shortlisted"].astype(bool) & cand["rehearsed_variance"].notna()]
    return rows if len(rows) else None


def _proposal_info(res) -> dict:
    return (res.info or {}).get("proposal") or {}


def _has_boundaries(res) -> bool:
    p = _proposal_info(res)
    return bool(p.get("stratifier_histogram") and p.get("boundaries"))


def stress_of(res) -> dict:
    """run.json's account of a stress run ({} without one): mode, points and the assumptions with their own values."""
    info = (res.info or {}).get("stress")
    ok = (isinstance(info, dict) and getattr(res, "stress", None) is not None and len(res.stress) > 0
          and getattr(res, "stress_verdict", None) is not None and isinstance(info.get("points"), int)
          and isinstance(info.get("mode"), str) and isinstance(info.get("assumptions"), list)
          and all(isinstance(a, dict) and {"name", "set", "values", "base"} <= set(a) for a in info["assumptions"]))
    return info if ok else {}


def _stress_lines(res) -> bool:
    s = stress_of(res)
    return bool(s) and (s.get("mode") == "one_at_a_time" or len(s.get("assumptions", [])) == 1)


def _stress_tiles(res) -> bool:
    s = stress_of(res)
    return bool(s) and s.get("mode") == "grid" and len(s.get("assumptions", [])) == 2


def _goal_variable(res):
    return ((res.recommendation or {}).get("goal") or {}).get("variable")


def _has_goal(res) -> bool:
    return _has_rows(res) and isinstance(res.recommendation, dict)


#: the report's figures, in report order (the first, "verdict", is the verdict card's chart)
FIGURES: dict[str, FigureSpec] = {spec.name: spec for spec in (
    FigureSpec(
        "verdict",
        "Which designs meet the goal",
        "Each design at each rehearsed size (its default analysis): expected cost against the margin of error "
        "the survey would publish (the average half-width of its intervals; the margin it achieves when the run "
        "does not have it). The shaded region meets the margin goal within the budget; the ring marks the pick.",
        False,
        _has_goal,
        lambda res, var, keep: _fig(goal_map_plot(res.summary, res.recommendation, _labels(res))),
    ),
    FigureSpec(
        "sampling_distribution",
        "Where the estimates fall",
        "One panel per design, each on its own scale: each shape is the spread of the design's estimates at one "
        "size over all simulated samples; the dashed line is the true population value. A narrow shape centred "
        "on the line is a precise, unbiased design; thick bar: the middle half of the estimates, thin line: the "
        "middle 95%.",
        True,
        _has_reps,
        lambda res, var, keep: sampling_distribution(res.replicates, res.summary, var, keep=keep,
                                                     labels=_labels(res)),
        "One panel per design, each on its own scale: each shape is the spread of the design's estimates at one "
        "size over every possible sample, weighted by its probability; the dashed line is the true population "
        "value. Thick bar: the middle half of the estimates, thin line: the middle 95%.",
    ),
    FigureSpec(
        "bias",
        "Bias",
        "How far the average estimate sits from the truth, with 95% simulation error bars (the bars shrink "
        "as "
        "replicates grow). A bar crossing zero means no bias that this many replicates can detect; the top "
        "axis "
        "gives the bias as a percentage of the true value.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(bias_plot(res.summary, var, keep=keep, labels=_labels(res))),
        "How far the average estimate over every possible sample sits from the truth: the exact bias of each "
        "design for this frame, with no simulation error. The top axis gives the bias as a percentage of the "
        "true value.",
    ),
    FigureSpec(
        "coverage",
        "Do the intervals keep their promise?",
        "The share of simulated samples whose confidence interval holds the true value, with its 95% "
        "simulation "
        "error bar; the dashed line is the promised level. A design whose bar lies wholly left of the line "
        "reports intervals that are too narrow: its stated precision cannot be trusted.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(coverage_plot(res.summary, _confidence(res), var, keep=keep)),
        "The share of all possible samples, weighted by their probability, whose confidence interval holds the "
        "true value; the dashed line is the promised level. The shares are exact: a design left of the line "
        "reports intervals too narrow for this frame.",
    ),
    FigureSpec(
        "se_check",
        "Does the standard-error formula tell the truth?",
        "Each point compares the standard error the analysis would report (vertical) with the real spread of "
        "the estimates over the simulated samples (horizontal). Points on the dashed diagonal are honest; "
        "points below it belong to designs whose formula understates the uncertainty.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(se_plot(res.summary, var, keep=keep, labels=_labels(res))),
        "Each point compares the standard error the analysis would report (vertical) with the real spread of "
        "the estimates over every possible sample (horizontal). Points on the dashed diagonal are honest; "
        "points below it belong to designs whose formula understates the uncertainty.",
    ),
    FigureSpec(
        "intervals",
        "Which intervals miss?",
        "A sample of each design's confidence intervals, ranked from the closest hit (bottom) to the widest "
        "miss (top); black intervals miss the true value (vertical line). Below the dashed line all "
        "intervals "
        "should hold the truth, above it all should miss: misses starting well below the line mean the "
        "intervals lie (Morris, White and Crowther 2019).",
        True,
        _has_reps,
        lambda res, var, keep: interval_plot(res.replicates, res.summary, _confidence(res), var, keep=keep,
                                             labels=_labels(res)),
    ),
    FigureSpec(
        "cost_precision",
        "Cost against precision",
        "Average field cost of one survey against its margin of error (the half-width an interval needs to "
        "hold "
        "the truth at the promised rate, bias included). Designs further down and to the left buy more "
        "precision for the money; the goals of the run, when it has them, are drawn as lines.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(
            cost_precision_plot(
                res.summary,
                res.frontier,
                goals_of(res, _var(res, var)),
                var,
                picks=picks_of(res, _var(res, var)),
                labels=_labels(res),
            )
        ),
    ),
    FigureSpec(
        "allocation",
        "Stratified allocation",
        "How each stratified design spreads its sample over the strata at each of its sizes (one panel per "
        "design, darker bars for larger samples), beside each stratum's share of the frame (grey). Neyman and "
        "cost-optimal allocations give more units to strata that vary more (or cost less to reach).",
        False,
        lambda res: res.allocation is not None and len(res.allocation) > 0,
        lambda res, var, keep: allocation_plot(res.allocation, res.summary),
    ),
    FigureSpec(
        "frame_order",
        "A cycle along the frame's list order",
        "The study variable along the order a systematic design walks, for its first few cycles; the dotted "
        "lines are one detected period apart. Each row of coloured ticks below marks the units one systematic "
        "sample takes from a start at the top of the list. Ticks that land on the same phase of the cycle at "
        "every pass mean the estimate depends on the start, and the usual standard error does not see it.",
        False,
        lambda res: len(_order_entries(res)) > 0,
        _draw_order,
    ),
    FigureSpec(
        "stress_lines",
        "What would change the pick: one assumption at a time",
        "Each design's margin of error (left) and mean cost (right) as one assumption moves, the others at the "
        "scenario's own values, at the size the goal asks of it (the number above a point; a gap where no size "
        "qualifies); a ring marks the design picked at each value, dashed lines the goal. Where the "
        "pick changes, the dotted line is the interpolated break-even value and the grey band its interval "
        "(+-2 standard errors; the bracketing values when the change cannot be interpolated). Every value "
        "reuses the same random samples, so the lines' differences are the assumption's effect, not noise.",
        False,
        _stress_lines,
        lambda res, var, keep: stress_lines_plot(res.stress, res.stress_verdict, res.break_even,
                                                 stress_of(res)["assumptions"], _goal_variable(res)),
    ),
    FigureSpec(
        "stress_tiles",
        "What would change the pick: two assumptions together",
        "The design picked at every combination of the two assumptions' values (colour) and its size "
        "(number); grey where no rehearsed design meets the goal.",
        False,
        _stress_tiles,
        lambda res, var, keep: _fig(stress_tiles_plot(res.stress_verdict,
                                                      [a["name"] for a in stress_of(res)["assumptions"]],
                                                      design_order(res.stress))),
    ),
    FigureSpec(
        "proposal_check",
        "Screening check",
        "Each design the proposal rehearsed: the standard error its closed form anticipated on the frame "
        "(horizontal) against the spread of its estimates over the rehearsed samples (vertical), with 95% "
        "simulation error bars. Points on the dashed line mean the screen ranked the designs on honest numbers.",
        False,
        lambda res: _shortlist(res) is not None,
        lambda res, var, keep: _fig(screening_plot(_shortlist(res))),
    ),
    FigureSpec(
        "proposal_boundaries",
        "Where the proposed strata cut",
        "The distribution of the column the banded designs stratify on (grey), and below it one row per "
        "shortlisted banded design with a tick at each of its stratum boundaries. Boundaries crowd where the "
        "units are many and spread where they are few and large; a take-all stratum starts at the last tick.",
        False,
        _has_boundaries,
        lambda res, var, keep: boundaries_plot(_proposal_info(res)["stratifier_histogram"],
                                               _proposal_info(res)["boundaries"], _proposal_info(res)["stratifier"]),
    ),
)}


def figure_names(res) -> list[str]:
    """Names of the figures this run can draw, in report order."""
    return [n for n, spec in FIGURES.items() if spec.available(res)]


def make_figure(res, name: str, variable=None) -> Figure:
    """Draw figure ``name`` of a run (a :class:`~samplewright.results.result.RunResult`)."""
    if name not in FIGURES:
        raise KeyError(f"no figure named {name!r}{closest(name, list(FIGURES))}")
    spec = FIGURES[name]
    if not spec.available(res):
        raise ValueError(f"this run has no data for the {name!r} figure")
    return spec.draw(res, variable, keep_sizes(res))

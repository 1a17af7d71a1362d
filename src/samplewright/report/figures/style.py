"""The look shared by every figure: colours, sizes, fonts, legends, and the escaping of labels.

One colour per design, the same in every figure, from the Okabe-Ito palette (Okabe & Ito
2008, "Color Universal Design"), which stays distinguishable under the common forms of
colour blindness.  Figures are :data:`FIG_WIDTH` inches wide (the text width of an A4 page
with 2 cm margins) at :data:`DPI` dots per inch, with fonts of 8-10 pt at that size.
Figures are :class:`matplotlib.figure.Figure` objects saved with the Agg renderer: pyplot is never
imported, so no backend is selected and no global figure state is touched.
"""

from __future__ import annotations

import functools

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from samplewright.report.names import estimator_name
from samplewright.report.verdict import unit_of

#: Okabe-Ito colours in the order designs receive them (black is kept for "misses" and truth lines)
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#999999")
MISS_COLOUR = "#000000"
TRUTH_COLOUR = "#000000"
#: figure width in inches: A4 (21 cm) less 2 cm margins each side is 17 cm = 6.69 in
FIG_WIDTH = 6.5
DPI = 150
#: z for the 95% Monte Carlo error bars drawn around each simulated measure
MC_Z = 1.959964
MARKERS = ("o", "s", "^", "D", "v", "P", "X")
#: labelled ticks per decade on a log axis: 1-2-5, or a finer set when the axis spans too little for three
LOG_SUBS = ((1.0, 2.0, 5.0), (1.0, 1.5, 2.0, 3.0, 5.0, 7.0))
RC = {
    "font.size": 8.5,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "axes.axisbelow": True,
    "font.family": "DejaVu Sans",
    "svg.fonttype": "none",
}


def styled(fn):
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(RC):
            return fn(*args, **kwargs)

    return wrapper


def new_figure(height: float, width: float = FIG_WIDTH) -> Figure:
    """A blank figure of the report's width (constrained layout, Agg canvas)."""
    with matplotlib.rc_context(RC):
        fig = Figure(figsize=(width, height), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)  # attaches itself: text can be measured (label placement) without pyplot
    return fig


def axes_or_new(ax, height: float):
    if ax is not None:
        return ax
    return new_figure(height).add_subplot()


def design_order(summary: pd.DataFrame) -> list[str]:
    """Design labels in the order the scenario lists them (first appearance in the summary)."""
    return list(dict.fromkeys(summary["design"].tolist()))


def design_colours(designs) -> dict[str, str]:
    """One Okabe-Ito colour per design label, in order (cycling past eight designs)."""
    return {d: PALETTE[i % len(PALETTE)] for i, d in enumerate(designs)}


def plain(text) -> str:
    """``text`` as matplotlib shows it literally: every ``$`` escaped, so no label is read as mathtext.

    Every text from the run's data (design, variable, stratum, order names) passes through
    here before a figure sees it; a label such as ``$x^$`` would otherwise fail at drawing time.

    Examples
    --------
    >>> print(plain("cost $x^$"))
    cost \\$x^\\$
    """
    return str(text).replace("$", r"\$")


def marker_map(rows: pd.DataFrame) -> dict[str, str]:
    return {e: MARKERS[i % len(MARKERS)] for i, e in enumerate(dict.fromkeys(rows["estimator"]))}


def quantity(variable, labels: dict | None = None) -> str:
    """A variable as an axis names it, with its unit from the scenario's ``[labels]`` when given
    (``"apples, kg"``), escaped for matplotlib."""
    unit = unit_of(labels or {}, variable)
    return plain(f"{variable}, {unit}" if unit else variable)


def estimator_legend(ax, markers, above: bool = True):
    if len(markers) > 1:
        handles = [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=5, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
        if above:
            ax.legend(
                handles=handles,
                loc="lower left",
                bbox_to_anchor=(0.0, 1.0),
                ncol=len(handles),
                frameon=False,
                borderaxespad=0.2,
            )
        else:
            ax.legend(
                handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, title="estimator"
            )


def design_legend(ax, designs, colours, markers=None, loc="best"):
    handles = [
        Line2D([], [], color=colours[d], marker="o", linestyle="", markersize=6, label=plain(d)) for d in designs
    ]
    if markers and len(markers) > 1:
        handles += [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=6, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
    ax.legend(handles=handles, loc=loc, frameon=False)


def number_text(value: float) -> str:
    """A tick label: thousands separators from 1,000 up, else the shortest form (``0.05``, ``250``)."""
    return f"{value:,.0f}" if abs(value) >= 1000 else f"{value:g}"


def readable_log_axis(axis, lo: float, hi: float) -> None:
    """Put ``axis`` (an x or y axis already on a log scale, showing ``lo`` to ``hi``) on plainly written
    ticks, at least three of them labelled: 1-2-5 per decade, or a finer set when those are too few."""
    for subs in LOG_SUBS:
        ticks = [m * 10.0**e for e in range(int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi))) + 1)
                 for m in subs]
        if sum(lo <= v <= hi for v in ticks) >= 3:
            break
    axis.set_major_locator(LogLocator(base=10.0, subs=subs))
    axis.set_major_formatter(FuncFormatter(lambda v, _pos: number_text(v)))
    axis.set_minor_formatter(NullFormatter())

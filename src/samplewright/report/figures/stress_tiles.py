"""What would change the pick, two assumptions at once: a tile map of the design picked at each grid point."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.colors import ListedColormap
from matplotlib.patches import Patch

from samplewright.report.figures.style import axes_or_new, design_colours, plain, styled

NONE_COLOUR = "#eeeeee"


@styled
def stress_tiles_plot(verdict: pd.DataFrame, names: list[str], designs: list[str], ax=None):
    """Tiles over the grid of two assumptions (``names``: horizontal, vertical), coloured by the picked design
    (grey: nothing qualifies), each tile labelled with the pick's size.  ``designs``: every design, in order."""
    x_name, y_name = names
    xs = sorted(verdict[x_name].unique())
    ys = sorted(verdict[y_name].unique())
    colours = design_colours(designs)
    order = ["none", *designs]
    grid = np.zeros((len(ys), len(xs)), dtype=int)
    ax = axes_or_new(ax, 1.2 + 0.45 * len(ys))
    for r in verdict.itertuples(index=False):
        i, j = ys.index(getattr(r, y_name)), xs.index(getattr(r, x_name))
        design = r.design if isinstance(r.design, str) else "none"
        grid[i, j] = order.index(design)
        if design != "none":
            ax.text(j, i, f"{int(r.size)}", ha="center", va="center", fontsize=7.5, color="white")
    ax.imshow(grid, cmap=ListedColormap([NONE_COLOUR] + [colours[d] for d in designs]), vmin=0,
              vmax=len(order) - 1, origin="lower", aspect="auto")
    ax.set_xticks(range(len(xs)), [f"{x:g}" for x in xs])
    ax.set_yticks(range(len(ys)), [f"{y:g}" for y in ys])
    ax.set_xlabel(plain(x_name))
    ax.set_ylabel(plain(y_name))
    ax.grid(False)
    ax.set_title("The design picked at each combination (number: its size)", loc="left")
    shown = sorted(set(grid.ravel()))
    ax.legend(handles=[Patch(color=NONE_COLOUR if k == 0 else colours[order[k]],
                             label="nothing qualifies" if k == 0 else plain(order[k])) for k in shown],
              loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return ax

"""The figures stay readable: panels per design, every size of a sweep, labelled log ticks, labels that
cover nothing, and a report page that prints on A4 and scrolls on a phone.

The checks are geometric (tick counts, panel counts, bar counts, bounding boxes measured by matplotlib's
Agg renderer) on runs of invented frames and of the bundled scenarios; the spreads compared are those of
a simple random sample, whose standard error shrinks as sqrt((1 - n/N) / n) (Cochran 1977, eq. 2.12).
"""

from __future__ import annotations

import itertools
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib import cbook
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.text import Text

import samplewright
from samplewright import Frame
from samplewright.report import figures as F

ROOT = Path(__file__).resolve().parents[1]
#: bundled scenarios with a cost model (the cost-precision figure has something to label)
COSTED = ("district_energy", "expense_audit_pps", "orchard_blocks", "water_quality")


def _labelled_ticks(axis) -> list[str]:
    """The labelled major ticks an axis shows inside its view (after a draw)."""
    lo, hi = sorted(axis.get_view_interval())
    return [t.get_text() for t, v in zip(axis.get_majorticklabels(), axis.get_majorticklocs())
            if t.get_text() and lo <= v <= hi]


@pytest.fixture(scope="module")
def spread_run():
    """Two simple random samples of one frame whose spreads differ about thirteen-fold:
    sqrt((1 - 20/5000) / 20) / sqrt((1 - 2000/5000) / 2000) = 12.9 (Cochran 1977, eq. 2.12)."""
    sc = samplewright.scenario_from_dict({
        "frame": {"synthetic": {"units": 5000, "seed": 4}},
        "design": [{"label": "small", "method": "srs", "n": 20},
                   {"label": "large", "method": "srs", "n": 2000}],
    })
    return samplewright.run(sc, replicates=200, seed=3)


def test_sampling_distribution_has_a_panel_per_design_on_its_own_scale(spread_run):
    fig = spread_run.figure("sampling_distribution")
    axes = [ax for ax in fig.axes if ax.get_visible()]
    assert len(axes) == 2  # one panel per design
    truth = float(spread_run.summary["truth"].iloc[0])
    widths = {}
    for ax, design in zip(axes, ("small", "large")):
        assert ax.get_title(loc="left") == design
        lo, hi = ax.get_xlim()
        # the truth is marked in every panel: a vertical line at the true value
        assert any(np.allclose(line.get_xdata(), truth) for line in ax.get_lines())
        est = spread_run.replicates.query("design == @design")["estimate"]
        middle = np.subtract(*np.quantile(est, [0.975, 0.025]))
        widths[design] = hi - lo
        assert middle / (hi - lo) > 0.3, (design, middle, hi - lo)  # the middle 95% fills its panel
    assert widths["small"] / widths["large"] > 5  # each panel keeps its own scale


def test_allocation_shows_every_size_of_a_sweep():
    sc = samplewright.scenario_from_dict({
        "frame": {"synthetic": {"units": 2000, "seed": 2, "strata": [
            {"name": "a", "share": 0.5, "mean": 10, "sd": 2}, {"name": "b", "share": 0.3, "mean": 20, "sd": 6},
            {"name": "c", "share": 0.2, "mean": 30, "sd": 12}]}},
        "design": [{"label": "proportional", "method": "stratified", "n": [60, 120, 240]},
                   {"label": "neyman", "method": "stratified", "n": [90, 180], "allocation": "neyman"}],
    })
    res = samplewright.run(sc, replicates=20, seed=1)
    fig = res.figure("allocation")
    assert [ax.get_title(loc="left") for ax in fig.axes] == ["proportional", "neyman"]
    for ax, sizes in zip(fig.axes, ((60, 120, 240), (90, 180))):
        assert len(ax.patches) == 3 * (len(sizes) + 1)  # per stratum: the frame's share and every size
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        assert legend == ["share of the frame"] + [f"n = {n}" for n in sizes]
        # each bar is labelled with its units; per size they add up to the size
        counts = [int(t.get_text()) for t in ax.texts]
        assert [sum(counts[i:i + 3]) for i in range(0, len(counts), 3)] == list(sizes)


@pytest.mark.parametrize("name", ["expense_audit_pps", "orchard_blocks"])
def test_se_check_on_log_axes_labels_at_least_three_ticks(name):
    res = samplewright.run(samplewright.load_scenario(ROOT / "scenarios" / f"{name}.toml"), replicates=100)
    ax = res.figure("se_check").axes[0]
    ax.figure.draw_without_rendering()
    assert ax.get_xscale() == ax.get_yscale() == "log"
    for axis in (ax.xaxis, ax.yaxis):
        labels = _labelled_ticks(axis)
        assert len(labels) >= 3, labels
        assert all(re.fullmatch(r"[\d,.]+", t) for t in labels), labels  # plain numbers, no 10^k


def test_a_log_axis_spanning_less_than_a_decade_still_gets_three_labels():
    fig = F.new_figure(3.0)
    ax = fig.add_subplot()
    ax.set_yscale("log")
    ax.set_ylim(3.0, 9.0)
    F.style.readable_log_axis(ax.yaxis, 3.0, 9.0)
    fig.draw_without_rendering()
    assert len(_labelled_ticks(ax.yaxis)) >= 3


def _segments(ax) -> list[np.ndarray]:
    """Every drawn line of the Axes as a polyline in pixels (steps expanded as drawn)."""
    out = []
    for line in ax.get_lines():
        if line.get_linestyle() in ("None", "", " "):
            continue
        xy = np.asarray(line.get_xydata(), float)
        if line.get_drawstyle() == "steps-post":
            xy = np.asarray(cbook.pts_to_poststep(xy[:, 0], xy[:, 1])).T
        out.append(line.get_transform().transform(xy))
    return out


def _crosses(box, polyline) -> bool:
    """Whether a polyline passes through the box: checked on points every half pixel along it."""
    for (x0, y0), (x1, y1) in itertools.pairwise(polyline):
        if not np.all(np.isfinite([x0, y0, x1, y1])):
            continue
        steps = int(max(abs(x1 - x0), abs(y1 - y0)) * 2) + 2
        x, y = np.linspace(x0, x1, steps), np.linspace(y0, y1, steps)
        if np.any((x > box.x0) & (x < box.x1) & (y > box.y0) & (y < box.y1)):
            return True
    return False


@pytest.mark.parametrize("name", COSTED)
def test_cost_precision_labels_cover_nothing(name):
    res = samplewright.run(samplewright.load_scenario(ROOT / "scenarios" / f"{name}.toml"), replicates=100)
    ax = res.figure("cost_precision").axes[0]
    fig = ax.figure
    renderer = FigureCanvasAgg(fig).get_renderer()  # measured as the report's PNG is drawn
    fig.draw_without_rendering()
    frame = ax.get_window_extent(renderer)
    texts = [t for t in ax.texts if t.get_visible() and t.get_text()]
    assert texts, "no label drawn"
    for pick in F.picks_of(res, res.summary["variable"].iloc[0]):  # every recommended point is named
        assert any(pick in t.get_text() for t in texts), pick
    boxes = [Text.get_window_extent(t, renderer) for t in texts]
    for t, b in zip(texts, boxes):
        assert frame.x0 <= b.x0 and b.x1 <= frame.x1 and frame.y0 <= b.y0 and b.y1 <= frame.y1, t.get_text()
        for poly in _segments(ax):
            assert not _crosses(b, poly), f"{t.get_text()!r} covers a line"
        for line in ax.get_lines():
            if line.get_marker() in ("None", "", " ", None):
                continue
            r = line.get_markersize() * fig.dpi / 72 / 2
            for px, py in line.get_transform().transform(np.asarray(line.get_xydata(), float)):
                hit = b.x0 < px + r and px - r < b.x1 and b.y0 < py + r and py - r < b.y1
                assert not hit, f"{t.get_text()!r} covers a point"
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b), "two labels overlap"


def test_report_page_prints_on_a4_and_its_summary_scrolls(tmp_path):
    sc = samplewright.scenario_from_dict({"frame": {"synthetic": {"units": 300, "seed": 1}},
                                          "design": [{"label": "simple", "method": "srs", "n": 30}]})
    samplewright.run(sc, replicates=50, seed=1).write(tmp_path / "run", report=True)
    page = (tmp_path / "run" / "report.html").read_text(encoding="utf-8")
    css = page[page.index("<style>"):page.index("</style>")]
    assert re.search(r"@page\s*\{[^}]*size:\s*A4", css)
    prints = css[css.index("@media print"):]
    assert re.search(r"figure[^{]*\{[^}]*break-inside:\s*avoid", prints)
    assert re.search(r"\.wide\s*\{\s*overflow-x:\s*auto", css)
    summary = page[page.index('<section id="summary">'):page.index("</section>", page.index('id="summary"'))]
    assert re.search(r'<div class="wide"><table>', summary)  # the wide table scrolls inside its wrapper


def test_exact_report_says_the_exact_thing(tmp_path):
    y = [1.0, 1.0, 2.0, 1.0, 1.0, 3.0, 1.0, 40.0]  # one large unit: small samples under-cover
    sc = samplewright.scenario_from_dict({"frame": {"synthetic": {"units": 8}},  # replaced by frame=
                                          "design": [{"label": "simple", "method": "srs", "n": [2, 3]}]})
    res = samplewright.run(sc, frame=Frame.from_dataframe(pd.DataFrame({"y": y}), target="y"), exact=True)
    res.write(tmp_path / "run", report=True)
    page = (tmp_path / "run" / "report.html").read_text(encoding="utf-8").lower()
    for words in ("monte carlo standard errors", "beyond simulation error", "simulated samples",
                  "cannot be trusted", "simulation error bar"):
        assert words not in page, words
    assert "every possible sample" in page

"""Labels set beside their points without covering one another, the drawn lines and points, or the axes' edges.

A simple repel step: each label tries a ring of places around its point, nearest first, and keeps the
first whose box, as the renderer measures it, is clear of every label placed before, every line segment
and marker of the Axes, and lies inside the Axes.  Labels that must be shown (the recommendation) are
placed first; a size number with no clear place is left out rather than drawn over something.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from matplotlib import cbook
from matplotlib.text import Text

#: distances (points) from the point tried in turn, and the directions tried at each distance; from
#: LEADER_FROM on, a thin line leads from the label back to its point
DISTANCES = (4.0, 9.0, 16.0, 26.0, 38.0, 52.0, 70.0, 90.0)
LEADER_FROM = 16.0
DIRECTIONS = ((1, 1), (1, -1), (-1, 1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1),
              (1, 0.5), (1, -0.5), (-1, 0.5), (-1, -0.5), (0.5, 1), (0.5, -1), (-0.5, 1), (-0.5, -1))
#: clearance in pixels kept around every box
PAD = 1.5


@dataclass(frozen=True)
class PointLabel:
    """A text to set beside the data point (x, y); ``required`` labels are kept even with no clear place."""

    text: str
    x: float
    y: float
    colour: str
    fontsize: float
    required: bool = False


def _segments(ax) -> np.ndarray:
    """Every drawn line segment of the Axes in pixels, as rows (x0, y0, x1, y1)."""
    out = []
    for line in ax.get_lines():
        if not line.get_visible() or line.get_linestyle() in ("None", "", " "):
            continue
        xy = np.asarray(line.get_xydata(), float)
        if line.get_drawstyle() == "steps-post" and len(xy) > 1:
            xy = np.asarray(cbook.pts_to_poststep(xy[:, 0], xy[:, 1])).T
        px = line.get_transform().transform(xy)
        seg = np.hstack([px[:-1], px[1:]])
        out.append(seg[np.isfinite(seg).all(axis=1)])
    return np.vstack(out) if out else np.empty((0, 4))


def _markers(ax) -> np.ndarray:
    """Every drawn marker of the Axes in pixels, as boxes (x0, y0, x1, y1)."""
    out = []
    for line in ax.get_lines():
        if not line.get_visible() or line.get_marker() in ("None", "", " ", None):
            continue
        px = line.get_transform().transform(np.asarray(line.get_xydata(), float))
        r = line.get_markersize() * ax.figure.dpi / 72.0 / 2.0
        boxes = np.hstack([px - r, px + r])
        out.append(boxes[np.isfinite(boxes).all(axis=1)])
    return np.vstack(out) if out else np.empty((0, 4))


def _boxes_hit(box, boxes: np.ndarray) -> int:
    """How many of ``boxes`` overlap ``box``."""
    if not len(boxes):
        return 0
    x0, y0, x1, y1 = box
    return int(np.sum((boxes[:, 0] < x1) & (boxes[:, 2] > x0) & (boxes[:, 1] < y1) & (boxes[:, 3] > y0)))


def _segments_hit(box, seg: np.ndarray) -> int:
    """How many segments cross the box (Liang-Barsky clipping, all segments at once)."""
    if not len(seg):
        return 0
    x0, y0, x1, y1 = box
    dx, dy = seg[:, 2] - seg[:, 0], seg[:, 3] - seg[:, 1]
    lo, hi = np.zeros(len(seg)), np.ones(len(seg))
    inside = np.ones(len(seg), bool)
    for p, q in ((-dx, seg[:, 0] - x0), (dx, x1 - seg[:, 0]), (-dy, seg[:, 1] - y0), (dy, y1 - seg[:, 1])):
        flat = p == 0
        inside &= ~(flat & (q < 0))
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(flat, 0.0, q / np.where(flat, 1.0, p))
        lo = np.where(~flat & (p < 0), np.maximum(lo, t), lo)
        hi = np.where(~flat & (p > 0), np.minimum(hi, t), hi)
    return int(np.sum(inside & (lo <= hi)))


def _text_box(ann, renderer) -> tuple:
    """The padded box of an annotation's text alone (without its leader line), in pixels."""
    ann.update_positions(renderer)  # the text's place follows its offset only once updated
    b = Text.get_window_extent(ann, renderer)
    return (b.x0 - PAD, b.y0 - PAD, b.x1 + PAD, b.y1 + PAD)


def _leader_hits(ann, offset, taken: np.ndarray) -> int:
    """How many labels placed before the leader line from the point to the label at ``offset`` crosses."""
    if np.hypot(*offset) < LEADER_FROM:
        return 0
    x0, y0 = ann.get_transform().transform(ann.xy)
    scale = ann.figure.dpi / 72.0
    seg = np.array([[x0, y0, x0 + offset[0] * scale, y0 + offset[1] * scale]])
    return sum(_segments_hit(box, seg) for box in taken)


def _move(ann, offset, ha, va) -> None:
    """Put the label at ``offset`` (points) from its point, aligned away from it; lead back when far."""
    ann.xyann = offset
    ann.set_horizontalalignment(ha)
    ann.set_verticalalignment(va)
    ann.arrow_patch.set_visible(bool(np.hypot(*offset) >= LEADER_FROM))


def _candidates():
    for dist in DISTANCES:
        for dx, dy in DIRECTIONS:
            ha = "left" if dx > 0 else "right" if dx < 0 else "center"
            va = "bottom" if dy > 0 else "top" if dy < 0 else "center"
            yield (dx * dist, dy * dist), ha, va


def place_labels(ax, labels: list[PointLabel]) -> list:
    """Annotate ``ax`` with ``labels`` (required ones first), each where it covers nothing; returns the
    annotations drawn.  The figure is laid out once first, so the boxes measured are the final ones."""
    fig = ax.figure
    fig.draw_without_rendering()
    # the report's figures carry an Agg canvas; a user's figure on another canvas (PDF, SVG) is measured
    # by matplotlib's own renderer lookup
    renderer = fig.canvas.get_renderer() if hasattr(fig.canvas, "get_renderer") else fig._get_renderer()
    frame = ax.get_window_extent(renderer)
    segments, markers = _segments(ax), _markers(ax)
    taken = np.empty((0, 4))
    drawn = []
    for label in sorted(labels, key=lambda lab: not lab.required):
        ann = ax.annotate(label.text, (label.x, label.y), textcoords="offset points", xytext=(0, 0),
                          fontsize=label.fontsize, color=label.colour,
                          arrowprops={"arrowstyle": "-", "color": label.colour, "linewidth": 0.6, "shrinkA": 1,
                                      "shrinkB": 4})
        ann.set_in_layout(False)  # the labels must not move the Axes they were measured in
        fallback, fewest = None, np.inf  # a required label with no clear place covers the least it can
        for offset, ha, va in _candidates():
            _move(ann, offset, ha, va)
            box = _text_box(ann, renderer)
            if not (frame.x0 <= box[0] and box[2] <= frame.x1 and frame.y0 <= box[1] and box[3] <= frame.y1):
                continue
            covered = (_boxes_hit(box, taken) + _boxes_hit(box, markers) + _segments_hit(box, segments)
                       + _leader_hits(ann, offset, taken))
            if not covered:
                break
            if covered < fewest:
                fallback, fewest = (offset, ha, va), covered
        else:
            if not label.required or fallback is None:
                ann.remove()
                continue
            _move(ann, *fallback)
            box = _text_box(ann, renderer)
        taken = np.vstack([taken, box])
        drawn.append(ann)
    return drawn

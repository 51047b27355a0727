"""The penalty figure's read-out box: see-through, and placed where it covers the fewest curve points.

Checked by geometry alone: every curve's pixel points (``Figure.curves``, the very polylines drawn)
against the box's rectangle, on invented paths whose top band is crowded and whose middle is empty.
"""

from __future__ import annotations

import numpy as np

from regbench.report.pathfig import FigureData, build_figure, figure_svg


def _crowded_top(highlight=None):
    # Six invented columns: five flat near the top of the scale, one flat at the bottom; nothing between.
    alphas = np.logspace(1, -3, 40)
    levels = np.array([1.0, 0.97, 0.94, 0.91, 0.88, -1.0])
    coef = np.tile(levels, (alphas.size, 1))
    cols = [f"probe_{j}" for j in range(levels.size)]
    return FigureData(alphas=alphas, coef=coef, columns=cols, alpha=0.5, highlight=highlight)


def _box(fig):
    box = next(p for p in fig.prims if p.kind == "rect" and p.role == "readout")
    (x, y), = box.pts
    return x, y, x + box.w, y + box.h


def _covered(fig, box) -> int:
    x0, y0, x1, y1 = box
    n = 0
    for cx, cy in fig.curves.values():
        gx = np.arange(x0, x1, 1.0)
        order = np.argsort(cx)
        gy = np.interp(gx, np.asarray(cx)[order], np.asarray(cy)[order])
        n += int(((gy >= y0) & (gy <= y1)).sum())
    return n


def test_the_read_out_covers_no_curve_when_the_paths_leave_room():
    fig = build_figure(_crowded_top(), 1000, 560)
    box = _box(fig)
    assert _covered(fig, box) == 0
    # At the top of the paths, where the read-out used to sit, it would have covered the top curves.
    top = fig.regions["paths"][1] + 4
    assert _covered(fig, (box[0], top, box[2], top + (box[3] - box[1]))) > 0


def test_the_read_out_paper_is_see_through_and_its_frame_and_words_are_not():
    fig = build_figure(_crowded_top(), 1000, 560)
    i = next(k for k, p in enumerate(fig.prims) if p.kind == "rect" and p.role == "readout")
    paper, frame = fig.prims[i - 1], fig.prims[i]
    assert paper.kind == "rect" and paper.pts == frame.pts and paper.fill and 0.5 <= paper.opacity < 0.9
    assert frame.fill is None and frame.stroke and frame.opacity == 1.0
    words = [p for p in fig.prims[i + 1:] if p.kind == "text"]
    assert words and all(p.opacity == 1.0 for p in words)
    # The report's SVG keeps the paper see-through too.
    svg = figure_svg(fig)
    assert f'opacity="{paper.opacity:.2f}"' in svg

"""Names along a plot's axis, as many as fit without running together.

A plot with one bar or band per column names each on its side.  With a thousand columns
the names would sit on top of each other, and an axis that measures and draws a
thousand texts holds the GUI thread for a tenth of a second at every paint.  So an axis
names every k-th category only, k chosen from the axis's length in pixels, and chooses
again when the plot is resized or zoomed (the categories shown then are named).  The
categories left unnamed are still drawn; the panels' tables list every one.
"""

from __future__ import annotations

import bisect
import math

import numpy as np
from PySide6 import QtGui, QtWidgets

#: Pixels kept between two names down a side (beyond a line of text) and along a bottom.
SIDE_GAP_PX = 1
BOTTOM_GAP_PX = 6


def name_categories(plot, side: str, positions, names, weight=None) -> None:
    """Name the categories at ``positions`` (view coordinates) with ``names`` along ``side`` of ``plot``.

    ``side`` is "left" (names a line of text apart) or "bottom" (names their widest text apart).
    Only as many as fit are named, done again on every resize and change of the shown range:
    without ``weight`` every k-th in order of position, k the smallest that keeps them apart;
    with ``weight`` (one number per category, such as its longest bar) the heaviest first, each
    one that keeps its distance from those already named, so the bars that stand out carry
    their names.
    """
    item = plot.getPlotItem() if hasattr(plot, "getPlotItem") else plot
    axis = item.getAxis(side)
    positions = np.asarray(positions, dtype=float)
    order = np.argsort(positions, kind="stable")
    weight = None if weight is None else np.nan_to_num(np.asarray(weight, dtype=float)[order], nan=-np.inf)
    axis._category_weight = weight
    axis._categories = (positions[order], [str(names[i]) for i in order])
    axis._category_widest = None
    vb = item.getViewBox()
    if not getattr(axis, "_categories_hooked", False):
        vb.sigResized.connect(lambda *_: thin(axis, vb))
        vb.sigRangeChanged.connect(lambda *_: thin(axis, vb))
        axis._categories_hooked = True
    thin(axis, vb)


def thin(axis, vb) -> list:
    """Set ``axis``'s ticks to the categories that fit its length now; returns the (position, name) pairs."""
    positions, names = getattr(axis, "_categories", (np.empty(0), []))
    if not len(names):
        axis.setTicks([[]])
        return []
    vertical = axis.orientation in ("left", "right")
    (x0, x1), (y0, y1) = vb.viewRange()
    lo, hi = (y0, y1) if vertical else (x0, x1)
    length = float(vb.height() if vertical else vb.width())
    first = int(np.searchsorted(positions, lo, side="left"))
    last = int(np.searchsorted(positions, hi, side="right"))
    fm = QtGui.QFontMetrics(axis.style.get("tickFont") or QtWidgets.QApplication.font())
    if vertical:
        extent = fm.height() + SIDE_GAP_PX
    else:
        if axis._category_widest is None:
            axis._category_widest = max(fm.horizontalAdvance(t) for t in names)
        extent = axis._category_widest + BOTTOM_GAP_PX
    # Pixels from one category to the next (they stand evenly spaced), hence every how many fit.
    spacing = float(np.median(np.diff(positions))) if len(positions) > 1 else 1.0
    px = spacing * length / (hi - lo) if hi > lo and length > 0 else 0.0
    step = max(1, math.ceil(extent / px)) if px > 0 else max(1, last - first)
    weight = getattr(axis, "_category_weight", None)
    if weight is not None and step > 1:
        chosen = _heaviest_apart(positions[first:last], weight[first:last], extent / px * spacing)
        ticks = [(float(positions[first + i]), names[first + i]) for i in chosen]
        axis.setTicks([ticks])
        return ticks
    # Names at a fixed stride from the first category, so zooming keeps the same ones in place.
    start = first + (-first) % step
    ticks = [(float(positions[i]), names[i]) for i in range(start, last, step)]
    axis.setTicks([ticks])
    return ticks


def _heaviest_apart(positions: np.ndarray, weight: np.ndarray, apart: float) -> list:
    """Indices of categories taken heaviest first, each at least ``apart`` (view units) from every one
    taken before, in order of position."""
    taken: list = []
    for i in np.argsort(-weight, kind="stable"):
        at = bisect.bisect_left(taken, (positions[i], -1))
        if at < len(taken) and taken[at][0] - positions[i] < apart:
            continue
        if at > 0 and positions[i] - taken[at - 1][0] < apart:
            continue
        taken.insert(at, (positions[i], int(i)))
    return [i for _, i in taken]

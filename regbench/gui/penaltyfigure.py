"""The penalty figure as a widget: paths, columns used, held-out error and the α handle.

The layout comes from :mod:`regbench.report.pathfig` (the report draws the same
figure); this widget paints it and answers the mouse and the keyboard:

* press on the handle (or anywhere in the strip, the error band or the α axis)
  and drag to choose α; nothing else moves, so there is no view to lose;
* click a curve or its end label to highlight that column (click empty space to
  clear it);
* Left/Right step along the α grid (Shift: ten steps), Home/End jump to its ends.
"""

from __future__ import annotations

import math
from typing import Optional

import numpy as np
import pyqtgraph.functions as fn
from PySide6 import QtCore, QtGui, QtWidgets

from regbench.report.pathfig import FigureData, Points, build_figure, move_figure

Qt = QtCore.Qt


class PenaltyFigure(QtWidgets.QWidget):
    """Paints a :class:`FigureData`; emits the α a person chooses and the column they pick."""

    alpha_moving = QtCore.Signal(float)     # while dragging (nothing is recomputed)
    alpha_chosen = QtCore.Signal(float)     # on release or a key step: the choice to keep
    column_picked = QtCore.Signal(object)   # a column name, or None to clear the highlight

    export_name = "penalty figure"

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setFocusPolicy(Qt.StrongFocus)
        self.setMouseTracking(True)
        self.setMinimumSize(420, 320)
        self.setAttribute(Qt.WA_OpaquePaintEvent, True)
        self.data: Optional[FigureData] = None
        self._fig = None
        self._fig_size = None
        self._fig_key = None
        self._moved = False          # only α, the read-out or the extra fits changed since _fig was laid out
        self._pixmap = None          # the parts of the figure that α does not move, painted once
        self._dragging = False
        self.setToolTip("Drag the α handle, or use ← → (Shift: ten steps); click a curve or a name to highlight it")

    # -- data ---------------------------------------------------------------------------
    def set_data(self, data: Optional[FigureData]) -> None:
        self.data = data
        if self._fig is not None and data is not None and self._fig_key == _fixed_key(data):
            self._moved = True       # the same paths and error: only what α decides is laid out again
        else:
            self._fig = None
            self._pixmap = None
        self.update()

    def figure(self, width: Optional[int] = None, height: Optional[int] = None):
        """The laid-out figure at the widget's size (or the size given)."""
        if self.data is None:
            return None
        w, h = width or self.width(), height or self.height()
        if width is not None or height is not None:
            return build_figure(self.data, w, h)
        if self._fig is None or self._fig_size != (w, h):
            self._fig = build_figure(self.data, w, h)
            self._fig_size = (w, h)
            self._fig_key = _fixed_key(self.data)
            self._moved = False
            self._pixmap = None
        elif self._moved:
            self._fig = move_figure(self._fig, self.data)
            self._moved = False
        return self._fig

    def export_size(self) -> QtCore.QSize:
        """The size an exported picture is laid out at: the widget's, made taller until every path is named.

        On screen a crowded figure names the largest paths and offers the rest on a click; a picture
        cannot be clicked, so it grows (up to 4,000 pixels) until each path has its end label.
        """
        w, h = max(self.width(), 600), max(self.height(), 400)
        if self.data is None:
            return QtCore.QSize(w, h)
        fig = build_figure(self.data, w, h)
        ends = sum(1 for xs, ys in fig.curves.values() if len(ys))
        while len(fig.labels) < ends and h < 4000:
            h = min(4000, int(h * 1.25))
            fig = build_figure(self.data, w, h)
        return QtCore.QSize(w, h)

    def grid(self) -> np.ndarray:
        """The α grid, largest first."""
        return np.sort(np.asarray(self.data.alphas, dtype=float))[::-1] if self.data is not None else np.array([])

    # -- painting -----------------------------------------------------------------------
    def paintEvent(self, event):
        painter = QtGui.QPainter(self)
        try:
            fig = self.figure()
            if fig is None:
                painter.fillRect(self.rect(), QtGui.QColor("#ffffff"))
            else:
                if self._pixmap is None:
                    ratio = self.devicePixelRatioF()
                    pm = QtGui.QPixmap(int(self.width() * ratio), int(self.height() * ratio))
                    pm.setDevicePixelRatio(ratio)
                    pm.fill(QtGui.QColor("#ffffff"))
                    p2 = QtGui.QPainter(pm)
                    try:
                        paint_prims(p2, fig.prims[:fig.fixed])
                    finally:
                        p2.end()
                    self._pixmap = pm
                painter.drawPixmap(0, 0, self._pixmap)
                # The handle, the read-out and the extra marks: a few shapes, painted over at each move.
                paint_prims(painter, fig.prims[fig.fixed:])
            if self.hasFocus() and fig is not None:
                kx, ky, kw, kh = fig.knob
                pen = QtGui.QPen(QtGui.QColor("#26303a"), 1, Qt.DotLine)
                painter.setPen(pen)
                painter.setBrush(Qt.NoBrush)
                painter.drawRoundedRect(QtCore.QRectF(kx - 3, ky - 3, kw + 6, kh + 6), 11, 11)
        finally:
            painter.end()

    def render_to(self, painter: QtGui.QPainter, width: int, height: int) -> None:
        """Paint the figure at ``width`` × ``height`` (export to PNG or SVG)."""
        painter.fillRect(QtCore.QRectF(0, 0, width, height), QtGui.QColor("#ffffff"))
        fig = self.figure(width, height)
        if fig is not None:
            paint_figure(painter, fig)

    # -- mouse --------------------------------------------------------------------------
    def _draggable_at(self, fig, x, y) -> bool:
        if fig.on_handle(x, y):
            return True
        for name in ("strip", "error", "axis"):
            r = fig.regions.get(name)
            if r is not None and r[0] - 4 <= x <= r[2] + 4 and r[1] - 4 <= y <= r[3] + 4:
                return True
        return False

    def mousePressEvent(self, event):
        fig = self.figure()
        if fig is None or event.button() != Qt.LeftButton:
            return super().mousePressEvent(event)
        x, y = event.position().x(), event.position().y()
        if self._draggable_at(fig, x, y):
            self._dragging = True
            if not fig.on_handle(x, y):
                self._move_to(fig.alpha_at(x))
            self.setCursor(Qt.SizeHorCursor)
            event.accept()
            return
        self.column_picked.emit(fig.column_at(x, y))
        event.accept()

    def mouseMoveEvent(self, event):
        fig = self.figure()
        if fig is None:
            return
        x, y = event.position().x(), event.position().y()
        if self._dragging:
            self._move_to(fig.alpha_at(x))
            return
        if fig.on_handle(x, y):
            self.setCursor(Qt.SizeHorCursor)
        elif fig.column_at(x, y) is not None:
            self.setCursor(Qt.PointingHandCursor)
        else:
            self.unsetCursor()

    def mouseReleaseEvent(self, event):
        if self._dragging and event.button() == Qt.LeftButton:
            self._dragging = False
            self.unsetCursor()
            self.alpha_chosen.emit(float(self.data.alpha))
            event.accept()
            return
        super().mouseReleaseEvent(event)

    def _move_to(self, alpha: float) -> None:
        if self.data is None or not math.isfinite(alpha) or alpha <= 0:
            return
        self.data.alpha = float(alpha)
        self.data.readout = None       # read off the path until the exact model arrives
        self.data.n_used = None
        self._moved = True
        self.update()
        self.alpha_moving.emit(float(alpha))

    # -- keyboard -----------------------------------------------------------------------
    def step(self, n: int) -> Optional[float]:
        """Move the handle ``n`` grid points toward weaker penalties (negative: stronger); returns the α."""
        grid = self.grid()
        if grid.size == 0:
            return None
        la = np.log10(grid)
        cur = math.log10(self.data.alpha)
        i = int(np.argmin(np.abs(la - cur)))
        if abs(la[i] - cur) > 1e-9 and n != 0:
            # Off the grid: the first step lands on the neighbouring grid point in that direction.
            i = int(np.searchsorted(-la, -cur)) - (1 if n < 0 else 0)
            n -= int(np.sign(n))
        i = min(max(i + n, 0), grid.size - 1)
        self._move_to(float(grid[i]))
        return float(grid[i])

    def keyPressEvent(self, event):
        if self.data is None:
            return super().keyPressEvent(event)
        k = event.key()
        big = 10 if event.modifiers() & Qt.ShiftModifier else 1
        moved = None
        if k == Qt.Key_Right:
            moved = self.step(big)
        elif k == Qt.Key_Left:
            moved = self.step(-big)
        elif k == Qt.Key_Home:
            moved = self.step(-10 ** 6)
        elif k == Qt.Key_End:
            moved = self.step(10 ** 6)
        elif k == Qt.Key_Escape:
            self.column_picked.emit(None)
            return
        else:
            return super().keyPressEvent(event)
        if moved is not None:
            self.alpha_chosen.emit(moved)
        event.accept()

    def focusInEvent(self, event):
        self.update()
        super().focusInEvent(event)

    def focusOutEvent(self, event):
        self.update()
        super().focusOutEvent(event)


def _fixed_key(d: FigureData) -> tuple:
    """What the parts of the figure that α does not move are drawn from (arrays by identity: the
    session's own path and error arrays, the same objects from one redraw to the next)."""
    cv = None if d.cv is None else tuple(id(v) if isinstance(v, np.ndarray) else v for v in d.cv)
    return (id(d.alphas), id(d.coef), tuple(d.columns), cv, d.colour, d.highlight, d.ylabel, d.error_label)


def paint_figure(painter: QtGui.QPainter, fig) -> None:
    """Draw a laid-out figure's primitives with ``painter``."""
    paint_prims(painter, fig.prims)


def polygon(pts) -> QtGui.QPolygonF:
    """A QPolygonF of ``pts`` ((x, y) pairs, or :class:`Points`), a long one filled through a numpy view
    of its memory: a thousand paths of a hundred points each took about 100 ms point by point."""
    if isinstance(pts, Points):
        pts = pts.array
    elif len(pts) < 8:
        return QtGui.QPolygonF([QtCore.QPointF(x, y) for x, y in pts])
    poly = fn.create_qpolygonf(len(pts))
    fn.ndarray_from_qpolygonf(poly)[:] = pts
    return poly


def paint_prims(painter: QtGui.QPainter, prims) -> None:
    """Draw laid-out primitives with ``painter``, in order."""
    painter.setRenderHint(QtGui.QPainter.Antialiasing, True)
    painter.setRenderHint(QtGui.QPainter.TextAntialiasing, True)
    base_font = QtGui.QFont(painter.font())
    fonts, pens, brushes = {}, {}, {}
    no_pen, no_brush = QtGui.QPen(Qt.NoPen), QtGui.QBrush(Qt.NoBrush)
    for p in prims:
        painter.setOpacity(p.opacity)
        if p.kind in ("line", "poly", "circle", "rect"):
            if p.stroke:
                key = (p.stroke, p.width, p.dash)
                pen = pens.get(key)
                if pen is None:
                    pen = pens[key] = QtGui.QPen(QtGui.QColor(p.stroke), p.width)
                    if p.dash:
                        pen.setDashPattern([float(x) / max(p.width, 0.1) for x in p.dash])
                painter.setPen(pen)
            else:
                painter.setPen(no_pen)
            if p.fill:
                brush = brushes.get(p.fill)
                if brush is None:
                    brush = brushes[p.fill] = QtGui.QBrush(QtGui.QColor(p.fill))
                painter.setBrush(brush)
            else:
                painter.setBrush(no_brush)
        if p.kind == "line":
            painter.setBrush(no_brush)
            painter.drawPolyline(polygon(p.pts))
        elif p.kind == "poly":
            painter.drawPolygon(polygon(p.pts))
        elif p.kind == "circle":
            (x, y), = p.pts
            painter.drawEllipse(QtCore.QPointF(x, y), p.r, p.r)
        elif p.kind == "rect":
            (x, y), = p.pts
            painter.drawRoundedRect(QtCore.QRectF(x, y, p.w, p.h), p.r, p.r)
        elif p.kind == "text":
            key = (p.size, p.bold)
            if key not in fonts:
                f = QtGui.QFont(base_font)
                f.setPixelSize(int(round(p.size)))
                f.setBold(p.bold)
                fonts[key] = f
            painter.setFont(fonts[key])
            painter.setPen(QtGui.QColor(p.fill or "#26303a"))
            (x, y), = p.pts
            w = painter.fontMetrics().horizontalAdvance(p.text)
            if p.anchor == "middle":
                x -= w / 2
            elif p.anchor == "end":
                x -= w
            painter.drawText(QtCore.QPointF(x, y), p.text)
    painter.setOpacity(1.0)

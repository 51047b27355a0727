"""The penalty figure, drawn the same way in the window and in the report.

One figure per penalized family, read left to right from the strongest penalty
(every coefficient at 0) to the weakest (close to OLS):

* the coefficient paths, each labelled at its right-hand end (no legend); a
  highlighted column is drawn in full and the others dimmed;
* a strip showing how many columns the model uses at each α;
* the held-out error as a line inside a shaded band (± one standard error),
  with the lowest-error and the simplest-within-one-SE choices as labelled
  marks on the band;
* the chosen α as a handle on the α axis with a thin guide, and a read-out of
  the model's coefficients at that α beside it.

:func:`build_figure` lays the figure out as a list of plain drawing primitives
(no Qt, no SVG); the report writes them as SVG and the window paints them with
QPainter, and the window hit-tests the same geometry.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field, replace
from typing import Optional, Sequence

import numpy as np

from regbench.formatting import number_text
from regbench.palette import PALETTE, series_colour

#: Text metrics shared by both renderers (a sans-serif at 11 px averages about 6.3 px a character).
FONT_PX = 11
CHAR_PX = 6.3
LABEL_GAP = 13.0
READOUT_ROWS = 8
#: Opacity of the read-out's paper: the words read clearly and the curves behind still show.
READOUT_PAPER = 0.72
#: Beyond this many paths every path but a highlighted one is drawn :data:`HAIRLINE` wide.
MANY_PATHS = 60
HAIRLINE = 1.0


@dataclass
class Prim:
    """One drawing primitive.

    ``kind`` is 'line' (open polyline), 'poly' (filled polygon), 'text', 'circle' or 'rect';
    ``pts`` holds (x, y) pairs in pixels; ``anchor`` is 'start', 'middle' or 'end'.
    """

    kind: str
    pts: tuple = ()
    stroke: Optional[str] = None
    fill: Optional[str] = None
    width: float = 1.0
    dash: Optional[tuple] = None
    opacity: float = 1.0
    text: str = ""
    size: float = FONT_PX
    anchor: str = "start"
    bold: bool = False
    r: float = 0.0
    w: float = 0.0
    h: float = 0.0
    role: str = ""


class Points:
    """A polyline's (x, y) pairs held as one (n, 2) array.

    Reads as a tuple of pairs (iterating, indexing, ``==`` against another or a tuple) without
    making a pair object per point: a thousand paths of a hundred points each are laid out in
    milliseconds, and a painter takes :attr:`array` as it is.
    """

    __slots__ = ("array",)

    def __init__(self, array: np.ndarray):
        self.array = array

    def __len__(self) -> int:
        return len(self.array)

    def __iter__(self):
        return iter(map(tuple, self.array.tolist()))

    def __getitem__(self, i):
        return tuple(self.array[i].tolist())

    def __eq__(self, other) -> bool:
        if isinstance(other, Points):
            return bool(np.array_equal(self.array, other.array))
        if isinstance(other, tuple):
            return tuple(self) == other
        return NotImplemented

    __hash__ = None

    def __repr__(self) -> str:
        return f"Points({len(self)} pairs)"


@dataclass
class Figure:
    """A laid-out figure: primitives in drawing order plus the geometry for hit-testing."""

    width: int
    height: int
    prims: list = field(default_factory=list)
    #: name -> (x0, y0, x1, y1) of 'paths', 'strip', 'error', 'axis'
    regions: dict = field(default_factory=dict)
    #: column -> (xs, ys) pixel polyline of its path
    curves: dict = field(default_factory=dict)
    #: column -> (x, y, w, h) of its end label
    labels: dict = field(default_factory=dict)
    handle_x: float = 0.0
    knob: tuple = (0.0, 0.0, 0.0, 0.0)
    lx: float = 0.0    # log10 α at the left edge
    rx: float = 1.0    # log10 α at the right edge
    x0: float = 0.0    # pixel of the left edge
    x1: float = 1.0    # pixel of the right edge
    #: How many of ``prims`` (the first ones) do not depend on the chosen α, its read-out or the extra fits.
    fixed: int = 0
    #: The layout the figure came from, kept so that :func:`move_figure` lays out only what moves.
    layout: object = field(default=None, repr=False, compare=False)

    def alpha_at(self, px: float) -> float:
        """α under pixel column ``px`` (clamped to the drawn range)."""
        t = min(max((px - self.x0) / (self.x1 - self.x0), 0.0), 1.0)
        return float(10 ** (self.lx + t * (self.rx - self.lx)))

    def x_of(self, alpha: float) -> float:
        return self.x0 + (math.log10(alpha) - self.lx) / (self.rx - self.lx) * (self.x1 - self.x0)

    def column_at(self, x: float, y: float, tol: float = 6.0) -> Optional[str]:
        """The column whose end label or path passes within ``tol`` pixels of (x, y), if any."""
        for col, (lx, ly, lw, lh) in self.labels.items():
            if lx - 2 <= x <= lx + lw + 2 and ly - 2 <= y <= ly + lh + 2:
                return col
        best, best_d = None, tol
        for col, (xs, ys) in self.curves.items():
            if len(xs) < 2 or x < xs[0] or x > xs[-1]:
                continue
            yy = float(np.interp(x, xs, ys))
            d = abs(yy - y)
            if d <= best_d:
                best, best_d = col, d
        return best

    def on_handle(self, x: float, y: float, tol: float = 9.0) -> bool:
        kx, ky, kw, kh = self.knob
        if kx <= x <= kx + kw and ky <= y <= ky + kh:
            return True
        top = self.regions["paths"][1]
        bottom = self.knob[1] + self.knob[3]
        return abs(x - self.handle_x) <= tol and top <= y <= bottom


@dataclass
class FigureData:
    """What the figure shows.

    Parameters
    ----------
    alphas : array (k,)
        The path's α grid (any order).
    coef : array (k, p)
        Coefficient per α and column (standardized or table units, as ``ylabel`` says).
    columns : sequence of str
    alpha : float
        The chosen α.
    cv : (alphas, mean, se, alpha_min, alpha_1se) or None
    colour : str
        The model's colour (error line and band).
    highlight : str or None
        A column drawn in full while the others are dimmed.
    readout : sequence of (column, value) or None
        The model's coefficients at ``alpha``; None reads them off the path (marked ≈).
    n_used : int or None
        Columns the model uses at ``alpha``; None counts the read-out's non-zero values.
    extras : sequence of (name, alpha, colour)
        Other fits of this family kept at their own α, marked on the axis.
    ylabel : str
    error_label : str
    """

    alphas: np.ndarray
    coef: np.ndarray
    columns: Sequence[str]
    alpha: float
    cv: Optional[tuple] = None
    colour: str = PALETTE["accent"]
    highlight: Optional[str] = None
    readout: Optional[Sequence] = None
    n_used: Optional[int] = None
    extras: Sequence = ()
    ylabel: str = "standardized coefficient"
    error_label: str = "held-out error (mean squared)"


def dim(colour: str, amount: float = 0.72, paper: str = "#ffffff") -> str:
    """``colour`` mixed toward ``paper`` by ``amount`` (0 keeps it, 1 gives paper)."""
    a = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    b = [int(paper[i:i + 2], 16) for i in (1, 3, 5)]
    return "#" + "".join(f"{round(x + (y - x) * amount):02x}" for x, y in zip(a, b))


def text_width(text: str, size: float = FONT_PX) -> float:
    return len(text) * CHAR_PX * size / FONT_PX


def spread(ys: Sequence[float], lo: float, hi: float, gap: float = LABEL_GAP) -> list:
    """Move label centres apart to at least ``gap`` pixels, staying within [lo, hi], keeping order.

    Labels that cannot all fit are squeezed evenly over the range (the caller drops some first).
    """
    n = len(ys)
    if n == 0:
        return []
    order = np.argsort(ys, kind="stable")
    y = np.asarray(ys, dtype=float)[order]
    if gap * (n - 1) > hi - lo:
        out = np.linspace(lo, hi, n) if n > 1 else np.array([(lo + hi) / 2])
    else:
        out = np.clip(y.copy(), lo, hi)
        for i in range(1, n):        # push down
            out[i] = max(out[i], out[i - 1] + gap)
        overflow = out[-1] - hi
        if overflow > 0:
            out[-1] = hi
            for i in range(n - 2, -1, -1):   # push back up from the bottom
                out[i] = min(out[i], out[i + 1] - gap)
    res = np.empty(n)
    res[order] = out
    return res.tolist()


def ticks(lo: float, hi: float, n: int = 4) -> list:
    """Round tick values covering [lo, hi]."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo]
    raw = (hi - lo) / n
    mag = 10 ** math.floor(math.log10(raw))
    step = min((m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw), default=raw)
    v, out = math.ceil(lo / step) * step, []
    while v <= hi + 1e-9 * step:
        out.append(round(v, 12))
        v += step
    return out


def columns_used(coef: np.ndarray) -> np.ndarray:
    """How many columns have a non-zero coefficient at each α of a path."""
    c = np.asarray(coef, dtype=float)
    scale = np.nanmax(np.abs(c)) if c.size else 0.0
    return np.count_nonzero(np.abs(c) > 1e-12 * max(scale, 1e-300), axis=1)


def interpolate_row(alphas: np.ndarray, coef: np.ndarray, alpha: float) -> np.ndarray:
    """Coefficients at ``alpha`` read off the path (linear in log α between grid points)."""
    la = np.log10(np.asarray(alphas, dtype=float))
    order = np.argsort(la)
    la, c = la[order], np.asarray(coef, dtype=float)[order]
    x = math.log10(alpha)
    return np.array([np.interp(x, la, c[:, j]) for j in range(c.shape[1])])


def build_figure(d: FigureData, width: int, height: int) -> Figure:
    """Lay out the penalty figure for ``d`` at ``width`` × ``height`` pixels."""
    c = _Layout(d, width, height)
    _alpha_axis(c)
    _paths(c)
    _end_labels(c)
    _strip(c)
    if c.has_cv:
        _error_band(c)
    c.fig.fixed = len(c.fig.prims)
    c.fig.layout = c
    _moving_parts(c)
    return c.fig


def move_figure(fig: Figure, d: FigureData) -> Figure:
    """``fig`` (from :func:`build_figure`) at ``d``'s chosen α, read-out and extra fits.

    ``d`` must show the same paths, held-out error, highlight and labels as the data ``fig`` was
    built from; only the handle, the read-out and the extra marks are laid out again (the rest of
    the figure is kept as it is), which is what dragging or stepping α changes.
    """
    c = copy.copy(fig.layout)
    c.d = d
    c.a_log = c.alpha_log(d)
    c.fig = replace(fig, prims=fig.prims[:fig.fixed])
    c.P = c.fig.prims
    c.fig.layout = c
    _moving_parts(c)
    return c.fig


def _moving_parts(c) -> None:
    """What the chosen α decides: the handle, the read-out beside it and the other fits' marks."""
    _handle(c)
    _readout(c)
    _extras(c)


class _Layout:
    """The figure's geometry and shared inputs, worked out once for all its parts.

    α falls from left to right; the path labels sit right of the path ends. From the top:
    the paths, the columns-used strip, the held-out error (when there is one), the α axis.
    """

    def __init__(self, d: FigureData, width: int, height: int):
        self.d = d
        self.alphas = np.asarray(d.alphas, dtype=float)
        self.coef = np.asarray(d.coef, dtype=float)
        self.cols = list(d.columns)
        self.p = len(self.cols)
        self.fig = fig = Figure(width=int(width), height=int(height))
        self.P = fig.prims
        # -- horizontal layout
        longest = max((len(c) for c in self.cols), default=4)
        label_w = min(max(text_width("x" * min(longest, 26)) + 14, 90), 200)
        ml, self.mr = 58, label_w + 10
        fig.x0, fig.x1 = float(ml), float(width - self.mr)
        self.la = la = np.log10(self.alphas)
        lo, hi = float(la.min()), float(la.max())
        if d.cv is not None:
            cla = np.log10(np.asarray(d.cv[0], dtype=float))
            lo, hi = min(lo, float(cla.min())), max(hi, float(cla.max()))
        self.hi = hi
        self.a_log = self.alpha_log(d)
        if hi - lo < 1e-9:
            lo, hi = lo - 0.5, hi + 0.5
        pad = 0.02 * (hi - lo)
        fig.lx, fig.rx = hi + pad, lo - pad          # left: the strongest penalty
        # -- vertical layout
        top, axis_h, strip_h, gap = 8.0, 40.0, 30.0, 10.0
        avail = height - top - axis_h - strip_h - 2 * gap
        self.has_cv = has_cv = d.cv is not None and len(d.cv[0]) > 1
        paths_h = avail * (0.62 if has_cv else 1.0)
        err_h = avail - paths_h if has_cv else 0.0
        self.r_paths = r_paths = (fig.x0, top, fig.x1, top + paths_h)
        self.r_strip = r_strip = (fig.x0, r_paths[3] + gap, fig.x1, r_paths[3] + gap + strip_h)
        self.r_err = r_err = (fig.x0, r_strip[3] + gap, fig.x1, r_strip[3] + gap + err_h)
        self.axis_y = axis_y = (r_err[3] if has_cv else r_strip[3]) + 4
        fig.regions = {"paths": r_paths, "strip": r_strip, "error": r_err if has_cv else None,
                       "axis": (fig.x0, axis_y, fig.x1, axis_y + axis_h - 4)}
        self.order = np.argsort(la)[::-1]          # left (large α) to right (small α)
        self.xs = np.array([self.X(v) for v in la[self.order]])
        self.hl = d.highlight if d.highlight in self.cols else None

    def alpha_log(self, d: FigureData) -> float:
        """log10 of the chosen α (the weakest penalty drawn when there is none)."""
        return math.log10(d.alpha) if d.alpha and d.alpha > 0 else self.hi

    def X(self, logv):
        """Pixel column of log10 α."""
        fig = self.fig
        return fig.x0 + (logv - fig.lx) / (fig.rx - fig.lx) * (fig.x1 - fig.x0)


def _alpha_axis(c: _Layout) -> None:
    """Decades, labelled as α values, with the direction in words."""
    fig, P, X, axis_y = c.fig, c.P, c.X, c.axis_y
    muted, grid = PALETTE["muted"], PALETTE["grid"]
    for t in range(math.ceil(min(fig.lx, fig.rx)), math.floor(max(fig.lx, fig.rx)) + 1):
        xx = X(t)
        for r in (c.r_paths, c.r_err) if c.has_cv else (c.r_paths,):
            P.append(Prim("line", ((xx, r[1]), (xx, r[3])), stroke=grid, width=0.8, opacity=0.7))
        P.append(Prim("line", ((xx, axis_y), (xx, axis_y + 4)), stroke=muted))
        P.append(Prim("text", ((xx, axis_y + 15),), text=number_text(10.0 ** t, 3), fill=muted, anchor="middle"))
    P.append(Prim("line", ((fig.x0, axis_y), (fig.x1, axis_y)), stroke=muted))
    P.append(Prim("text", ((fig.x0, axis_y + 31),), text="← stronger penalty, fewer columns", fill=muted))
    P.append(Prim("text", ((fig.x1, axis_y + 31),), text="weaker penalty, closer to OLS →", fill=muted, anchor="end"))
    P.append(Prim("text", (((fig.x0 + fig.x1) / 2, axis_y + 31),), text="α", fill=PALETTE["text"], anchor="middle",
                  bold=True))


def _paths(c: _Layout) -> None:
    """The coefficient paths on their own scale (0 always shown); the highlighted one drawn last."""
    fig, P, coef, r_paths, hl = c.fig, c.P, c.coef, c.r_paths, c.hl
    muted, grid, faint = PALETTE["muted"], PALETTE["grid"], PALETTE["faint"]
    finite = coef[np.isfinite(coef)]
    y0, y1 = (float(finite.min()), float(finite.max())) if finite.size else (-1.0, 1.0)
    y0, y1 = min(y0, 0.0), max(y1, 0.0)
    if y1 - y0 < 1e-300:
        y0, y1 = -1.0, 1.0
    ypad = 0.06 * (y1 - y0)
    y0, y1 = y0 - ypad, y1 + ypad

    def Yp(v):
        return r_paths[3] - (v - y0) / (y1 - y0) * (r_paths[3] - r_paths[1])

    for t in ticks(y0, y1):
        P.append(Prim("line", ((fig.x0, Yp(t)), (fig.x1, Yp(t))), stroke=grid, width=0.6, opacity=0.6))
        P.append(Prim("text", ((fig.x0 - 6, Yp(t) + 4),), text=number_text(t, 3), fill=muted, anchor="end"))
    P.append(Prim("line", ((fig.x0, Yp(0.0)), (fig.x1, Yp(0.0))), stroke=muted, width=0.8))
    P.append(Prim("text", ((fig.x0 + 4, r_paths[1] + 11),), text=c.d.ylabel, fill=muted))

    c.colours = colours = {col: series_colour(j) for j, col in enumerate(c.cols)}
    every = Yp(coef[c.order])           # every path's pixel heights at once, one column per path
    for j, col in enumerate(c.cols):
        ys = every[:, j]
        ok = np.isfinite(ys)
        fig.curves[col] = (c.xs[ok], ys[ok])
    # A crowd of paths is drawn in hairlines: they keep apart where thicker lines merge into one
    # band, and a painter strokes a hairline several times faster than a wider line.
    full, dimmed = (HAIRLINE, HAIRLINE) if c.p > MANY_PATHS else (1.5, 1.1)
    drawing = [col for col in c.cols if col != hl] + ([hl] if hl else [])
    for col in drawing:
        cx, cy = fig.curves[col]
        if len(cx) < 2:
            continue
        if hl is None:
            P.append(Prim("line", _pairs(cx, cy), stroke=colours[col], width=full, role=f"curve:{col}"))
        elif col == hl:
            P.append(Prim("line", _pairs(cx, cy), stroke=colours[col], width=2.8, role=f"curve:{col}"))
        else:
            P.append(Prim("line", _pairs(cx, cy), stroke=faint, width=dimmed, role=f"curve:{col}"))


def _pairs(xs: np.ndarray, ys: np.ndarray) -> "Points":
    return Points(np.column_stack((np.asarray(xs, dtype=float), np.asarray(ys, dtype=float))))


def _end_labels(c: _Layout) -> None:
    """As many end labels as fit, the highlighted one and the largest ends first."""
    fig, P, cols, r_paths, hl, colours = c.fig, c.P, c.cols, c.r_paths, c.hl, c.colours
    muted, faint = PALETTE["muted"], PALETTE["faint"]
    ends = {col: fig.curves[col][1][-1] for col in cols if len(fig.curves[col][1])}
    room = int((r_paths[3] - r_paths[1]) // LABEL_GAP) + 1
    last = dict(zip(cols, np.abs(c.coef[c.order[-1]]).tolist()))   # each path's size at its end
    ranked = sorted(ends, key=lambda col: (col != hl, -last[col]))
    shown = [col for col in ranked[:room]]
    placed = spread([ends[col] for col in shown], r_paths[1] + 6, r_paths[3] - 6)
    lab_x = fig.x1 + 8
    for col, yy in zip(shown, placed):
        text = col if len(col) <= 26 else col[:25] + "…"
        colour = colours[col] if (hl is None or col == hl) else faint
        ey = ends[col]
        if abs(yy - ey) > 2:
            P.append(Prim("line", ((fig.x1 + 1, ey), (lab_x - 2, yy)), stroke=colour, width=0.8))
        P.append(Prim("text", ((lab_x, yy + 4),), text=text, fill=colour if colour != faint else muted,
                      bold=(col == hl), opacity=1.0 if (hl is None or col == hl) else 0.75, role=f"label:{col}"))
        fig.labels[col] = (lab_x, yy - 7, text_width(text), 14.0)
    if len(shown) < len(ends):
        text = f"+{len(ends) - len(shown)} more (click a curve)"
        # Short column names leave a narrow label margin: the note then ends at the figure's edge.
        x, anchor = (lab_x, "start") if lab_x + text_width(text, 10) <= fig.width - 4 else (fig.width - 4, "end")
        P.append(Prim("text", ((x, r_paths[3] + 8),), text=text, fill=muted, size=10, anchor=anchor))


def _strip(c: _Layout) -> None:
    """How many columns the model uses along α, as a step area."""
    P, xs, p, muted = c.P, c.xs, c.p, PALETTE["muted"]
    used = columns_used(c.coef)[c.order]
    sx0, sy0, sx1, sy1 = c.r_strip
    P.append(Prim("rect", ((sx0, sy0),), w=sx1 - sx0, h=sy1 - sy0, fill=PALETTE["alt_base"]))
    pts = [(xs[0], sy1)]
    for i in range(len(xs)):
        h = (used[i] / max(p, 1)) * (sy1 - sy0 - 2)
        xl = xs[i - 1] if i else xs[0]
        xm = (xl + xs[i]) / 2 if i else xs[0]
        pts += [(xm, sy1 - h)] if i == 0 else [(xm, pts[-1][1]), (xm, sy1 - h)]
    pts += [(xs[-1], pts[-1][1]), (xs[-1], sy1)]
    P.append(Prim("poly", tuple(pts), fill=PALETTE["accent_soft"], stroke=PALETTE["accent"], width=0.8))
    P.append(Prim("text", ((sx0 - 6, sy0 + 12),), text="columns", fill=muted, anchor="end", size=10))
    P.append(Prim("text", ((sx0 - 6, sy0 + 24),), text="used", fill=muted, anchor="end", size=10))
    P.append(Prim("text", ((sx1 + 8, sy0 + 12),), text=f"of {p}", fill=muted, size=10))


def _error_band(c: _Layout) -> None:
    """The held-out error as a line in a band, the two choices as labelled marks."""
    d, fig, P, X, r_err = c.d, c.fig, c.P, c.X, c.r_err
    ink, muted, grid = PALETTE["text"], PALETTE["muted"], PALETTE["grid"]
    ca, mean, se, a_min, a_1se = d.cv
    ca, mean, se = (np.asarray(v, dtype=float) for v in (ca, mean, se))
    co = np.argsort(np.log10(ca))[::-1]
    ex = np.array([X(v) for v in np.log10(ca)[co]])
    m, s = mean[co], se[co]
    ok = np.isfinite(m) & np.isfinite(s)
    e0 = float(np.min((m - s)[ok])) if ok.any() else 0.0
    e1 = float(np.max((m + s)[ok])) if ok.any() else 1.0
    if e1 - e0 < 1e-300:
        e0, e1 = e0 - 0.5, e1 + 0.5
    epad = 0.08 * (e1 - e0)
    e0, e1 = e0 - epad, e1 + epad * 2.5   # headroom for the mark labels

    def Ye(v):
        return r_err[3] - (v - e0) / (e1 - e0) * (r_err[3] - r_err[1])

    for t in ticks(e0, e1, 3):
        if Ye(t) < r_err[1] + 8:
            continue
        P.append(Prim("line", ((fig.x0, Ye(t)), (fig.x1, Ye(t))), stroke=grid, width=0.6, opacity=0.6))
        P.append(Prim("text", ((fig.x0 - 6, Ye(t) + 4),), text=number_text(t, 3), fill=muted, anchor="end"))
    band = [(x, Ye(v)) for x, v in zip(ex[ok], (m + s)[ok])] + \
           [(x, Ye(v)) for x, v in zip(ex[ok][::-1], (m - s)[ok][::-1])]
    P.append(Prim("poly", tuple(band), fill=d.colour, opacity=0.18))
    P.append(Prim("line", tuple((x, Ye(v)) for x, v in zip(ex[ok], m[ok])), stroke=d.colour, width=2.0))
    P.append(Prim("text", ((fig.x0 + 4, r_err[1] + 11),), text=d.error_label, fill=muted))
    marks = []
    for a, text, filled in ((a_min, "lowest error", True), (a_1se, "simplest within 1 SE", False)):
        if a is None or not (a > 0):
            continue
        i = int(np.argmin(np.abs(np.log10(ca) - math.log10(a))))
        marks.append((X(math.log10(a)), Ye(mean[i]), Ye(mean[i] + se[i]), text, filled))
    last_right = -1e9
    for k, (mx, my, top_y, text, filled) in enumerate(sorted(marks)):
        P.append(Prim("line", ((mx, top_y - 2), (mx, my)), stroke=ink, width=1.0, opacity=0.7))
        P.append(Prim("circle", ((mx, my),), r=4.5, fill=ink if filled else PALETTE["base"], stroke=ink, width=1.4))
        tw = text_width(text, 10)
        ty = top_y - 6
        anchor = "middle"
        left = mx - tw / 2
        if left < last_right + 6:        # labels of close marks go to either side
            anchor, left = "start", mx + 4
        if left + tw > fig.x1 + c.mr - 4:
            anchor, left = "end", mx - tw
        P.append(Prim("text", ((mx, ty),), text=text, fill=ink, size=10, anchor=anchor, role="mark"))
        last_right = left + tw


def _handle(c: _Layout) -> None:
    """The chosen α: a guide across the plots and a knob on the axis."""
    fig, P, axis_y, accent = c.fig, c.P, c.axis_y, PALETTE["accent"]
    hx = c.X(min(max(c.a_log, min(fig.lx, fig.rx)), max(fig.lx, fig.rx)))
    fig.handle_x = hx
    bottom = c.r_err[3] if c.has_cv else c.r_strip[3]
    P.append(Prim("line", ((hx, c.r_paths[1]), (hx, bottom)), stroke=accent, width=1.2, opacity=0.85, role="guide"))
    knob_text = f"α {number_text(c.d.alpha, 3)}"
    kw = text_width(knob_text) + 16
    fig.knob = (hx - kw / 2, axis_y - 9, kw, 18.0)
    P.append(Prim("rect", ((hx - kw / 2, axis_y - 9),), w=kw, h=18.0, fill=accent, stroke=accent, r=9.0, role="knob"))
    P.append(Prim("text", ((hx, axis_y + 4),), text=knob_text, fill="#ffffff", anchor="middle", bold=True))


def _readout(c: _Layout) -> None:
    """The model's coefficients at the chosen α in a box beside the guide (≈ when read off the path)."""
    d, fig, P, p, hl = c.d, c.fig, c.P, c.p, c.hl
    ink, accent = PALETTE["text"], PALETTE["accent"]
    hx = fig.handle_x
    if d.readout is not None:
        values = [(col, float(v)) for col, v in d.readout]
        approx = False
    else:
        row = interpolate_row(c.alphas, c.coef, d.alpha)
        values = list(zip(c.cols, row.tolist()))
        approx = True
    n_used = d.n_used if d.n_used is not None else sum(1 for _, v in values if v != 0.0)
    ranked_v = sorted(values, key=lambda cv: (cv[0] != hl, -abs(cv[1]) if math.isfinite(cv[1]) else 0.0))
    rows = [(col, v) for col, v in ranked_v if v != 0.0 or col == hl][:READOUT_ROWS]
    head = f"{n_used} of {p} columns used"
    lines = [(head, None, True)] + [(col if len(col) <= 18 else col[:17] + "…", v, col == hl) for col, v in rows]
    if n_used > len(rows):
        lines.append((f"… {n_used - len(rows)} more", None, False))
    vals_w = max((text_width(("≈" if approx else "") + number_text(v, 4), 10) for _, v in rows), default=0.0)
    names_w = max((text_width(t, 10) for t, v, _ in lines[1:] if v is not None), default=0.0)
    box_w = max(text_width(head, 10) + 20, names_w + vals_w + 30, 140.0)
    box_h = 8 + 14 * len(lines)
    bx, by = _readout_place(c, hx, box_w, box_h)
    # See-through paper under the words (curves behind it stay visible), the frame at full strength.
    P.append(Prim("rect", ((bx, by),), w=box_w, h=box_h, fill=PALETTE["base"], opacity=READOUT_PAPER, r=3.0))
    P.append(Prim("rect", ((bx, by),), w=box_w, h=box_h, stroke=accent, r=3.0, role="readout"))
    for k, (text, v, strong) in enumerate(lines):
        ty = by + 16 + 14 * k
        P.append(Prim("text", ((bx + 8, ty),), text=text, fill=ink if k else accent, size=10, bold=strong))
        if v is not None:
            P.append(Prim("text", ((bx + box_w - 8, ty),), text=("≈" if approx else "") + number_text(v, 4),
                          fill=ink, size=10, anchor="end", bold=strong))


def _readout_place(c: _Layout, hx: float, box_w: float, box_h: float) -> tuple:
    """Where the read-out box hides the least of the paths: beside the handle (right, else left), at the
    top, middle or bottom of the paths, whichever covers the fewest sampled curve points (the
    highlighted curve counts most); the top right when several tie."""
    fig, r = c.fig, c.r_paths
    xs = [x for x in (hx + 10, hx - 10 - box_w) if fig.x0 <= x and x + box_w <= fig.x1] or \
        [min(max(hx + 10, fig.x0), max(fig.x0, fig.x1 - box_w))]
    top, bottom = r[1] + 4, max(r[1] + 4, r[3] - 4 - box_h)
    ys = list(dict.fromkeys((top, (top + bottom) / 2, bottom)))
    grid_x, grid_y, weight = _curve_grid(c)
    best, where = None, (xs[0], ys[0])
    for x in xs:
        inside_x = (grid_x >= x) & (grid_x <= x + box_w)
        if not inside_x.any() or grid_y.size == 0:
            return x, ys[0]
        band = grid_y[:, inside_x]
        for y in ys:
            hidden = float((((band >= y) & (band <= y + box_h)).sum(axis=1) * weight).sum())
            if best is None or hidden < best:
                best, where = hidden, (x, y)
    return where


def _curve_grid(c: _Layout):
    """Each curve's pixel height every few pixels across the paths (made once per layout): the
    read-out's placement counts the points a box would cover."""
    grid = getattr(c, "_grid", None)
    if grid is None:
        fig = c.fig
        gx = np.arange(fig.x0, fig.x1 + 1.0, 4.0)
        rows, weight = [], []
        for col, (cx, cy) in fig.curves.items():
            if len(cx) < 2:
                continue
            order = np.argsort(cx)
            rows.append(np.interp(gx, np.asarray(cx)[order], np.asarray(cy)[order], left=np.nan, right=np.nan))
            weight.append(8.0 if col == c.hl else 1.0)
        gy = np.vstack(rows) if rows else np.empty((0, gx.size))
        grid = c._grid = (gx, gy, np.asarray(weight, dtype=float))
    return grid


def _extras(c: _Layout) -> None:
    """Other fits of this family kept at their own α: a small marker on the axis each."""
    fig, P, axis_y = c.fig, c.P, c.axis_y
    for name, a, colour in c.d.extras:
        if a and a > 0:
            ex_ = c.X(math.log10(a))
            if fig.x0 <= ex_ <= fig.x1:
                P.append(Prim("poly", ((ex_, axis_y - 12), (ex_ - 5, axis_y - 20), (ex_ + 5, axis_y - 20)),
                              fill=colour))
                P.append(Prim("text", ((ex_ + 7, axis_y - 13),), text=name, fill=colour, size=9))


def figure_svg(fig: Figure, title: str = "") -> str:
    """The laid-out figure as an inline SVG element."""
    from html import escape

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {fig.width} {fig.height}" width="{fig.width}" '
           f'height="{fig.height}" role="img" aria-label="{escape(title)}" class="chart">',
           f'<rect x="0" y="0" width="{fig.width}" height="{fig.height}" fill="#ffffff"/>']
    for p in fig.prims:
        op = f' opacity="{p.opacity:.2f}"' if p.opacity < 1 else ""
        dash = f' stroke-dasharray="{" ".join(str(x) for x in p.dash)}"' if p.dash else ""
        if p.kind == "line":
            pts = " ".join(f"{x:.1f},{y:.1f}" for x, y in p.pts)
            out.append(f'<polyline points="{pts}" fill="none" stroke="{p.stroke}" stroke-width="{p.width}"{dash}{op}/>')
        elif p.kind == "poly":
            pts = " ".join(f"{x:.1f},{y:.1f}" for x, y in p.pts)
            stroke = f' stroke="{p.stroke}" stroke-width="{p.width}"' if p.stroke else ' stroke="none"'
            out.append(f'<polygon points="{pts}" fill="{p.fill or "none"}"{stroke}{op}/>')
        elif p.kind == "circle":
            (x, y), = p.pts
            out.append(f'<circle cx="{x:.1f}" cy="{y:.1f}" r="{p.r}" fill="{p.fill or "none"}" '
                       f'stroke="{p.stroke or "none"}" stroke-width="{p.width}"{op}/>')
        elif p.kind == "rect":
            (x, y), = p.pts
            stroke = f' stroke="{p.stroke}"' if p.stroke else ""
            out.append(f'<rect x="{x:.1f}" y="{y:.1f}" width="{p.w:.1f}" height="{p.h:.1f}" rx="{p.r}" '
                       f'fill="{p.fill or "none"}"{stroke}{op}/>')
        elif p.kind == "text":
            (x, y), = p.pts
            weight = ' font-weight="600"' if p.bold else ""
            out.append(f'<text x="{x:.1f}" y="{y:.1f}" text-anchor="{p.anchor}" font-size="{p.size}" '
                       f'font-family="system-ui, sans-serif" fill="{p.fill or PALETTE["text"]}"{weight}{op}>'
                       f'{escape(p.text)}</text>')
    out.append("</svg>")
    return "".join(out)

"""Small hand-made SVG charts for the report (plain string building, no plotting library).

Every label goes through :func:`html.escape`, so user column names cannot
break the markup.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from regbench.formatting import tick_text

#: Lines that are not models take the window's column colours.
from regbench.palette import SERIES as PALETTE  # noqa: E402

DASHES = ("6 3", "2 2", "8 3 2 3")

W, H = 640, 300
ML, MR, MT, MB = 64, 170, 28, 44


def _ticks(lo: float, hi: float, n: int = 5):
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo]
    raw = (hi - lo) / n
    mag = 10 ** math.floor(math.log10(raw))
    step = min((m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw), default=raw)
    start = math.ceil(lo / step) * step
    out, v = [], start
    while v <= hi + 1e-9 * step:
        out.append(round(v, 12))
        v += step
    return out


def line_chart(series, *, title: str, xlabel: str, ylabel: str, log_x: bool = False, vlines=(), band=None,
               hline=None, colours=None) -> str:
    """An SVG line chart.

    Parameters
    ----------
    series : list of (label, xs, ys)
    log_x : bool
        Plot x on a log10 scale (penalty paths).
    vlines : list of (x, label)
        Marked positions (e.g. the chosen α).
    band : (xs, lo, hi) or None
        A shaded band (e.g. CV mean ± one standard error).
    colours : list of str, optional
        One colour per series (the window's model colours); default the shared column colours.
    """
    def tx(x):
        return np.log10(np.asarray(x, dtype=float)) if log_x else np.asarray(x, dtype=float)

    xs_all = [tx(s[1]) for s in series]
    ys_all = [np.asarray(s[2], dtype=float) for s in series]
    if band is not None:
        xs_all.append(tx(band[0]))
        ys_all += [np.asarray(band[1], dtype=float), np.asarray(band[2], dtype=float)]
    f = _Frame(xs_all, ys_all, hline)
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {W} {H}" width="{W}" height="{H}" '
           f'role="img" aria-label="{escape(title)}" class="chart">',
           f'<rect x="0" y="0" width="{W}" height="{H}" fill="#ffffff"/>',
           f'<text x="{ML}" y="16" class="ct">{escape(title)}</text>']
    out += _axes(f, xlabel, ylabel, log_x)
    if hline is not None and f.y0 <= hline <= f.y1:
        out.append(f'<line x1="{ML}" y1="{f.py(hline):.1f}" x2="{ML + f.pw}" y2="{f.py(hline):.1f}" stroke="#999" '
                   'stroke-dasharray="2 3"/>')
    if band is not None:
        out += _band(f, tx(band[0]), np.asarray(band[1], float), np.asarray(band[2], float))
    out += _series_lines(f, [(label, tx(xs), np.asarray(ys, dtype=float)) for label, xs, ys in series], colours)
    out += _markers(f, vlines, tx, log_x)
    out.append("</svg>")
    return "".join(out)


class _Frame:
    """The plot area of a line chart and the data ranges it shows (y padded by 5 %)."""

    def __init__(self, xs_all, ys_all, hline=None):
        xcat = np.concatenate([x[np.isfinite(x)] for x in xs_all]) if xs_all else np.array([0.0])
        ycat = np.concatenate([y[np.isfinite(y)] for y in ys_all]) if ys_all else np.array([0.0])
        if hline is not None:
            ycat = np.append(ycat, hline)
        if xcat.size == 0:
            xcat = np.array([0.0, 1.0])
        if ycat.size == 0:
            ycat = np.array([0.0, 1.0])
        x0, x1 = float(xcat.min()), float(xcat.max())
        y0, y1 = float(ycat.min()), float(ycat.max())
        if x1 <= x0:
            x0, x1 = x0 - 0.5, x1 + 0.5
        if y1 <= y0:
            y0, y1 = y0 - 0.5, y1 + 0.5
        pad = 0.05 * (y1 - y0)
        self.x0, self.x1, self.y0, self.y1 = x0, x1, y0 - pad, y1 + pad
        self.pw, self.ph = W - ML - MR, H - MT - MB

    def px(self, x):
        return ML + (x - self.x0) / (self.x1 - self.x0) * self.pw

    def py(self, y):
        return MT + (self.y1 - y) / (self.y1 - self.y0) * self.ph


def _axes(f: _Frame, xlabel: str, ylabel: str, log_x: bool) -> list:
    """Grid lines, ticks, the frame and the axis labels."""
    out = []
    pw, ph = f.pw, f.ph
    for t in _ticks(f.y0, f.y1):
        yy = f.py(t)
        out.append(f'<line x1="{ML}" y1="{yy:.1f}" x2="{ML + pw}" y2="{yy:.1f}" stroke="#e4e4e4"/>')
        out.append(f'<text x="{ML - 6}" y="{yy + 4:.1f}" text-anchor="end" class="tk">{tick_text(t)}</text>')
    for t in _ticks(f.x0, f.x1):
        xx = f.px(t)
        label = tick_text(10 ** t) if log_x else tick_text(t)
        out.append(f'<line x1="{xx:.1f}" y1="{MT + ph}" x2="{xx:.1f}" y2="{MT + ph + 4}" stroke="#555"/>')
        out.append(f'<text x="{xx:.1f}" y="{MT + ph + 16}" text-anchor="middle" class="tk">{label}</text>')
    out.append(f'<rect x="{ML}" y="{MT}" width="{pw}" height="{ph}" fill="none" stroke="#888"/>')
    out.append(f'<text x="{ML + pw / 2:.1f}" y="{H - 8}" text-anchor="middle" class="al">{escape(xlabel)}</text>')
    out.append(f'<text x="14" y="{MT + ph / 2:.1f}" text-anchor="middle" class="al" '
               f'transform="rotate(-90 14 {MT + ph / 2:.1f})">{escape(ylabel)}</text>')
    return out


def _band(f: _Frame, bx, lo, hi) -> list:
    """A shaded band between ``lo`` and ``hi`` (x already on the chart's scale)."""
    ok = np.isfinite(bx) & np.isfinite(lo) & np.isfinite(hi)
    if not ok.any():
        return []
    pts = [f"{f.px(a):.1f},{f.py(b):.1f}" for a, b in zip(bx[ok], hi[ok])]
    pts += [f"{f.px(a):.1f},{f.py(b):.1f}" for a, b in zip(bx[ok][::-1], lo[ok][::-1])]
    return [f'<polygon points="{" ".join(pts)}" fill="#1f5f8b" fill-opacity="0.15" stroke="none"/>']


def _series_lines(f: _Frame, series, colours) -> list:
    """One line (or a dot, for a single point) per series, and the legend beside the plot."""
    out = []
    for k, (label, x, y) in enumerate(series):
        ok = np.isfinite(x) & np.isfinite(y)
        colour = colours[k] if colours is not None and k < len(colours) else PALETTE[k % len(PALETTE)]
        # Past the palette, lines repeat a colour with a dash pattern so each stays distinct.
        dash = "" if k < len(PALETTE) else f' stroke-dasharray="{DASHES[(k // len(PALETTE) - 1) % len(DASHES)]}"'
        if ok.sum() >= 2:
            pts = " ".join(f"{f.px(a):.1f},{f.py(b):.1f}" for a, b in zip(x[ok], y[ok]))
            out.append(f'<polyline points="{pts}" fill="none" stroke="{colour}" stroke-width="1.8"{dash}/>')
        elif ok.sum() == 1:
            out.append(f'<circle cx="{f.px(x[ok][0]):.1f}" cy="{f.py(y[ok][0]):.1f}" r="3" fill="{colour}"/>')
        if k < 14:
            ly = MT + 10 + 15 * k
            out.append(f'<line x1="{ML + f.pw + 10}" y1="{ly}" x2="{ML + f.pw + 26}" y2="{ly}" stroke="{colour}" '
                       f'stroke-width="2.5"{dash}/>')
            out.append(f'<text x="{ML + f.pw + 30}" y="{ly + 4}" class="lg">{escape(_short(label))}</text>')
    if len(series) > 14:
        out.append(f'<text x="{ML + f.pw + 10}" y="{MT + 10 + 15 * 14 + 4}" class="lg">+{len(series) - 14} more</text>')
    return out


def _markers(f: _Frame, vlines, tx, log_x: bool) -> list:
    """Vertical marks at given x (the chosen α), the first dashed long, the others short."""
    out = []
    for k, (x, label) in enumerate(vlines):
        if x is None or not math.isfinite(float(x)) or (log_x and x <= 0):
            continue
        xv = float(tx(np.array([x]))[0])
        if not f.x0 <= xv <= f.x1:
            continue
        xx = f.px(xv)
        out.append(f'<line x1="{xx:.1f}" y1="{MT}" x2="{xx:.1f}" y2="{MT + f.ph}" stroke="#222" '
                   f'stroke-dasharray="{"5 3" if k == 0 else "2 2"}"/>')
        out.append(f'<text x="{xx + 3:.1f}" y="{MT + 12 + 12 * k}" class="tk">{escape(label)}</text>')
    return out


def bar_chart(categories, groups, *, title: str, ylabel: str, colours=None) -> str:
    """Horizontal grouped bars: one row per category, one bar per group.

    Parameters
    ----------
    categories : list of str
        Row labels (e.g. design columns).
    groups : list of (label, values)
        One series per model, values aligned with ``categories``.
    colours : list of str, optional
        One colour per group (the window's model colours).
    """
    colour_of = (lambda k: colours[k]) if colours is not None else (lambda k: PALETTE[k % len(PALETTE)])
    n, g = len(categories), max(len(groups), 1)
    row_h = max(10, 6 * g + 6)
    left, right = 190, 160
    width = 640
    height = MT + 20 + n * row_h + 30
    vals = np.array([np.asarray(v, dtype=float) for _, v in groups]) if groups else np.zeros((1, n))
    finite = vals[np.isfinite(vals)]
    lo = min(0.0, float(finite.min())) if finite.size else -1.0
    hi = max(0.0, float(finite.max())) if finite.size else 1.0
    if hi <= lo:
        lo, hi = -1.0, 1.0
    pw = width - left - right

    def px(v):
        return left + (v - lo) / (hi - lo) * pw

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" '
           f'height="{height}" role="img" aria-label="{escape(title)}" class="chart">',
           f'<rect x="0" y="0" width="{width}" height="{height}" fill="#ffffff"/>',
           f'<text x="{left}" y="16" class="ct">{escape(title)}</text>']
    top = MT
    for t in _ticks(lo, hi):
        xx = px(t)
        out.append(f'<line x1="{xx:.1f}" y1="{top}" x2="{xx:.1f}" y2="{top + n * row_h}" stroke="#e4e4e4"/>')
        out.append(f'<text x="{xx:.1f}" y="{top + n * row_h + 14}" text-anchor="middle" class="tk">{tick_text(t)}</text>')
    out.append(f'<line x1="{px(0):.1f}" y1="{top}" x2="{px(0):.1f}" y2="{top + n * row_h}" stroke="#555"/>')
    bh = max(3.0, (row_h - 6) / g)
    for i, cat in enumerate(categories):
        y = top + i * row_h
        out.append(f'<text x="{left - 6}" y="{y + row_h / 2 + 4:.1f}" text-anchor="end" class="tk">{escape(_short(cat, 28))}</text>')
        for k in range(len(groups)):
            v = vals[k, i]
            if not math.isfinite(v):
                continue
            a, b = sorted((px(0), px(v)))
            out.append(f'<rect x="{a:.1f}" y="{y + 3 + k * bh:.1f}" width="{max(b - a, 0.6):.1f}" '
                       f'height="{bh - 0.5:.1f}" fill="{colour_of(k)}"/>')
    for k, (label, _) in enumerate(groups[:12]):
        ly = top + 10 + 15 * k
        out.append(f'<rect x="{left + pw + 12}" y="{ly - 6}" width="12" height="8" fill="{colour_of(k)}"/>')
        out.append(f'<text x="{left + pw + 28}" y="{ly + 2}" class="lg">{escape(_short(label))}</text>')
    out.append(f'<text x="{left + pw / 2:.1f}" y="{height - 6}" text-anchor="middle" class="al">{escape(ylabel)}</text>')
    out.append("</svg>")
    return "".join(out)


def _short(text, n: int = 24) -> str:
    text = str(text)
    return text if len(text) <= n else text[: n - 1] + "…"


def penalty_figure(session, name: str, width: int = 760, height: int = 470) -> str:
    """The penalty figure of family ``name`` as the window draws it (paths, columns used, held-out error)."""
    from regbench.palette import model_colour
    from regbench.report.pathfig import FigureData, build_figure, figure_svg

    pf = session.results.penalized[name]
    alpha = session.alphas().get(name, pf.alpha)
    model = session.models().get(name)
    cols = list(pf.path.columns)
    cv = pf.cv
    data = FigureData(alphas=pf.path.alphas, coef=pf.path.coef_std, columns=cols, alpha=float(alpha),
                      cv=(cv.alphas, cv.mean, cv.se, cv.alpha_min, cv.alpha_1se) if cv is not None else None,
                      colour=model_colour(name),
                      readout=list(zip(cols, map(float, model.coef_std))) if model is not None else None,
                      n_used=int(np.count_nonzero(model.coef)) if model is not None else None,
                      extras=[(e["name"], e["alpha"], model_colour(e["name"])) for e in session.extra_fits
                              if e["family"] == name])
    return figure_svg(build_figure(data, width, height), title=f"{name}: what the penalty does")
def _mark(shape: str, x: float, y: float, colour: str) -> str:
    """A small model mark: 'bar' (a tick), 'circle', 'diamond' or 'triangle'."""
    if shape == "bar":
        return f'<line x1="{x:.1f}" y1="{y - 6:.1f}" x2="{x:.1f}" y2="{y + 6:.1f}" stroke="{colour}" stroke-width="2.4"/>'
    if shape == "diamond":
        return (f'<polygon points="{x:.1f},{y - 5:.1f} {x + 4.5:.1f},{y:.1f} {x:.1f},{y + 5:.1f} {x - 4.5:.1f},{y:.1f}" '
                f'fill="{colour}"/>')
    if shape == "triangle":
        return (f'<polygon points="{x:.1f},{y - 5:.1f} {x + 4.5:.1f},{y + 4:.1f} {x - 4.5:.1f},{y + 4:.1f}" '
                f'fill="none" stroke="{colour}" stroke-width="1.6"/>')
    return f'<circle cx="{x:.1f}" cy="{y:.1f}" r="3.6" fill="none" stroke="{colour}" stroke-width="1.6"/>'


#: Look of an unbounded range: a faint dashed band across the whole plot.
_OPEN = 'fill="#c8553d" fill-opacity="0.08" stroke="#c8553d" stroke-opacity="0.6" stroke-dasharray="4 3"'

#: Mark shape of each model key in range charts (further models repeat the circle).
MARK_SHAPES = {"ols": "bar", "ridge": "circle", "lasso": "diamond", "elastic_net": "triangle"}


def range_bars(columns, low, high, marks, *, title: str, xlabel: str, note_unbounded: str = "no bound") -> str:
    """One horizontal band per column from ``low`` to ``high``, with model marks on it.

    Parameters
    ----------
    columns : list of str
    low, high : array (p,)
        NaN at both ends draws the row as unbounded (a hatched band across the plot).
    marks : list of (label, key, values)
        ``key`` picks the mark's shape (see :data:`MARK_SHAPES`); values aligned with ``columns``.
    """
    columns = list(columns)
    n = len(columns)
    low, high = np.asarray(low, float), np.asarray(high, float)
    row_h, left, right, width = 22, 190, 150, 640
    top = MT + 6
    height = top + n * row_h + 40
    vals = [low[np.isfinite(low)], high[np.isfinite(high)]] + [np.asarray(v, float) for _, _, v in marks]
    cat = np.concatenate([v[np.isfinite(v)] for v in vals] + [np.zeros(1)])
    lo, hi = float(cat.min()), float(cat.max())
    if hi <= lo:
        lo, hi = lo - 1.0, hi + 1.0
    pad = 0.06 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    pw = width - left - right

    def px(v):
        return left + (min(max(v, lo), hi) - lo) / (hi - lo) * pw

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" width="{width}" '
           f'height="{height}" role="img" aria-label="{escape(title)}" class="chart">',
           f'<rect x="0" y="0" width="{width}" height="{height}" fill="#ffffff"/>',
           f'<text x="{left}" y="16" class="ct">{escape(title)}</text>']
    bottom = top + n * row_h
    for t in _ticks(lo, hi):
        xx = px(t)
        out.append(f'<line x1="{xx:.1f}" y1="{top}" x2="{xx:.1f}" y2="{bottom}" stroke="#ececec"/>')
        out.append(f'<text x="{xx:.1f}" y="{bottom + 14}" text-anchor="middle" class="tk">{tick_text(t)}</text>')
    out.append(f'<line x1="{px(0):.1f}" y1="{top - 4}" x2="{px(0):.1f}" y2="{bottom}" stroke="#555"/>')
    for i, c in enumerate(columns):
        y = top + i * row_h
        mid = y + row_h / 2
        if i % 2:
            out.append(f'<rect x="{left}" y="{y}" width="{pw}" height="{row_h}" fill="#f7f9fa"/>')
        out.append(f'<text x="{left - 6}" y="{mid + 4:.1f}" text-anchor="end" class="tk">{escape(_short(c, 28))}</text>')
        if math.isfinite(low[i]) and math.isfinite(high[i]):
            a, b = px(low[i]), px(high[i])
            crosses = low[i] <= 0 <= high[i]
            fill = "#d4a017" if crosses else "#1f5f8b"
            out.append(f'<rect x="{a:.1f}" y="{mid - 5:.1f}" width="{max(b - a, 1.0):.1f}" height="10" rx="5" '
                       f'fill="{fill}" fill-opacity="0.28" stroke="{fill}" stroke-width="1"/>')
        else:
            out.append(f'<rect x="{left}" y="{mid - 5:.1f}" width="{pw}" height="10" {_OPEN}/>')
            out.append(f'<text x="{left + pw - 4}" y="{mid - 6:.1f}" text-anchor="end" class="tk">'
                       f'{escape(note_unbounded)}</text>')
        for k, (label, key, v) in enumerate(marks):
            v = float(np.asarray(v, float)[i])
            if math.isfinite(v):
                out.append(_mark(MARK_SHAPES.get(key, "circle"), px(v), mid, PALETTE[k % len(PALETTE)]))
    legend = [("sign settled", "#1f5f8b"), ("sign not settled", "#d4a017")]
    for k, (label, colour) in enumerate(legend):
        ly = top + 8 + 16 * k
        out.append(f'<rect x="{left + pw + 12}" y="{ly - 6}" width="16" height="9" rx="4" fill="{colour}" '
                   f'fill-opacity="0.28" stroke="{colour}"/>')
        out.append(f'<text x="{left + pw + 32}" y="{ly + 2}" class="lg">{escape(label)}</text>')
    ly = top + 8 + 16 * len(legend)
    out.append(f'<rect x="{left + pw + 12}" y="{ly - 6}" width="16" height="9" {_OPEN}/>')
    out.append(f'<text x="{left + pw + 32}" y="{ly + 2}" class="lg">{escape(note_unbounded)}</text>')
    for k, (label, key, _) in enumerate(marks[:10]):
        ly = top + 8 + 16 * (len(legend) + 1 + k)
        out.append(_mark(MARK_SHAPES.get(key, "circle"), left + pw + 20, ly - 2, PALETTE[k % len(PALETTE)]))
        out.append(f'<text x="{left + pw + 32}" y="{ly + 2}" class="lg">{escape(_short(label, 18))}</text>')
    out.append(f'<text x="{left + pw / 2:.1f}" y="{height - 8}" text-anchor="middle" class="al">{escape(xlabel)}</text>')
    out.append("</svg>")
    return "".join(out)

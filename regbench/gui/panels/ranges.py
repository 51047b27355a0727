"""How far can equally good models differ: ranges over every near-best linear model.

A thin view of :class:`regbench.analysis.ranges.Ranges` (computed on the worker with
the other comparisons): a band per column from the smallest to the largest
coefficient any near-best model gives it, the fitted models marked on it; a strip
of every row's prediction range; the columns, rows and fits as tables.  The
tolerance control writes the session's range tolerance, which recomputes only
the ranges (no refit).  For a yes/no outcome the ranges come from the quadratic
approximation of the log-loss, and the panel says so beside the tolerance; the
strip shows probabilities.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtGui, QtWidgets

from regbench.analysis.ranges import KIND_HELDOUT, QUADRATIC_WORDS, ranges_unavailable
from regbench.data.identifiers import row_label_column, row_names, with_row_names
from regbench.gui.axislabels import name_categories
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, keep_legend_above, model_colour, plain_axes
from regbench.formatting import number_text
from regbench.gui.tables import GridModel, make_view
from regbench.models.coding import design_sd
from regbench.models.results import model_label

Qt = QtCore.Qt

#: Choices of the tolerance control: (label, τ); None is the held-out default.
CHOICES = (("one SE of the best held-out error", None), ("within 0.1 % of the best training error", 0.001),
           ("within 1 %", 0.01), ("within 5 %", 0.05), ("within 10 %", 0.10), ("within 25 %", 0.25))
#: Mark symbols per model key (others: a square).
SYMBOLS = {"ols": "|", "ridge": "o", "lasso": "d", "elastic_net": "t"}
#: Rows drawn in the strip at most; a larger table shows the widest rows and an even spread of the rest.
STRIP_ROWS = 2000
SETTLED = "#2f6f73"
OPEN = "#d4a017"
#: Bands with no bound carry the words "no bound" up to this many columns (then a line of text each
#: would overlap the next).
WORDED_BANDS = 40


def _see_through(colour: str, alpha: int) -> QtGui.QBrush:
    fill = QtGui.QColor(colour)
    fill.setAlpha(alpha)
    return QtGui.QBrush(fill)


class _Grid(GridModel):
    """Numbers with significant digits (a coefficient of 0.00014 must not read as 0)."""

    def cell_display(self, r, c):
        v = self.value(r, c) if c < len(self.rows[r]) else None
        if isinstance(v, (float, np.floating)):
            return number_text(v, self.digits, missing="")
        return super().cell_display(r, c)


class RangesPanel(Panel):
    key = "ranges"
    title = "How far can equally good models differ"
    nav = "Equally good models"
    uses_comparisons = True

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.choice = QtWidgets.QComboBox()
        for label, tau in CHOICES:
            self.choice.addItem(label, tau)
        self.choice.addItem("other…", "other")
        self.custom = QtWidgets.QDoubleSpinBox()
        self.custom.setDecimals(2)
        self.custom.setRange(0.01, 1000.0)
        self.custom.setSuffix(" %")
        self.custom.setValue(2.0)
        self.custom.setVisible(False)
        self.choice.activated.connect(self._chosen)
        self.custom.editingFinished.connect(self._custom_done)
        self.in_force = QtWidgets.QLabel("")
        self.in_force.setWordWrap(True)
        self.in_force.setStyleSheet(f"color: {PALETTE['muted']};")
        lay.addWidget(hbox(caption("Near-best means"), self.choice, self.custom, self.in_force, stretch_last=False))

        split = QtWidgets.QSplitter(Qt.Horizontal)
        left = QtWidgets.QSplitter(Qt.Vertical)
        self.bars = pg.PlotWidget()
        self.bars.export_name = "coefficient ranges"
        self.bars.showGrid(x=True, y=False, alpha=0.2)
        self.bars.setLabel("bottom", "standardized coefficient (per SD of the column)")
        self.bars.setMouseEnabled(x=True, y=False)
        left.addWidget(self.bars)
        self.strip = pg.PlotWidget()
        self.strip.export_name = "prediction ranges"
        self.strip.showGrid(x=False, y=True, alpha=0.2)
        self.strip.setLabel("bottom", "rows by OLS prediction; a line spans the near-best models")
        left.addWidget(self.strip)
        self._strip_labels = []
        self.strip.getViewBox().sigResized.connect(self._strip_room)
        self.strip.getViewBox().sigResized.connect(self._declutter_labels)
        self.strip.getViewBox().sigRangeChanged.connect(self._declutter_labels)
        left.setSizes([480, 220])
        split.addWidget(left)

        self.tabs = QtWidgets.QTabWidget()
        self.columns_model = _Grid()
        self.columns_view = make_view(self.columns_model)
        self.tabs.addTab(self.columns_view, "Columns")
        self.rows_model = _Grid()
        self.rows_view = make_view(self.rows_model)
        # The first column names each row (its identifier or number); a running count beside it says nothing.
        self.rows_view.verticalHeader().setVisible(False)
        self.tabs.addTab(self.rows_view, "Rows that differ most")
        self.fits_model = _Grid()
        self.fits_view = make_view(self.fits_model)
        self.tabs.addTab(self.fits_view, "The fits")
        self.tabs.currentChanged.connect(self._tab_shown)
        self.trades = QtWidgets.QLabel("")
        self.trades.setWordWrap(True)
        self.trades.setTextInteractionFlags(Qt.TextSelectableByMouse)
        right = QtWidgets.QWidget()
        rl = QtWidgets.QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        rl.addWidget(self.tabs, 1)
        rl.addWidget(self.trades)
        split.addWidget(right)
        split.setSizes([640, 560])
        lay.addWidget(split, 1)
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.bars, self.strip]

    def views(self):
        return [self.columns_view, self.rows_view, self.fits_view]

    # -- the tolerance control -------------------------------------------------------------
    def _chosen(self, index):
        data = self.choice.itemData(index)
        self.custom.setVisible(data == "other")
        if data == "other":
            self.custom.setFocus()
            return
        self._apply(data)

    def _custom_done(self):
        if self.choice.currentData() == "other":
            self._apply(self.custom.value() / 100.0)

    def _apply(self, tau):
        s = self.session
        if s is None or s.settings.range_tolerance == tau:
            return
        s.set_range_tolerance(tau)

    def _show_choice(self, tau):
        self.choice.blockSignals(True)
        idx = next((i for i, (_, t) in enumerate(CHOICES) if t == tau), None)
        if idx is None:
            idx = len(CHOICES)
            self.custom.blockSignals(True)
            self.custom.setValue(100.0 * tau)
            self.custom.blockSignals(False)
        self.choice.setCurrentIndex(idx)
        self.custom.setVisible(idx == len(CHOICES))
        self.choice.blockSignals(False)

    # -- drawing -------------------------------------------------------------------------
    def clear(self):
        super().clear()
        self._unfilled = {}
        self._hold_paint(False)

    def _hold_paint(self, hold: bool) -> None:
        """Keep both plots from painting until their drawing runs (or let them paint again)."""
        for plot in self.plots():
            plot.setUpdatesEnabled(not hold)

    def refresh(self, session):
        self._show_choice(session.settings.range_tolerance)
        rg = session.ranges() if session.results is not None else None
        if rg is None:
            self.bars.clear()
            self.strip.clear()
            self._strip_span = None
            self._unfilled = {}
            self._hold_paint(False)
            for m in (self.columns_model, self.rows_model, self.fits_model):
                m.set_rows([], [])
            self.in_force.setText("")
            self.trades.setText("")
            why = ranges_unavailable(session.results) if session.results is not None else None
            self.set_sentences(["Fit the models to see how far every near-best model can differ."
                                if session.results is None else
                                why or "Ranges over near-best models are not available for this fit."])
            return
        which = "held-out default" if rg.tolerance_kind == KIND_HELDOUT else "set here"
        approx = (f" Quadratic approximation: the ranges come from the {QUADRATIC_WORDS}, close to but not "
                  "exactly the extremes over those models; coefficients are on the log-odds scale."
                  if rg.approximation == "quadratic" else "")
        self.in_force.setText(f"In force ({which}): {rg.tolerance_note}.{approx}")
        self.set_sentences([self._name_rows(t) for t in rg.sentences[:2]])
        self.trades.setText("\n".join(t["sentence"] for t in rg.trades) + (
            "\n" + " ".join(rg.sentences[2:]) if len(rg.sentences) > 2 else ""))
        self.trades.setVisible(bool(self.trades.text().strip()))
        self._fill_tables(rg)
        # The plots come a turn each after the shown table, so no piece of the drawing holds the window long;
        # each is painted once drawn, in a turn of its own, not with the table in the panel's first paint.
        self._hold_paint(getattr(self.window_, "draw_in_steps", False))
        # The design's SDs (a pass over its rows when the fit kept no cross-products) come from the worker.
        design, results = session.design, session.results
        self.prepare(self._draw_bands, design, lambda: design_sd(design, results),
                     "Measuring each column's spread")
        self.defer(self._draw_strip, rg)
        self._fill_hidden_tables()

    def _draw_bands(self, sd):
        """The bands and the fits on them, with the design's SDs ``sd``."""
        session = self.session
        rg = session.ranges() if session is not None and session.results is not None else None
        if rg is None:
            return
        # A fit on every level of a category sits here as the same predictor on the design's columns.
        self._draw_bars(rg, {k: m.on_design(sd) for k, m in session.models().items()})

    def _draw_bars(self, rg, models):
        plot = self.bars
        plot.setUpdatesEnabled(True)
        plot.clear()
        legend = plot.getPlotItem().legend or plot.addLegend(offset=(6, 2), labelTextSize="8pt")
        legend.clear()
        legend.setColumnCount(4)  # one line above the bands
        cols = list(rg.columns)
        p = len(cols)
        ys = np.arange(p)[::-1].astype(float)
        vals = [rg.low_std[rg.bounded], rg.high_std[rg.bounded]]
        vals += [np.asarray(m.coef_std, float) for m in models.values()]
        cat = np.concatenate([v[np.isfinite(v)] for v in vals] + [np.zeros(1)])
        lo, hi = float(cat.min()), float(cat.max())
        span = (hi - lo) or 1.0
        lo, hi = lo - 0.05 * span, hi + 0.05 * span
        # One item per kind of band (sign settled, sign open, no bound), each holding every column's band:
        # a thousand rectangle items took a tenth of a second to add and as long to paint.
        bounded, settled = np.asarray(rg.bounded, bool), np.asarray(rg.sign_settled, bool)
        low, high = np.asarray(rg.low_std, float), np.asarray(rg.high_std, float)
        for mask, colour in ((bounded & settled, SETTLED), (bounded & ~settled, OPEN)):
            if mask.any():
                plot.addItem(pg.BarGraphItem(x0=low[mask], width=np.maximum(high[mask] - low[mask], 1e-12),
                                             y=ys[mask], height=0.44, brush=_see_through(colour, 80),
                                             pen=pg.mkPen(colour, width=1)))
        free = ~bounded
        if free.any():
            plot.addItem(pg.BarGraphItem(x0=np.full(int(free.sum()), lo), width=hi - lo, y=ys[free], height=0.44,
                                         brush=_see_through(PALETTE["warn"], 22),
                                         pen=pg.mkPen(PALETTE["warn"], width=1, style=Qt.DashLine)))
            if p <= WORDED_BANDS:   # beyond, the words would run together; the table says "no bound"
                for j in np.flatnonzero(free):
                    text = pg.TextItem("no bound", color=PALETTE["warn"], anchor=(1, 0.5))
                    text.setPos(hi, ys[j] + 0.32)
                    plot.addItem(text)
        zero = pg.InfiniteLine(pos=0, angle=90, pen=pg.mkPen(PALETTE["text"], width=1))
        plot.addItem(zero)
        for name, m in models.items():
            v = np.asarray(m.coef_std, float)
            ok = np.isfinite(v)
            sym = SYMBOLS.get(name, "s")
            brush = None if sym in ("o", "t") else model_colour(name)
            sc = pg.ScatterPlotItem(v[ok], ys[ok], symbol=sym, size=11 if sym == "|" else 8,
                                    pen=pg.mkPen(model_colour(name), width=2), brush=brush)
            plot.addItem(sc)
            legend.addItem(sc, model_label(name))
        # The widest bands (a column with no bound first) are named first.
        name_categories(plot, "left", ys, cols, weight=np.where(bounded, high - low, np.inf))
        plot.setLabel("bottom", "standardized log-odds coefficient (per SD of the column)"
                      if rg.outcome == "binary" else "standardized coefficient (per SD of the column)")
        plot.setXRange(lo, hi, padding=0)
        keep_legend_above(plot, -0.7, p - 0.5)  # the bands, and a band above them for the legend

    def _draw_strip(self, rg):
        plot = self.strip
        plot.setUpdatesEnabled(True)
        plot.clear()
        self._strip_span = None
        if rg.row_half is None or rg.row_half.size == 0:
            return
        n = rg.row_half.size
        idx = np.arange(n)
        if n > STRIP_ROWS:
            # Every widest row and an even spread of the rest, so a big table still draws at once.
            keep = set(np.argsort(-rg.row_half)[:50].tolist())
            keep.update(np.linspace(0, n - 1, STRIP_ROWS - len(keep)).astype(int).tolist())
            idx = np.array(sorted(keep))
            plot.setTitle(f"{idx.size:,} of {n:,} rows shown (the widest and an even spread)", size="8pt")
        else:
            plot.setTitle("")
        order = idx[np.argsort(rg.row_centre[idx], kind="stable")]
        x = np.arange(order.size, dtype=float)
        if rg.outcome == "binary":  # probabilities: the log-odds ends map exactly (a monotone map)
            centre, low, high = rg.probabilities()
        else:
            centre, low, high = rg.row_centre, rg.row_centre - rg.row_half, rg.row_centre + rg.row_half
        lo, hi = low[order], high[order]
        xs = np.repeat(x, 2)
        ys = np.column_stack([lo, hi]).ravel()
        plot.addItem(pg.PlotDataItem(xs, ys, connect="pairs", pen=pg.mkPen(PALETTE["accent"], width=1)))
        first = "logistic" if rg.outcome == "binary" else "ols"
        plot.addItem(pg.ScatterPlotItem(x, centre[order], size=3, pen=None, brush=model_colour(first)))
        # The widest rows are named, widest first; a name that would cover another is left out
        # (the rows table lists every one).
        at = {int(rg.row_numbers[i]): k for k, i in enumerate(order)}
        self._strip_labels = []
        names = self.row_names([d["row"] for d in rg.widest[:3]])
        for d, name in zip(rg.widest[:3], names):
            k = at.get(int(d["row"]))
            if k is None:
                continue
            # Near either end the name leans inward so it stays inside the plot.
            side = 1.0 if k > 0.9 * order.size else 0.0 if k < 0.1 * order.size else 0.5
            t = pg.TextItem(name, color=PALETTE["warn"], anchor=(side, 1.1))
            t.setPos(float(k), float(hi[k]))
            plot.addItem(t)
            self._strip_labels.append(t)
        if rg.outcome == "binary":
            plot.setLabel("left", f"probability of {rg.target}")
            plot.setLabel("bottom", "rows by logistic prediction; a line spans the near-best models")
        else:
            plot.setLabel("left", rg.target)
            plot.setLabel("bottom", "rows by OLS prediction; a line spans the near-best models")
        self._strip_span = (float(lo.min()), float(hi.max()))
        self._strip_room()
        self._declutter_labels()

    def _strip_room(self, *_):
        """The strip's y range: the lines, plus a band above them one row name tall in this plot's pixels."""
        span = getattr(self, "_strip_span", None)
        if span is None:
            return
        bottom, top = span
        height = float(self.strip.getViewBox().height())
        f = min(0.5, 30.0 / height) if height > 0 else 0.25
        extent = (top - bottom) or 1.0
        self.strip.setYRange(bottom, top + extent * f / (1.0 - f), padding=0.02)  # room for the row names

    def _name_rows(self, text: str) -> str:
        """Add the table's name of the row a sentence points at ("row 270" → "row 270, batch GH05-030")."""
        return with_row_names(text, getattr(self.session, "table", None), column=self.label_column())

    def label_column(self):
        """The table's row-label column (its identifier), or None."""
        table = getattr(self.session, "table", None)
        if table is None:
            return None
        if getattr(self, "_label_of", None) is not table:   # one look through the columns per table
            self._label_of, self._label = table, row_label_column(table)
        return self._label

    def row_names(self, rows) -> list:
        """1-based table rows named as the table names them ("GH01-003"), else "row N"."""
        return row_names(getattr(self.session, "table", None), rows, column=self.label_column())

    def _declutter_labels(self, *_):
        """Hide each row name whose box meets one already shown (on every resize or zoom too)."""
        shown = []
        for t in getattr(self, "_strip_labels", ()):
            if t.scene() is None:
                continue
            t.setVisible(True)
            t.updateTransform(force=True)
            box = t.sceneBoundingRect()
            # A name that would cross the plot's side leans inward instead (names are as long as the
            # table's identifiers).
            area = self.strip.getViewBox().sceneBoundingRect()
            lean = 1.0 if box.right() > area.right() else 0.0 if box.left() < area.left() else None
            if lean is not None:
                t.setAnchor((lean, 1.1))
                t.updateTransform(force=True)
                box = t.sceneBoundingRect()
            if any(box.intersects(o) for o in shown):
                t.setVisible(False)
            else:
                shown.append(box)

    def _fill_tables(self, rg):
        """Fill the table on the shown tab now; the other two wait for later turns (see
        :meth:`_fill_hidden_tables`), so a wide table's first visit fills and sizes one table, not three."""
        fills = (self._fill_columns, self._fill_rows, self._fill_fits)
        shown = self.tabs.currentIndex()
        self._unfilled = {k: (fill, rg) for k, fill in enumerate(fills) if k != shown}
        fills[shown](rg)

    def _fill_hidden_tables(self):
        """Leave each table not on show for a turn of its own, after the plots."""
        later = (self._fill_columns_later, self._fill_rows_later, self._fill_fits_later)
        for k in sorted(self.__dict__.get("_unfilled", {})):
            self.defer(later[k])   # one name each: a deferred drawing is replaced by its name

    def _fill_columns_later(self):
        self._fill_unfilled(0)

    def _fill_rows_later(self):
        self._fill_unfilled(1)

    def _fill_fits_later(self):
        self._fill_unfilled(2)

    def _fill_unfilled(self, k):
        """Fill table ``k`` if it still waits (a tab switch may have filled it already)."""
        entry = self.__dict__.get("_unfilled", {}).pop(k, None)
        if entry is not None:
            fill, rg = entry
            fill(rg)

    def _tab_shown(self, k):
        """A tab brought forward shows its table filled, even before its turn came."""
        self._fill_unfilled(k)

    def _fill_columns(self, rg):
        binary = rg.outcome == "binary"
        # Least squares: importance as a share of the best error; yes/no: the mean square of the log-odds change.
        scale = 1.0 if binary or not rg.best_error > 0 else rg.best_error
        p = len(rg.columns)
        # Five narrow columns so the table fits beside the bands at 1400 × 900: the standardized ends are
        # what the bands draw, and each end cell's tooltip gives them.
        unit = ("importance: the mean squared change of the log-odds when this column is swapped for an "
                "independent copy of itself" if binary else
                "importance: how much the error grows when this column is swapped for an independent copy "
                "of itself, as a share of the best error")
        rows, fg, tips = [], {}, {}
        for j in range(p):
            imp_lo = float(rg.importance_low[j] / scale)
            if rg.bounded[j]:
                rows.append([float(rg.low[j]), float(rg.high[j]), "settled" if rg.sign_settled[j] else "open",
                             imp_lo, float(rg.importance_high[j] / scale)])
                tips[(j, 0)] = f"per SD of the column: {number_text(float(rg.low_std[j]), 3)}"
                tips[(j, 1)] = f"per SD of the column: {number_text(float(rg.high_std[j]), 3)}"
                if not rg.sign_settled[j]:
                    fg[(j, 2)] = OPEN
            else:
                rows.append(["no bound", "no bound", "open", imp_lo, "no bound"])
                for c in range(3):
                    fg[(j, c)] = PALETTE["warn"]
            tips[(j, 3)] = tips[(j, 4)] = unit
            tips[(j, 2)] = "the sign is the same in every near-best model" if rg.bounded[j] and rg.sign_settled[j] \
                else "near-best models disagree on the sign"
        # A yes/no outcome's ends are log-odds: the note above the bands says so.
        heads = ["Lowest", "Highest", "Sign", "Importance from", "to"]
        self.columns_model.set_rows(rows, heads, row_labels=list(rg.columns), foregrounds=fg, tips=tips, digits=3)
        self.columns_view.resizeColumnsToContents()

    def _fill_rows(self, rg):
        binary = rg.outcome == "binary"
        rows, tips = [], {}
        for r, d in enumerate(rg.widest):
            unusual = [f"{c} {v:.4g} ({z:+.1f} SD)" for c, v, z in d["unusual"]]
            # The first unusual value in the cell (the table fits its room); all of them in its tooltip.
            cell = (f"{d['unusual'][0][0]} {d['unusual'][0][2]:+.1f} SD"
                    + (f" and {len(unusual) - 1} more" if len(unusual) > 1 else "") if unusual else "nothing unusual")
            if binary:
                rows.append([d["row"], d["p_centre"], d["p_low"], d["p_high"], d["p_width"], cell])
                tips[(r, 2)] = tips[(r, 3)] = f"log-odds from {d['low']:.3g} to {d['high']:.3g}"
            else:
                rows.append([d["row"], d["centre"], d["low"], d["high"], d["width"], cell])
            if unusual:
                tips[(r, 5)] = "; ".join(unusual)
        heads = (["Row", "Logistic probability", "Lowest", "Highest", "Width", "Unusual values"]
                 if binary else ["Row", "OLS prediction", "Lowest", "Highest", "Width", "Unusual values"])
        # Each row is named the way the table names it: its identifier, when it has one (the row
        # number in the cell's tooltip), else its row number.
        label_column = self.label_column()
        if label_column is not None:
            heads[0] = label_column
            for r, (row, name) in enumerate(zip(rows, self.row_names([d["row"] for d in rg.widest]))):
                tips[(r, 0)] = f"row {int(row[0])} of the table"
                row[0] = name
        self.rows_model.set_rows(rows, heads, tips=tips, digits=4)
        self.rows_view.resizeColumnsToContents()

    def _fill_fits(self, rg):
        binary = rg.outcome == "binary"
        rows, fg = [], {}
        for k, (name, m) in enumerate(rg.models.items()):
            rows.append([model_label(name), float(100.0 * m.excess), "yes" if m.inside else "no"])
            if not m.inside:
                fg[(k, 2)] = PALETTE["warn"]
        word = "log-loss" if binary else "error"
        self.fits_model.set_rows(rows, ["Model", f"Training {word} above the best (%)", "Inside the set"],
                                 foregrounds=fg, digits=3)
        self.fits_view.resizeColumnsToContents()

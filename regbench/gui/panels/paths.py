"""How the penalty shapes each family: coefficient paths, the CV curve and the chosen α."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, model_colour, series_colour
from regbench.models.results import model_label

Qt = QtCore.Qt
LEGEND_MAX = 14


class PathsPanel(Panel):
    key = "paths"
    title = "How the fits differ: the penalty paths"
    nav = "Fits differ · paths"
    # Drawn from the fits and the chosen α alone; the count of columns used waits for the worker.
    uses_comparisons = False

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.family = QtWidgets.QComboBox()
        self.family.currentIndexChanged.connect(self._redraw)
        self.scale = QtWidgets.QComboBox()
        self.scale.addItem("standardized coefficients", "std")
        self.scale.addItem("coefficients in table units", "orig")
        self.scale.currentIndexChanged.connect(self._redraw)
        self.alpha_text = QtWidgets.QLabel("")
        self.reset_btn = QtWidgets.QPushButton("Back to the CV choice")
        self.reset_btn.clicked.connect(self._reset_alpha)
        lay.addWidget(hbox(caption("Family"), self.family, caption("Show"), self.scale, 1, self.alpha_text, self.reset_btn))
        self.keep_btn = QtWidgets.QPushButton("Keep this α as an extra fit")
        self.keep_btn.setToolTip("Add this family at the chosen α to the comparisons, beside the four chosen models")
        self.keep_btn.clicked.connect(self._keep_extra)
        self.extras = QtWidgets.QComboBox()
        self.extras.setMinimumContentsLength(18)
        self.remove_btn = QtWidgets.QPushButton("Remove")
        self.remove_btn.clicked.connect(self._remove_extra)
        lay.addWidget(hbox(self.keep_btn, caption("Extra fits"), self.extras, self.remove_btn, stretch_last=True))
        self.path_plot = pg.PlotWidget()
        self.path_plot.export_name = "coefficient paths"
        self.path_plot.showGrid(x=True, y=True, alpha=0.25)
        self.path_plot.setLabel("bottom", "log10 α")
        self.path_plot.setLabel("left", "coefficient")
        self.cv_plot = pg.PlotWidget()
        self.cv_plot.export_name = "cross-validation curve"
        self.cv_plot.showGrid(x=True, y=True, alpha=0.25)
        self.cv_plot.setLabel("bottom", "log10 α")
        self.cv_plot.setLabel("left", "held-out MSE")
        self.cv_plot.setXLink(self.path_plot)
        for plot in (self.path_plot, self.cv_plot):
            plot.getAxis("left").enableAutoSIPrefix(False)
        self.readout = QtWidgets.QLabel(" ")
        self.readout.setStyleSheet(f"color: {PALETTE['muted']};")
        split = QtWidgets.QSplitter(Qt.Vertical)
        split.addWidget(self.path_plot)
        split.addWidget(self.cv_plot)
        split.setSizes([480, 260])
        lay.addWidget(split, 1)
        lay.addWidget(self.readout)
        pen = pg.mkPen(PALETTE["accent"], width=2)
        self.line = pg.InfiniteLine(angle=90, movable=True, pen=pen, hoverPen=pg.mkPen(PALETTE["warn"], width=3),
                                    label="chosen α", labelOpts={"position": 0.95, "color": PALETTE["accent"]})
        self.cv_line = pg.InfiniteLine(angle=90, movable=True, pen=pen, hoverPen=pg.mkPen(PALETTE["warn"], width=3))
        self.line.sigDragged.connect(lambda l: self._sync(self.cv_line, l.value()))
        self.cv_line.sigDragged.connect(lambda l: self._sync(self.line, l.value()))
        self.line.sigPositionChangeFinished.connect(self._line_moved)
        self.cv_line.sigPositionChangeFinished.connect(self._line_moved)
        self.path_plot.scene().sigMouseMoved.connect(self._hover)
        self._curves = []
        self._fit = None
        self._drawn = None        # (fit, scale) the curves were drawn for
        self._extra_lines = []

    def plots(self):
        return [self.path_plot, self.cv_plot]

    def view_state(self):
        return {"family": self.family.currentData(), "scale": self.scale.currentData()}

    def restore_view_state(self, state):
        i = self.scale.findData(state.get("scale"))
        if i >= 0:
            self.scale.blockSignals(True)
            self.scale.setCurrentIndex(i)
            self.scale.blockSignals(False)
        if state.get("family"):
            self.family.blockSignals(True)
            self.family.clear()
            self.family.addItem(model_label(state["family"]), state["family"])
            self.family.blockSignals(False)

    # -- filling ---------------------------------------------------------------------
    def refresh(self, session):
        results = session.results
        if results is None:
            self.set_sentences(["Fit the models to see how the penalty changes each coefficient."])
            return
        names = list(results.penalized)
        current = self.family.currentData()
        self.family.blockSignals(True)
        self.family.clear()
        for n in names:
            self.family.addItem(model_label(n), n)
        if current in names:
            self.family.setCurrentIndex(names.index(current))
        self.family.blockSignals(False)
        self._redraw()

    def _chosen_alpha(self, name):
        return self.session.alphas().get(name)

    def _redraw(self, *_):
        session = self.session
        if session is None or session.results is None or self.family.currentData() is None:
            return
        name = self.family.currentData()
        fit = session.results.penalized[name]
        self._fit = fit
        std = self.scale.currentData() == "std"
        path = fit.path
        x = np.log10(path.alphas)
        coef = path.coef_std if std else path.coef
        lo, hi = float(x.min()), float(x.max())
        cv = fit.cv
        if self._drawn is None or self._drawn[0] is not fit or self._drawn[1] != std:
            # The curves change with the family or the scale, not with α: an α update only moves lines.
            self._draw_curves(name, fit, std, x, coef)
        alpha = self._chosen_alpha(name) or fit.alpha
        for line in (self.line, self.cv_line):
            line.setBounds((lo - 1.0, hi + 1.0))
            line.setValue(np.log10(alpha))
        for plot, line in ((self.path_plot, self.line), (self.cv_plot, self.cv_line)):
            if line not in plot.getPlotItem().items:
                plot.addItem(line)
        self._fill_extras(session, name)
        rule = {"cv_min": "the lowest CV error", "cv_1se": "the one-SE rule", "fixed": "a fixed value"}.get(fit.alpha_rule, fit.alpha_rule)
        model = self.session.models().get(name) if self.session.derived_ready else None
        n_used = int(np.count_nonzero(model.coef)) if model is not None else 0
        self.alpha_text.setText(f"chosen α = {alpha:.4g}")
        s = [f"{model_label(name)} is shown at α = {alpha:.3g}"
             + (f" ({rule})" if np.isclose(alpha, fit.alpha) else " (chosen by hand)")
             + (f", where it uses {n_used} of {len(path.columns)} columns." if model is not None else ".")]
        if cv is not None:
            s.append(f"Held-out error is lowest at α = {cv.alpha_min:.3g}; the simplest model within one standard "
                     f"error of that is at α = {cv.alpha_1se:.3g}. Drag the line to try any α.")
        self.set_sentences(s)

    def _draw_curves(self, name, fit, std, x, coef):
        path = fit.path
        self.path_plot.clear()
        self._curves = []
        self._extra_lines = []
        legend = None
        if len(path.columns) <= LEGEND_MAX:
            if self.path_plot.getPlotItem().legend is None:
                legend = self.path_plot.addLegend(offset=(-10, 10), labelTextSize="8pt")
            else:
                legend = self.path_plot.getPlotItem().legend
                legend.clear()
        elif self.path_plot.getPlotItem().legend is not None:
            self.path_plot.getPlotItem().legend.clear()
        for j, col in enumerate(path.columns):
            c = self.path_plot.plot(x, coef[:, j], pen=pg.mkPen(series_colour(j), width=1.6), name=col if legend else None)
            self._curves.append(c)
        self.path_plot.addItem(pg.InfiniteLine(pos=0, angle=0, pen=pg.mkPen(PALETTE["grid"])))
        lo, hi = float(x.min()), float(x.max())
        # Room to the right of the largest α, where the paths have met at 0, for the legend.
        self.path_plot.setXRange(lo, hi + (0.34 * (hi - lo) if legend else 0.0), padding=0.02)
        self.path_plot.setLabel("left", "standardized coefficient" if std else "coefficient (table units)")
        self.cv_plot.clear()
        cv = fit.cv
        colour = model_colour(name)
        if cv is not None:
            cx = np.log10(cv.alphas)
            faint = pg.mkColor(colour)
            faint.setAlpha(120)
            self.cv_plot.addItem(pg.ErrorBarItem(x=cx, y=cv.mean, height=2 * cv.se, beam=0.0, pen=pg.mkPen(faint, width=1)))
            self.cv_plot.plot(cx, cv.mean, pen=pg.mkPen(colour, width=2), symbol="o", symbolSize=4,
                              symbolBrush=colour, symbolPen=None)
            # The two labels sit at different heights so they never overlap when the α values are close.
            for a, lab, style, at in ((cv.alpha_min, "lowest error", Qt.DashLine, 0.9),
                                      (cv.alpha_1se, "one SE simpler", Qt.DotLine, 0.7)):
                i = int(np.argmin(np.abs(cv.alphas - a)))
                self.cv_plot.plot([np.log10(a)], [cv.mean[i]], pen=None, symbol="d", symbolSize=11,
                                  symbolBrush=PALETTE["warn"] if style == Qt.DashLine else PALETTE["muted"])
                for plot in (self.path_plot, self.cv_plot):
                    plot.addItem(pg.InfiniteLine(pos=np.log10(a), angle=90, pen=pg.mkPen(PALETTE["muted"], style=style),
                                                 label=lab if plot is self.cv_plot else None,
                                                 labelOpts={"position": at, "color": PALETTE["muted"]}))
        self._drawn = (fit, std)

    @staticmethod
    def _sync(line, value):
        line.blockSignals(True)
        line.setValue(value)
        line.blockSignals(False)

    def _line_moved(self, line):
        name = self.family.currentData()
        if name is None:
            return
        self.window_.set_alpha(name, float(10 ** line.value()))

    def _fill_extras(self, session, family):
        extras = session.extra_fits
        self.extras.clear()
        for e in extras:
            self.extras.addItem(f"{e['name']}", e["name"])
        self.extras.setEnabled(bool(extras))
        self.remove_btn.setEnabled(bool(extras))
        for line, plot in self._extra_lines:
            plot.removeItem(line)
        self._extra_lines = []
        for e in extras:
            if e["family"] != family:
                continue
            pen = pg.mkPen(model_colour(e["name"]), width=1.4, style=Qt.DashDotLine)
            for plot in (self.path_plot, self.cv_plot):
                line = pg.InfiniteLine(pos=np.log10(e["alpha"]), angle=90, pen=pen,
                                       label=e["name"] if plot is self.path_plot else None,
                                       labelOpts={"position": 0.08, "color": model_colour(e["name"])})
                plot.addItem(line)
                self._extra_lines.append((line, plot))

    def _keep_extra(self):
        name = self.family.currentData()
        if name is not None:
            self.window_.add_extra_fit(name, float(10 ** self.line.value()))

    def _remove_extra(self):
        name = self.extras.currentData()
        if name is not None:
            self.window_.remove_extra_fit(name)

    def _reset_alpha(self):
        name = self.family.currentData()
        if name is not None:
            self.window_.set_alpha(name, None)

    def move_alpha(self, alpha: float) -> None:
        """Move the chosen-α line as a drag would (for keyboard use and tests)."""
        self.line.setValue(np.log10(alpha))
        self._sync(self.cv_line, self.line.value())
        self.line.sigPositionChangeFinished.emit(self.line)

    # -- hover read-out ------------------------------------------------------------------
    def _hover(self, pos):
        fit = self._fit
        vb = self.path_plot.getPlotItem().vb
        if fit is None or not self.path_plot.sceneBoundingRect().contains(pos):
            return
        pt = vb.mapSceneToView(pos)
        self.readout.setText(self.describe_point(pt.x(), pt.y()))

    def describe_point(self, log_alpha: float, y: float) -> str:
        """The column whose path passes nearest to (log10 α, y), with its value there."""
        fit = self._fit
        if fit is None:
            return ""
        path = fit.path
        x = np.log10(path.alphas)
        i = int(np.argmin(np.abs(x - log_alpha)))
        coef = path.coef_std if self.scale.currentData() == "std" else path.coef
        j = int(np.argmin(np.abs(coef[i] - y)))
        return f"α = {path.alphas[i]:.4g}   {path.columns[j]} = {coef[i, j]:.4g}"

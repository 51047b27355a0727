"""How the penalty shapes each family: one figure of paths, columns used, held-out error and the chosen α."""

from __future__ import annotations

import math

import numpy as np
from PySide6 import QtCore, QtWidgets

from regbench.formatting import number_text
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.penaltyfigure import PenaltyFigure
from regbench.gui.style import model_colour
from regbench.models.results import model_label
from regbench.report.pathfig import FigureData

Qt = QtCore.Qt
NO_HIGHLIGHT = "(none)"
RULE_WORDS = {"cv_min": "the lowest held-out error", "cv_1se": "the simplest model within one SE",
              "fixed": "a fixed value"}


class PathsPanel(Panel):
    key = "paths"
    title = "How the fits differ: what the penalty does"
    nav = "Fits differ · penalty"
    # Drawn from the fits and the chosen α alone; the exact read-out waits for the worker.
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
        self.alpha_edit = QtWidgets.QLineEdit()
        self.alpha_edit.setFixedWidth(92)
        self.alpha_edit.setToolTip("Type an α and press Enter; in the figure, ← → step along the grid")
        self.alpha_edit.returnPressed.connect(self._typed_alpha)
        self.reset_btn = QtWidgets.QPushButton("Back to the CV choice")
        self.reset_btn.clicked.connect(self._reset_alpha)
        self.highlight = QtWidgets.QComboBox()
        self.highlight.setMinimumContentsLength(12)
        self.highlight.setSizeAdjustPolicy(QtWidgets.QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.highlight.currentIndexChanged.connect(self._highlight_from_box)
        # Two rows, what is drawn and what α is chosen, so the panel fits a window 1100 pixels wide.
        lay.addWidget(hbox(caption("Family"), self.family, caption("Show"), self.scale, caption("Highlight"),
                           self.highlight, stretch_last=True))
        self.keep_btn = QtWidgets.QPushButton("Keep this α as an extra fit")
        self.keep_btn.setToolTip("Add this family at the chosen α to the comparisons, beside the four chosen models")
        self.keep_btn.clicked.connect(self._keep_extra)
        self.extras = QtWidgets.QComboBox()
        self.extras.setMinimumContentsLength(18)
        self.remove_btn = QtWidgets.QPushButton("Remove")
        self.remove_btn.clicked.connect(self._remove_extra)
        lay.addWidget(hbox(caption("α"), self.alpha_edit, self.reset_btn, self.keep_btn, caption("Extra fits"),
                           self.extras, self.remove_btn, stretch_last=True))
        self.figure = PenaltyFigure()
        self.figure.alpha_chosen.connect(self._figure_alpha)
        self.figure.alpha_moving.connect(lambda a: self.alpha_edit.setText(number_text(a, 4)))
        self.figure.column_picked.connect(self.set_highlight)
        lay.addWidget(self.figure, 1)
        self._highlight = None

    def plots(self):
        return [self.figure]

    def view_state(self):
        return {"family": self.family.currentData(), "scale": self.scale.currentData(),
                "highlight": self._highlight}

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
        hl = state.get("highlight")
        self._highlight = hl if isinstance(hl, str) else None

    def clear(self):
        self.family.blockSignals(True)
        self.family.clear()
        self.family.blockSignals(False)
        self.highlight.blockSignals(True)
        self.highlight.clear()
        self.highlight.blockSignals(False)
        self.extras.clear()
        self.figure.set_data(None)
        self.alpha_edit.clear()
        self._highlight = None

    # -- filling ---------------------------------------------------------------------
    def refresh(self, session):
        results = session.results
        if results is None:
            self.clear()
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

    def _redraw(self, *_):
        session = self.session
        if session is None or session.results is None or self.family.currentData() is None:
            return
        name = self.family.currentData()
        fit = session.results.penalized[name]
        std = self.scale.currentData() == "std"
        path = fit.path
        cols = list(path.columns)
        if self._highlight not in cols:
            self._highlight = None
        self.highlight.blockSignals(True)
        self.highlight.clear()
        self.highlight.addItem(NO_HIGHLIGHT, None)
        for c in cols:
            self.highlight.addItem(c, c)
        self.highlight.setCurrentIndex(max(0, self.highlight.findData(self._highlight)) if self._highlight else 0)
        self.highlight.blockSignals(False)
        alpha = session.alphas().get(name) or fit.alpha
        model = session.models().get(name) if session.derived_ready else None
        if model is not None and model.alpha is not None and not math.isclose(model.alpha, alpha, rel_tol=1e-12):
            model = None
        cv = fit.cv
        extras = [(e["name"], e["alpha"], model_colour(e["name"])) for e in session.extra_fits if e["family"] == name]
        readout = None
        n_used = None
        if model is not None:
            vals = model.coef_std if std else model.coef
            readout = list(zip(cols, (float(v) for v in vals)))
            n_used = int(np.count_nonzero(model.coef))
        self.figure.set_data(FigureData(
            alphas=path.alphas, coef=path.coef_std if std else path.coef, columns=cols, alpha=float(alpha),
            cv=(cv.alphas, cv.mean, cv.se, cv.alpha_min, cv.alpha_1se) if cv is not None else None,
            colour=model_colour(name), highlight=self._highlight, readout=readout, n_used=n_used, extras=extras,
            ylabel="standardized coefficient" if std else "coefficient (table units)"))
        if not self.alpha_edit.hasFocus():
            self.alpha_edit.setText(number_text(alpha, 4))
        self._fill_extras(session)
        by_hand = name in session.chosen_alpha
        rule = RULE_WORDS.get(fit.alpha_rule, fit.alpha_rule)
        s = [f"{model_label(name)} is shown at α = {number_text(alpha, 3)}"
             + (" (set by hand)" if by_hand else f" ({rule})")
             + (f", where it uses {n_used} of {len(cols)} columns." if n_used is not None else ".")]
        if cv is not None:
            s.append(f"Held-out error is lowest at α = {number_text(cv.alpha_min, 3)}; the simplest model within one "
                     f"standard error of that is at α = {number_text(cv.alpha_1se, 3)}. Drag the handle, type an α, "
                     "or step with ← →; click a curve or a name to follow one column.")
            s.append(cv.edge_sentence())
        self.set_sentences(s)

    def set_highlight(self, column) -> None:
        """Draw ``column``'s path in full and dim the others (None: all in colour)."""
        self._highlight = column if isinstance(column, str) else None
        if self.figure.data is not None:
            self.figure.data.highlight = self._highlight
            self.figure.set_data(self.figure.data)
        self.highlight.blockSignals(True)
        i = self.highlight.findData(self._highlight) if self._highlight else 0
        self.highlight.setCurrentIndex(max(i, 0))
        self.highlight.blockSignals(False)

    def _highlight_from_box(self, *_):
        self.set_highlight(self.highlight.currentData())

    def _fill_extras(self, session):
        extras = session.extra_fits
        self.extras.clear()
        for e in extras:
            self.extras.addItem(f"{e['name']}", e["name"])
        self.extras.setEnabled(bool(extras))
        self.remove_btn.setEnabled(bool(extras))

    # -- choosing α ------------------------------------------------------------------
    def _figure_alpha(self, alpha):
        name = self.family.currentData()
        if name is not None:
            self.window_.set_alpha(name, float(alpha))

    def _typed_alpha(self):
        text = self.alpha_edit.text().strip().replace(",", ".").replace("−", "-")
        try:
            alpha = float(text)
        except ValueError:
            alpha = float("nan")
        if not (math.isfinite(alpha) and alpha > 0):
            self.window_.set_status(f"α must be a positive number, for example 0.05; “{text}” is not.")
            return
        self.move_alpha(alpha)

    def _keep_extra(self):
        name = self.family.currentData()
        if name is not None and self.figure.data is not None:
            self.window_.add_extra_fit(name, float(self.figure.data.alpha))

    def _remove_extra(self):
        name = self.extras.currentData()
        if name is not None:
            self.window_.remove_extra_fit(name)

    def _reset_alpha(self):
        name = self.family.currentData()
        if name is not None:
            self.window_.set_alpha(name, None)

    def chosen_alpha(self):
        """The α the handle shows (None before a fit)."""
        return None if self.figure.data is None else float(self.figure.data.alpha)

    def move_alpha(self, alpha: float) -> None:
        """Move the handle as a drag would and keep the choice (typed values and tests)."""
        if self.figure.data is None:
            return
        self.figure._move_to(float(alpha))
        self._figure_alpha(float(alpha))

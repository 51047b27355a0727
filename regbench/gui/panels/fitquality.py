"""How well each model fits: observed against predicted, residuals, error per group.

The numbers come from :mod:`regbench.analysis.fit_quality` (the report and the command
line give the same ones); this panel only draws them.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.analysis.fit_quality import fit_quality, sentences_for_model
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, model_colour, plain_axes
from regbench.gui.tables import GridModel, make_view
from regbench.models.results import model_label

Qt = QtCore.Qt
#: Points drawn at most; beyond this a seeded sample of rows is drawn (and the panel says so).
MAX_POINTS = 20_000
SPLIT_WORDS = {"training": "rows it was fitted to", "held_out": "held-out rows"}
VIEWS = (("observed", "observed against predicted"), ("residual", "residual against predicted"),
         ("column", "residual against a column"))


class FitQualityPanel(Panel):
    key = "fit"
    title = "How well each model fits the target"
    nav = "How well they fit"
    uses_comparisons = True

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.model_box = QtWidgets.QComboBox()
        self.split_box = QtWidgets.QComboBox()
        self.view_box = QtWidgets.QComboBox()
        for key, text in VIEWS:
            self.view_box.addItem(text, key)
        self.column_box = QtWidgets.QComboBox()
        self.column_box.setSizeAdjustPolicy(QtWidgets.QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.column_box.setMinimumContentsLength(12)
        for box in (self.model_box, self.split_box, self.view_box, self.column_box):
            box.currentIndexChanged.connect(self._draw)
        lay.addWidget(hbox(caption("Model"), self.model_box, caption("on"), self.split_box, caption("Show"),
                           self.view_box, self.column_box, stretch_last=True))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        left = QtWidgets.QWidget()
        ll = QtWidgets.QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.addWidget(caption("Error of each model"))
        self.fit_model = GridModel()
        self.fit_view = make_view(self.fit_model)
        ll.addWidget(self.fit_view, 1)
        self.group_caption = caption("Error per group")
        ll.addWidget(self.group_caption)
        self.group_model = GridModel()
        self.group_view = make_view(self.group_model)
        ll.addWidget(self.group_view, 1)
        split.addWidget(left)
        right = QtWidgets.QWidget()
        rl = QtWidgets.QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "fit quality"
        self.plot.showGrid(x=True, y=True, alpha=0.2)
        self.plot.setMenuEnabled(False)
        rl.addWidget(self.plot, 1)
        self.plot_note = QtWidgets.QLabel(" ")
        self.plot_note.setStyleSheet(f"color: {PALETTE['muted']};")
        rl.addWidget(self.plot_note)
        split.addWidget(right)
        split.setSizes([560, 600])
        lay.addWidget(split, 1)
        self.quality = None
        self._key = None
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.fit_view, self.group_view]

    def clear(self):
        self.quality = None
        self._key = None
        self.fit_model.set_rows([], [])
        self.group_model.set_rows([], [])
        self.plot.clear()
        self.plot_note.setText(" ")
        super().clear()

    def view_state(self):
        return {"model": self.model_box.currentData(), "split": self.split_box.currentData(),
                "view": self.view_box.currentData(), "column": self.column_box.currentText()}

    def restore_view_state(self, state):
        self._wanted = dict(state)

    # -- filling ---------------------------------------------------------------------
    def refresh(self, session):
        if session.results is None:
            self.clear()
            self.set_sentences(["Fit the models to see how well each one fits the target."])
            return
        key = session.key()
        if key != self._key:
            # The numbers come from the worker; the models and held-out predictions are the session's
            # own (already there for this panel), read here on the GUI thread.
            design, models, heldout = session.design, session.models(), session.heldout()
            work = (lambda: (key, fit_quality(design, models, heldout))) if models else (lambda: (key, None))
            self.prepare(self._quality_arrived, key, work, "Measuring how well each model fits")
            return
        self._show(session)

    def _quality_arrived(self, keyed):
        key, quality = keyed
        session = self.session
        if session is None or session.results is None or session.key() != key:
            return   # the session moved on; its own refresh asks again
        self.quality, self._key = quality, key
        # Filled while hidden when nothing in it is in use, so the window is laid out once (see
        # MainWindow._hide_while_drawing): the numbers arrive after the panel is already shown.
        hide = getattr(self.window_, "_hide_while_drawing", None)
        hidden = hide(self) if hide is not None else False
        try:
            self._show(session)
        finally:
            if hidden:
                self.show()

    def _show(self, session):
        """The tables, sentences and (a turn later) the plot for the numbers in ``self.quality``."""
        q = self.quality
        if q is None:
            self.clear()
            return
        wanted = getattr(self, "_wanted", None) or {}
        self._wanted = None
        splits = [s for s in ("held_out", "training") if any(f.split == s for f in q.fits)]
        self._fill(self.model_box, [(model_label(n), n) for n in q.models], wanted.get("model"))
        self._fill(self.split_box, [(SPLIT_WORDS[s], s) for s in splits], wanted.get("split"))
        if wanted.get("view"):
            self.view_box.blockSignals(True)
            self.view_box.setCurrentIndex(max(0, self.view_box.findData(wanted["view"])))
            self.view_box.blockSignals(False)
        cols = list(session.design.columns)
        self._fill(self.column_box, [(c, c) for c in cols], wanted.get("column"))
        rows = []
        # On a yes/no outcome the squared error of the probabilities is the Brier score, R² its skill.
        binary = getattr(session.design, "outcome", "numeric") == "binary"
        err = (lambda f: f.rmse ** 2) if binary else (lambda f: f.rmse)
        for n in q.models:
            tr, ho = q.fit(n, "training"), q.fit(n, "held_out")
            rows.append([model_label(n), err(tr) if tr else None, err(ho) if ho else None,
                         tr.r_squared if tr else None, ho.r_squared if ho else None,
                         ho.mae if ho else (tr.mae if tr else None)])
        words = ("Brier fitted", "Brier held-out", "Brier skill fitted", "Brier skill held-out") if binary else \
            ("RMSE fitted", "RMSE held-out", "R² fitted", "R² held-out")
        self.fit_model.set_rows(rows, ["Model", *words,
                                       "MAE held-out" if splits[0] == "held_out" else "MAE fitted"])
        self.fit_view.resizeColumnsToContents()
        self._say()
        self._fill_groups()
        self.defer(self._draw_plot)

    @staticmethod
    def _fill(box, items, wanted=None):
        current = wanted or box.currentData()
        box.blockSignals(True)
        if [box.itemData(i) for i in range(box.count())] != [v for _, v in items]:
            box.clear()
            for text, value in items:
                box.addItem(text, value)
        i = box.findData(current)
        box.setCurrentIndex(i if i >= 0 else 0)
        box.blockSignals(False)

    def _draw(self, *_):
        """The plot, the per-group table and the sentences for the chosen model, split and view."""
        self._draw_plot()
        self._fill_groups()
        self._say()

    def _say(self):
        """The overall sentences, then the group sentence about the model the table and plot show."""
        q, session = self.quality, self.session
        if q is None or session is None or session.design is None:
            return
        shown = self.model_box.currentData() or (q.models[0] if q.models else None)
        said = sentences_for_model(q, session.design, shown) if shown is not None else list(q.sentences)
        self.set_sentences(said[:3] or ["Each model's error on the rows it was fitted to."])

    def _fill_groups(self):
        q, session, name = self.quality, self.session, self.model_box.currentData()
        if q is None or session is None or session.design is None or name is None:
            return
        design = session.design
        groups = [g for g in q.groups if g.model == name]
        self.group_caption.setVisible(bool(groups))
        self.group_view.setVisible(bool(groups))
        if groups:
            where = "held-out" if q.group_split == "held_out" else "fitted rows"
            self.group_caption.setText(f"Error per {design.groups_column} ({model_label(name)}, {where})")
            # On a yes/no outcome the root mean squared error of the probabilities is the root Brier score.
            binary = getattr(design, "outcome", "numeric") == "binary"
            self.group_model.set_rows([[g.group, g.rows, g.rmse, g.mean_residual] for g in groups],
                                      [design.groups_column, "Rows", "Root Brier" if binary else "RMSE",
                                       "Mean residual"])
            self.group_view.resizeColumnsToContents()

    def _draw_plot(self):
        q, session = self.quality, self.session
        if q is None or session is None or session.design is None:
            return
        name, split, view = self.model_box.currentData(), self.split_box.currentData(), self.view_box.currentData()
        if name is None or split is None or (name, split) not in q.predicted:
            return
        self.column_box.setVisible(view == "column")
        design = session.design
        pred = q.predicted[(name, split)]
        obs = q.observed
        resid = obs - pred
        n = len(obs)
        rows = np.arange(n)
        if n > MAX_POINTS:
            rows = np.sort(np.random.default_rng(0).choice(n, MAX_POINTS, replace=False))
        colour = model_colour(name)
        self.plot.clear()
        binary = getattr(design, "outcome", "numeric") == "binary"
        predicted = f"predicted probability of {q.target}" if binary else f"predicted {q.target}"
        if view == "observed":
            x, y = pred[rows], obs[rows]
            lo, hi = float(min(x.min(), y.min())), float(max(x.max(), y.max()))
            self.plot.plot([lo, hi], [lo, hi], pen=pg.mkPen(PALETTE["muted"], width=1, style=Qt.DashLine))
            xl, yl = predicted, (f"observed {q.target} (1 yes, 0 no)" if binary else f"observed {q.target}")
        else:
            if view == "column":
                col = self.column_box.currentText()
                if col not in design.columns:
                    return
                x = design.X[rows, design.columns.index(col)]
                xl = col
            else:
                x = pred[rows]
                xl = predicted
            y = resid[rows]
            self.plot.addItem(pg.InfiniteLine(pos=0, angle=0, pen=pg.mkPen(PALETTE["muted"], width=1)))
            yl = "residual (observed − predicted)"
        c = pg.mkColor(colour)
        c.setAlpha(120)
        self.scatter(self.plot, x, y, size=5, pen=None, brush=pg.mkBrush(c))
        self.plot.setLabel("bottom", xl)
        self.plot.setLabel("left", yl)
        self.plot.enableAutoRange()
        note = f"{model_label(name)} on {SPLIT_WORDS[split]}"
        if len(rows) < n:
            note += f"; a seeded sample of {len(rows):,} of {n:,} rows is drawn (the numbers use every row)"
        self.plot_note.setText(note + ".")

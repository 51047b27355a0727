"""Do they predict alike: agreement between every pair of models, on training and held-out rows."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, model_colour, plain_axes
from regbench.gui.tables import GridModel, make_view
from regbench.models.results import model_label

Qt = QtCore.Qt
SCATTER_MAX = 20_000


class AgreementPanel(Panel):
    key = "agreement"
    title = "Do the models predict alike?"
    nav = "Do they predict alike"
    uses_comparisons = True

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.split_box = QtWidgets.QComboBox()
        self.split_box.addItem("held-out rows", "held_out")
        self.split_box.addItem("training rows", "training")
        self.a_box = QtWidgets.QComboBox()
        self.b_box = QtWidgets.QComboBox()
        # A yes/no outcome's pairs are compared on the probability and on the log-odds scale.
        self.scale_box = QtWidgets.QComboBox()
        self.scale_box.addItem("probability", "probability")
        self.scale_box.addItem("log-odds", "log_odds")
        self.scale_caption = caption("Scale")
        for w in (self.split_box, self.a_box, self.b_box, self.scale_box):
            w.currentIndexChanged.connect(self._changed)
        lay.addWidget(hbox(caption("Rows"), self.split_box, caption("Compare"), self.a_box, caption("with"),
                           self.b_box, self.scale_caption, self.scale_box, stretch_last=True))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        left = QtWidgets.QWidget()
        ll = QtWidgets.QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        self.own_caption = caption("Each model's own error (weighted RMSE against the target)")
        ll.addWidget(self.own_caption)
        self.own_model = GridModel()
        self.own_view = make_view(self.own_model)
        self.own_view.setMaximumHeight(150)
        ll.addWidget(self.own_view)
        ll.addWidget(caption("Between each pair of models (a − b)"))
        self.pair_model = GridModel()
        self.pair_view = make_view(self.pair_model)
        ll.addWidget(self.pair_view, 1)
        split.addWidget(left)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "prediction scatter"
        self.plot.showGrid(x=True, y=True, alpha=0.25)
        self.plot.setAspectLocked(False)
        split.addWidget(self.plot)
        split.setSizes([850, 350])   # the pair table whole at 1400 × 900
        lay.addWidget(split, 1)
        self._filling = False
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.pair_view, self.own_view]

    def view_state(self):
        return {"split": self.split_box.currentData(), "a": self.a_box.currentData(), "b": self.b_box.currentData()}

    def restore_view_state(self, state):
        self._wanted = state

    def _changed(self, *_):
        if not self._filling and self.session is not None:
            self.refresh(self.session)

    def refresh(self, session):
        ag = session.agreement() if session.results is not None else None
        if ag is None:
            self.set_sentences(["Fit the models to compare their predictions."])
            self.pair_model.set_rows([], [])
            self.own_model.set_rows([], [])
            self.plot.clear()
            return
        names = list(ag.models)
        self._filling = True
        wanted = getattr(self, "_wanted", None) or {}
        for box, default in ((self.a_box, 0), (self.b_box, 1)):
            cur = box.currentData() or wanted.get("a" if box is self.a_box else "b")
            box.clear()
            for n in names:
                box.addItem(model_label(n), n)
            box.setCurrentIndex(names.index(cur) if cur in names else min(default, len(names) - 1))
        if wanted.get("split"):
            self.split_box.setCurrentIndex(max(0, self.split_box.findData(wanted["split"])))
        self._wanted = None
        self._filling = False
        split = self.split_box.currentData()
        binary = getattr(ag, "scale", "value") == "probability"
        self.scale_box.setVisible(binary)
        self.scale_caption.setVisible(binary)
        if binary:
            self.own_caption.setText("Each model's own error: root Brier score (weighted RMS of p − y) and log-loss")
            self.own_model.set_rows([[model_label(n), ag.own_error[n]["training"], ag.own_error[n]["held_out"],
                                      ag.log_loss[n]["training"], ag.log_loss[n]["held_out"]] for n in names],
                                    ["Model", "Root Brier: training", "held-out", "Log-loss: training", "held-out"])
        else:
            self.own_caption.setText("Each model's own error (weighted RMSE against the target)")
            self.own_model.set_rows([[model_label(n), ag.own_error[n]["training"], ag.own_error[n]["held_out"]]
                                     for n in names], ["Model", "Training rows", "Held-out rows"])
        self.own_view.resizeColumnsToContents()
        log_odds = binary and self.scale_box.currentData() == "log_odds"
        rows = []
        for p in (ag.log_odds_pairs if log_odds else ag.pairs):
            if p.split != split:
                continue
            rows.append([model_label(p.a), model_label(p.b), p.rmse, p.max_abs, p.corr, p.mean_diff, p.loa_low, p.loa_high])
        self.pair_model.set_rows(rows, ["a", "b", "RMS difference", "Largest difference", "Correlation",
                                        "Mean difference", "Limits of agreement: low", "high"])
        self.pair_view.resizeColumnsToContents()
        self.defer(self._scatter, session, split)
        self.set_sentences(list(ag.sentences[:2]) + ([ag.sentences[-1]] if binary and len(ag.sentences) > 2 else []))

    def predictions(self, session, split):
        """(a, b, pred_a, pred_b) for the chosen pair on the chosen rows."""
        return self._pair_work(session, split)()

    def _pair_work(self, session, split):
        """What the scatter needs, read from the session here; the products over the rows and the
        sample are left to the returned function (the worker runs it)."""
        a, b = self.a_box.currentData(), self.b_box.currentData()
        design = session.design
        held = session.heldout() if split == "held_out" else {}
        models = {} if (a in held and b in held) else session.models()

        def work():
            if a in held and b in held:
                return a, b, np.asarray(held[a]), np.asarray(held[b])
            return a, b, models[a].predict(design.X), models[b].predict(design.X)

        return work

    def _scatter(self, session, split):
        a, b = self.a_box.currentData(), self.b_box.currentData()
        if a is None or b is None:
            self.plot.clear()
            return
        pair = self._pair_work(session, split)

        def work():
            a, b, pa, pb = pair()
            n = pa.size
            if n > SCATTER_MAX:  # a seeded sample keeps the plot responsive
                idx = np.random.default_rng(0).choice(n, SCATTER_MAX, replace=False)
                pa, pb = pa[idx], pb[idx]
            return a, b, split, np.asarray(pa, float), np.asarray(pb, float)

        self.prepare(self._draw_scatter, (session.key(), a, b, split), work, "Comparing the predictions")

    def _draw_scatter(self, prepared):
        a, b, split, pa, pb = prepared
        session = self.session
        self.plot.clear()
        if session is None or pa.size == 0:
            return
        brush = pg.mkColor(model_colour(b))
        brush.setAlpha(150)
        # One scatter item with one style: pyqtgraph's plot() route with symbols costs several times more.
        self.scatter(self.plot, pa, pb, size=5, pen=None, brush=brush)
        lo = float(min(pa.min(), pb.min()))
        hi = float(max(pa.max(), pb.max()))
        self.plot.plot([lo, hi], [lo, hi], pen=pg.mkPen(PALETTE["muted"], style=Qt.DashLine))
        where = "held-out" if split == "held_out" else "training"
        what = "probability" if getattr(session.design, "outcome", "numeric") == "binary" else "prediction"
        self.plot.setLabel("bottom", f"{model_label(a)} {what} ({where})")
        self.plot.setLabel("left", f"{model_label(b)} {what} ({where})")

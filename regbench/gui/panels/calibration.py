"""How good are the probabilities: reliability curve, ROC and the threshold trade-off (yes/no outcomes).

Every number comes from ``session.classification()`` (regbench.analysis.calibration),
computed on the window's worker with the other comparisons.  The panel recommends no
threshold: it shows what each one flags and misses, and records the one the person
chooses, with their note, in the session.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, keep_legend_above, model_colour, plain_axes
from regbench.gui.tables import GridModel, make_view
from regbench.models.results import model_label

Qt = QtCore.Qt

SPLITS = (("held_out", "held-out rows"), ("training", "fitted rows"))


class CalibrationPanel(Panel):
    key = "calibration"
    title = "How good are the probabilities: calibration, ROC and thresholds"
    nav = "Probabilities"
    uses_comparisons = True

    @staticmethod
    def applies(session) -> bool:
        """Shown only for a yes/no outcome."""
        return session is not None and getattr(session.design, "outcome", "numeric") == "binary"

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.split_box = QtWidgets.QComboBox()
        for key, label in SPLITS:
            self.split_box.addItem(label, key)
        self.model_box = QtWidgets.QComboBox()
        self.split_box.currentIndexChanged.connect(lambda _i: self._redraw())
        self.model_box.currentIndexChanged.connect(lambda _i: self._redraw())
        lay.addWidget(hbox(caption("Rows"), self.split_box, caption("Threshold table for"), self.model_box,
                           stretch_last=True))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        plots = QtWidgets.QSplitter(Qt.Vertical)
        self.reliability = pg.PlotWidget()
        self.reliability.export_name = "reliability"
        self.reliability.setLabel("bottom", "predicted probability")
        self.reliability.setLabel("left", "observed share (isotonic)")
        self.roc = pg.PlotWidget()
        self.roc.export_name = "roc"
        self.roc.setLabel("bottom", "1 − specificity")
        self.roc.setLabel("left", "sensitivity")
        for p in (self.reliability, self.roc):
            p.showGrid(x=True, y=True, alpha=0.2)
            p.setXRange(-0.04, 1.04, padding=0)  # room for the 0 and 1 tick labels at the ends
            # Curves may run anywhere in the unit square (a reliability curve reaches its top right corner,
            # a poor ROC curve its bottom right), so the legend sits in a band above 1 that no curve enters;
            # the band grows with the legend and the plot's height (_legend_room).
            legend = p.addLegend(offset=(8, 4), labelTextSize="8pt")
            legend.setColumnCount(2)
            for side in ("left", "bottom"):
                p.getAxis(side).setTicks([[(v, f"{v:g}") for v in (0, 0.2, 0.4, 0.6, 0.8, 1)]])
            self._legend_room(p)
        plots.addWidget(self.reliability)
        plots.addWidget(self.roc)
        split.addWidget(plots)
        right = QtWidgets.QWidget()
        rl = QtWidgets.QVBoxLayout(right)
        rl.setContentsMargins(0, 0, 0, 0)
        self.summary = GridModel()
        self.summary_view = make_view(self.summary)
        self.summary_view.setMaximumHeight(170)
        rl.addWidget(caption("Each model on these rows"))
        rl.addWidget(self.summary_view)
        rl.addWidget(caption("What each threshold flags and misses"))
        self.table = GridModel()
        self.table_view = make_view(self.table)
        rl.addWidget(self.table_view, 1)
        self.threshold_spin = QtWidgets.QDoubleSpinBox()
        self.threshold_spin.setRange(0.01, 0.99)
        self.threshold_spin.setSingleStep(0.01)
        self.threshold_spin.setDecimals(3)
        self.threshold_spin.setValue(0.5)
        self.note_edit = QtWidgets.QLineEdit()
        self.note_edit.setPlaceholderText("why this threshold (who acts on it, what a miss costs)")
        self.record_btn = QtWidgets.QPushButton("Record threshold")
        self.record_btn.clicked.connect(self.record_threshold)
        self.clear_btn = QtWidgets.QPushButton("Clear")
        self.clear_btn.clicked.connect(lambda: self._set_threshold(None, ""))
        rl.addWidget(caption("The threshold you chose (the tool recommends none)"))
        rl.addWidget(hbox(self.threshold_spin, self.note_edit, self.record_btn, self.clear_btn))
        self.recorded = QtWidgets.QLabel("")
        self.recorded.setWordWrap(True)
        self.recorded.setStyleSheet(f"color: {PALETTE['muted']};")
        rl.addWidget(self.recorded)
        split.addWidget(right)
        split.setSizes([500, 620])   # the summary table's six columns whole at 1400 × 900
        lay.addWidget(split, 1)
        self._cl = None
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.reliability, self.roc]

    @staticmethod
    def _legend_room(plot) -> None:
        """The unit square, and above it a band the legend sits in (no curve enters it)."""
        keep_legend_above(plot, -0.04, 1.02, pad_px=6.0)

    def views(self):
        return [self.summary_view, self.table_view]

    # -- recording --------------------------------------------------------------------------
    def record_threshold(self) -> None:
        self._set_threshold(float(self.threshold_spin.value()), self.note_edit.text())

    def _set_threshold(self, value, note) -> None:
        s = self.session
        if s is None:
            return
        try:
            s.set_threshold(value, note)
        except Exception as exc:  # a bad value is refused with the session's message
            self.window_.show_error("Cannot record the threshold", exc)

    # -- drawing ----------------------------------------------------------------------------
    def refresh(self, session):
        if not self.applies(session):
            self._cl = None
            self.set_sentences(["This view is for yes/no outcomes; the target here is a number."])
            return
        cl = session.classification() if session.results is not None else None
        self._cl = cl
        thr = session.threshold
        self.recorded.setText("No threshold recorded." if thr is None else
                              f"Recorded threshold {thr['value']:g}" + (f" — {thr['note']}" if thr["note"] else ""))
        if thr is not None:
            self.threshold_spin.blockSignals(True)
            self.threshold_spin.setValue(float(thr["value"]))
            self.threshold_spin.blockSignals(False)
            if not self.note_edit.hasFocus():
                self.note_edit.setText(thr["note"])
                self.note_edit.setCursorPosition(0)   # the note read from its start, not its end
        if cl is None:
            self.set_sentences(["Fit the models to see how good their probabilities are."])
            for p in (self.reliability, self.roc):
                p.clear()
            self.summary.set_rows([], [])
            self.table.set_rows([], [])
            return
        current = self.model_box.currentData()
        self.model_box.blockSignals(True)
        self.model_box.clear()
        for k in cl.models:
            self.model_box.addItem(model_label(k), k)
        i = self.model_box.findData(current)
        self.model_box.setCurrentIndex(max(i, 0))
        self.model_box.blockSignals(False)
        self.set_sentences(list(cl.sentences))
        self._redraw()

    def _redraw(self) -> None:
        cl = self._cl
        if cl is None:
            return
        split = self.split_box.currentData() or "held_out"
        if not cl.calibration.get(split):
            split = "training"
        cal, dis = cl.calibration[split], cl.discrimination[split]
        for p in (self.reliability, self.roc):
            p.clear()
            if p.plotItem.legend is not None:
                p.plotItem.legend.clear()
        diag = pg.mkPen(PALETTE["grid"], width=1, style=Qt.DashLine)
        self.reliability.plot([0, 1], [0, 1], pen=diag)
        self.roc.plot([0, 1], [0, 1], pen=diag)
        for k in cl.models:
            pen = pg.mkPen(model_colour(k), width=2)
            c = cal[k]
            self.reliability.plot(np.asarray(c.curve_p), np.asarray(c.curve_observed), pen=pen, name=model_label(k),
                                  stepMode=None)
            d = dis[k]
            self.roc.plot(np.asarray(d.roc_fpr), np.asarray(d.roc_tpr), pen=pen,
                          name=f"{model_label(k)} (AUC {d.auc:.3f})")
        for p in (self.reliability, self.roc):
            p.plotItem.legend.updateSize()
            self._legend_room(p)
        rows = [[cal[k].brier, cal[k].miscalibration, cal[k].discrimination, cal[k].intercept, cal[k].slope,
                 dis[k].auc] for k in cl.models]
        self.summary.set_rows(rows, ["Brier", "Miscalibration", "Discrimination", "Cal. intercept", "Cal. slope",
                                     "AUC"], row_labels=[model_label(k) for k in cl.models], digits=3)
        self.summary_view.resizeColumnsToContents()   # whole headers at 1400 × 900
        k = self.model_box.currentData() or cl.models[0]
        d = dis[k]
        thr = self.session.threshold if self.session is not None else None
        labels, backgrounds = [], {}
        for i, t in enumerate(d.thresholds):
            mark = thr is not None and abs(float(t) - float(thr["value"])) < 1e-12
            labels.append(f"{t:g}" + (" (recorded)" if mark else ""))
            if mark:
                for j in range(3):
                    backgrounds[(i, j)] = PALETTE["accent_soft"]
        trows = [[float(a), float(b), float(f)] for a, b, f in zip(d.sensitivity, d.specificity, d.flagged)]
        self.table.set_rows(trows, ["Sensitivity", "Specificity", "Share flagged"], row_labels=labels,
                            backgrounds=backgrounds, digits=3)
        self.table_view.resizeColumnsToContents()   # the room left over shared by the three columns

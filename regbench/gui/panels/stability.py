"""How sure are we: how often bootstrap refits select or set aside each column."""

from __future__ import annotations

import dataclasses

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, model_colour
from regbench.gui.tables import GridModel, make_view
from regbench.models.results import model_label

Qt = QtCore.Qt


def per_column_fields(st, p: int):
    """(header, values) for every per-column quantity of a stability result, in field order.

    Arrays of one value per column become one table column; dicts of such arrays
    (one per model) become one table column per model.
    """
    out = []
    for f in dataclasses.fields(st):
        v = getattr(st, f.name)
        if isinstance(v, np.ndarray) and v.ndim == 1 and v.shape[0] == p and v.dtype.kind in "fiub":
            out.append((f.name, None, v))
        elif isinstance(v, dict) and v and all(isinstance(a, np.ndarray) and a.shape == (p,) for a in v.values()):
            for k, a in v.items():
                out.append((f.name, k, a))
        elif isinstance(v, np.ndarray) and v.ndim == 2 and v.shape[1] == p and f.name != "columns":
            models = getattr(st, "models", ())
            for i in range(v.shape[0]):
                out.append((f.name, models[i] if i < len(models) else str(i), v[i]))
    return out


def _words(name: str) -> str:
    return name.replace("_", " ")


class StabilityPanel(Panel):
    key = "stability"
    title = "How sure are we: stability over bootstrap refits"
    nav = "How sure are we"

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.note = QtWidgets.QLabel("")
        self.note.setStyleSheet(f"color: {PALETTE['warn']};")
        self.rerun_btn = QtWidgets.QPushButton("Refit the bootstrap at the chosen α")
        self.rerun_btn.clicked.connect(lambda: self.window_.refit())
        lay.addWidget(hbox(self.note, 1, self.rerun_btn))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        self.model = GridModel()
        self.view = make_view(self.model)
        split.addWidget(self.view)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "selection frequency"
        self.plot.showGrid(x=True, y=False, alpha=0.25)
        self.plot.setLabel("bottom", "share of refits")
        split.addWidget(self.plot)
        split.setSizes([700, 500])
        lay.addWidget(split, 1)

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.view]

    def refresh(self, session):
        st = session.stability
        self.rerun_btn.setVisible(session.results is not None and not session.stability_current)
        if st is None:
            self.model.set_rows([], [])
            self.plot.clear()
            self.note.setText("")
            self.set_sentences(["No bootstrap refits yet: set 'Stability refits' in the roles panel above 0 and refit."
                                if session.results is not None else "Fit the models to check their stability."])
            return
        self.note.setText("" if session.stability_current else
                          "These refits used an earlier α; the chosen α has changed since.")
        cols = list(st.columns)
        fields = per_column_fields(st, len(cols))
        headers = [(_words(f) if k is None else f"{_words(f)}: {model_label(k)}") for f, k, _ in fields]
        rows = [[float(a[i]) for _, _, a in fields] for i in range(len(cols))]
        self.model.set_rows(rows, headers, row_labels=cols, digits=3)
        self.view.resizeColumnsToContents()
        self._draw(st, cols, fields)
        self.set_sentences(list(getattr(st, "sentences", ())[:3]))

    def _draw(self, st, cols, fields):
        self.plot.clear()
        legend = self.plot.getPlotItem().legend or self.plot.addLegend(offset=(-10, 10), labelTextSize="8pt")
        legend.clear()
        shares = [(f, k, a) for f, k, a in fields if k is not None and np.all((a >= 0) & (a <= 1))]
        p = len(cols)
        if not shares:
            return
        k_n = len(shares)
        height = 0.8 / k_n
        for j, (f, k, a) in enumerate(shares):
            y = np.arange(p)[::-1] + (j - (k_n - 1) / 2) * height
            colour = model_colour(k) if not f.startswith("set") else PALETTE["warn"]
            bar = pg.BarGraphItem(x0=np.zeros(p), y=y, height=height * 0.9, width=a, brush=colour, pen=None)
            self.plot.addItem(bar)
            legend.addItem(bar, f"{_words(f)}: {model_label(k)}")
        self.plot.getAxis("left").setTicks([[(p - 1 - i, c) for i, c in enumerate(cols)]])
        self.plot.setXRange(0, 1.0, padding=0.02)
        self.plot.setYRange(-0.6, p - 0.4, padding=0)

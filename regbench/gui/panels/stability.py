"""How sure are we: how often bootstrap refits select or set aside each column."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.axislabels import name_categories
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, keep_legend_above, model_colour, plain_axes
from regbench.gui.tables import GridModel, make_view
from regbench.models.results import model_label, unpenalized

Qt = QtCore.Qt


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
        # Two tabs so neither table scrolls sideways at 1400 × 900: how often each column is kept or
        # set aside (what the bars draw), and the middle 90 % of each model's coefficient.
        self.tabs = QtWidgets.QTabWidget()
        self.model = GridModel()
        self.view = make_view(self.model)
        self.tabs.addTab(self.view, "Kept and set aside")
        self.ranges_model = GridModel()
        self.ranges_view = make_view(self.ranges_model)
        self.tabs.addTab(self.ranges_view, "Coefficients: 5 % to 95 % of refits")
        split.addWidget(self.tabs)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "selection frequency"
        self.plot.showGrid(x=True, y=False, alpha=0.25)
        self.plot.setLabel("bottom", "share of refits")
        split.addWidget(self.plot)
        split.setSizes([760, 440])
        lay.addWidget(split, 1)
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.view, self.ranges_view]

    def refresh(self, session):
        st = session.stability
        self.rerun_btn.setVisible(session.results is not None and not session.stability_current)
        if st is None:
            self.model.set_rows([], [])
            self.ranges_model.set_rows([], [])
            self.plot.clear()
            self.note.setText("")
            withheld = session.sample_limits().get("stability") if session.results is not None else None
            self.set_sentences([withheld or ("No bootstrap refits yet: set 'Stability refits' above 0 under Settings "
                                             "(top right), then press Fit." if session.results is not None
                                             else "Fit the models to check their stability.")])
            return
        self.note.setText("" if session.stability_current else
                          "These refits used an earlier α; the chosen α has changed since.")
        cols = list(st.columns)
        for model, view, fields in ((self.model, self.view, self.table_fields(st)),
                                    (self.ranges_model, self.ranges_view, self.range_fields(st))):
            rows = [[vals[i] for _, vals in fields] for i in range(len(cols))]
            model.set_rows(rows, [h for h, _ in fields], row_labels=cols, digits=3)
            view.resizeColumnsToContents()
        self.defer(self._draw, st, cols)
        self.set_sentences(list(st.sentences[:2]))

    @staticmethod
    def selecting(st) -> list:
        """Models whose selection can vary (ridge and OLS keep every column they can)."""
        return [m for m in st.models if m in st.selected_freq and m not in ("ols", "logistic", "ridge")]

    @staticmethod
    def set_aside_label(st) -> str:
        """The set-aside share names the unpenalized model the other panels name (logistic for a yes/no outcome)."""
        return f"Set aside ({model_label(unpenalized(st.models))})"

    def table_fields(self, st):
        """(header, values) of the first tab: the share of refits that set aside or keep each column."""
        out = [(self.set_aside_label(st), [float(v) for v in st.set_aside_freq])]
        for m in self.selecting(st):
            out.append((f"Kept: {model_label(m)}", [float(v) for v in st.selected_freq[m]]))
        return out

    @staticmethod
    def range_fields(st):
        """(header, values) of the second tab: each model's 5th to 95th percentile of a coefficient."""
        p = len(st.columns)
        out = []
        for m in st.models:
            if m in st.coef_q05:
                lo, hi = st.coef_q05[m], st.coef_q95[m]
                out.append((f"{model_label(m)} 5 %", [float(lo[i]) for i in range(p)]))
                out.append((f"{model_label(m)} 95 %", [float(hi[i]) for i in range(p)]))
        return out

    def _draw(self, st, cols):
        self.plot.clear()
        legend = self.plot.getPlotItem().legend or self.plot.addLegend(offset=(6, 2), labelTextSize="8pt")
        legend.clear()
        series = [(self.set_aside_label(st), PALETTE["warn"], np.asarray(st.set_aside_freq, float))]
        series += [(f"Kept: {model_label(m)}", model_colour(m), np.asarray(st.selected_freq[m], float))
                   for m in self.selecting(st)]
        p = len(cols)
        k_n = len(series)
        height = 0.8 / k_n
        for j, (label, colour, a) in enumerate(series):
            y = np.arange(p)[::-1] + (j - (k_n - 1) / 2) * height
            bar = pg.BarGraphItem(x0=np.zeros(p), y=y, height=height * 0.9, width=a, brush=colour, pen=None)
            self.plot.addItem(bar)
            legend.addItem(bar, label)
        name_categories(self.plot, "left", np.arange(p)[::-1], cols,
                        weight=np.max([a for _, _, a in series], axis=0))   # the longest bars named first
        self.plot.setXRange(0, 1.0, padding=0.06)  # the bars at 1 stay clear of the edge
        keep_legend_above(self.plot, -0.6, p - 0.5)  # the bars, and a band above them for the legend

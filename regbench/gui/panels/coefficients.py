"""How the fits differ: every model's coefficients side by side."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.gui.axislabels import name_categories
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, keep_legend_above, model_colour, plain_axes
from regbench.gui.tables import GridModel, WARN_BG, make_view
from regbench.models.results import aligned, model_columns, model_label
from regbench.sentences import se_kind_sentence

Qt = QtCore.Qt
INTERCEPT = "(intercept)"


class CoefficientsPanel(Panel):
    key = "coefficients"
    title = "How the fits differ: coefficients side by side"
    nav = "Fits differ · coefficients"
    uses_comparisons = True

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.scale = QtWidgets.QComboBox()
        self.scale.addItem("in table units", "orig")
        self.scale.addItem("standardized (per SD of the column)", "std")
        self.scale.currentIndexChanged.connect(lambda *_: self.session is not None and self.refresh(self.session))
        lay.addWidget(hbox(caption("Coefficients"), self.scale, stretch_last=True))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        self.model = GridModel()
        # Columns as wide as their numbers; the plot beside takes the room the table does not need.
        self.view = make_view(self.model, stretch_last=False)
        self.view.verticalHeader().sectionClicked.connect(self._row_clicked)
        self.view.verticalHeader().setToolTip("Click a column's name to follow its path in 'Fits differ · penalty'")
        split.addWidget(self.view)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "standardized coefficients"
        self.plot.showGrid(x=True, y=False, alpha=0.25)
        self.plot.setLabel("bottom", "standardized coefficient")
        split.addWidget(self.plot)
        split.setSizes([640, 360])
        lay.addWidget(split, 1)
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def _row_clicked(self, row: int) -> None:
        """A column's name was clicked: highlight its path in the penalty figure."""
        labels = self.model.row_labels or []
        if 0 < row < len(labels):
            self.window_.panel("paths").set_highlight(labels[row])
            self.window_.set_status(f"{labels[row]} is highlighted in 'Fits differ · penalty'.")

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.view]

    def view_state(self):
        return {"scale": self.scale.currentData()}

    def restore_view_state(self, state):
        i = self.scale.findData(state.get("scale"))
        if i >= 0:
            self.scale.setCurrentIndex(i)

    def refresh(self, session):
        results = session.results
        if results is None:
            self.model.set_rows([], [])
            self.plot.clear()
            self.set_sentences(["Fit the models to compare their coefficients."])
            return
        models = session.models()
        std = self.scale.currentData() == "std"
        ols = results.ols
        # Penalized fits weigh every level of a category: their reference levels follow the design's columns.
        cols = list(model_columns(results.columns, models.values()))
        aside = {sa.column: sa for sa in ols.set_aside}
        names = list(models)
        cl_se = getattr(ols, "cluster_std_errors", None)
        by_group = cl_se is not None
        # The unpenalized model (OLS, or logistic regression for a yes/no outcome) carries the inference.
        unpen = next((n for n in ("ols", "logistic") if n in names), None)
        word = model_label(unpen) if unpen else "OLS"
        ols_extra = [f"{word} SE", f"{word} p"] + ([f"{word} SE by {session.design.groups_column}"] if by_group else [])
        headers = []
        for n in names:
            headers.append(model_label(n))
            if n == unpen:
                headers += ols_extra
        rows, bg, fg, tips = [], {}, {}, {}
        # The intercept first, in table units whatever the scale (standardizing leaves it in the target's units).
        row = []
        for n in names:
            row.append(float(models[n].intercept))
            if n == unpen:
                row += [float(ols.intercept_se), None]
                if by_group:
                    row.append(float(getattr(ols, "cluster_intercept_se", float("nan"))))
        rows.append(row)
        # Each model's coefficients over the columns at once (a name looked up per cell is p² work).
        values = {n: aligned(models[n], cols, standardized=std).tolist() for n in names}
        carried = {n: frozenset(models[n].columns) for n in names}
        for i, c in enumerate(cols):
            row = []
            for n in names:
                m = models[n]
                v = values[n][i]
                k = len(row)
                if c not in carried[n]:
                    row += ["reference"] + ([None] * len(ols_extra) if n == unpen else [])
                    fg[(i, k)] = PALETTE["muted"]
                    tips[(i, k)] = (f"{c} is the level {model_label(n)} measures the other levels of its category "
                                    "against; its intercept carries it")
                    continue
                if n == unpen and c in aside:
                    row += ["set aside"] + [None] * len(ols_extra)
                    bg[(i, k)] = WARN_BG
                    tips[(i, k)] = aside[c].sentence()
                    continue
                row.append(v)
                if v == 0.0 and n != unpen:
                    fg[(i, k)] = PALETTE["muted"]
                    tips[(i, k)] = f"{model_label(n)} does not use {c} at this α"
                if n == unpen:
                    # Standardizing scales a coefficient and its standard errors alike.
                    to_std = (float(m.coef_std[i] / m.coef[i]) if m.coef[i] != 0 else float("nan")) if std else 1.0
                    row += [float(ols.std_errors[i]) * to_std, float(ols.p_values[i])]
                    if by_group:
                        row.append(float(cl_se[i]) * to_std)
            rows.append(row)
        shift = {(r + 1, k): v for d in (bg,) for (r, k), v in d.items()}
        bg = shift
        fg = {(r + 1, k): v for (r, k), v in fg.items()}
        tips = {(r + 1, k): v for (r, k), v in tips.items()}
        note = getattr(ols, "inference_note", "") or ""
        if unpen is not None:
            k0 = names.index(unpen) + 1   # the unpenalized model's SE column
            for r in range(len(rows)):
                if note:
                    tips.setdefault((r, k0), note)
                if by_group:
                    tips.setdefault((r, k0 + 2), "cluster-robust: rows of one group may share influences")
        self.model.set_rows(rows, headers, row_labels=[INTERCEPT] + cols, backgrounds=bg, foregrounds=fg, tips=tips)
        self.view.resizeColumnsToContents()
        self.view.keep_to_columns()
        self.defer(self._draw, models, cols)
        st = session.structure()
        sentences = list(getattr(st, "sentences", ()) or ())
        if not sentences:
            sentences = [f"{len(names)} models over {len(cols)} columns; OLS set aside {len(aside)}."]
        # Why OLS standard errors are missing, and which ones are shown (the summary's words).
        extra = [note] if note else []
        if by_group:
            extra.append(se_kind_sentence(session.design, ols))
        self.set_sentences(sentences[:2] + extra)

    def _draw(self, models, cols):
        self.plot.clear()
        legend = self.plot.getPlotItem().legend or self.plot.addLegend(offset=(10, 4), labelTextSize="8pt")
        legend.clear()
        legend.setColumnCount(2)
        p = len(cols)
        k = len(models)
        height = 0.8 / max(k, 1)
        for j, (n, m) in enumerate(models.items()):
            y = np.arange(p)[::-1] + (j - (k - 1) / 2) * height
            bar = pg.BarGraphItem(x0=np.zeros(p), y=y, height=height * 0.9, width=aligned(m, cols, standardized=True),
                                  brush=model_colour(n), pen=None)
            self.plot.addItem(bar)
            legend.addItem(bar, model_label(n))
        # The columns with the longest bars are named first.
        longest = np.max([np.abs(aligned(m, cols, standardized=True)) for m in models.values()], axis=0) if models \
            else None
        name_categories(self.plot, "left", np.arange(p)[::-1], cols, weight=longest)
        self.plot.addItem(pg.InfiniteLine(pos=0, angle=90, pen=pg.mkPen(PALETTE["muted"])))
        keep_legend_above(self.plot, -0.6, p - 0.5)  # the bars, and a band above them for the legend

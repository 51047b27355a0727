"""What overlaps: columns OLS set aside, near-dependencies, VIF, condition indices, correlations."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtGui, QtWidgets

from regbench.analysis.correlation import correlation_map
from regbench.gui.axislabels import name_categories
from regbench.gui.panels.base import Panel, caption
from regbench.gui.style import CORR_STOPS, PALETTE, plain_axes
from regbench.gui.tables import GridModel, WARN_BG, make_view

Qt = QtCore.Qt
VIF_STRONG = 10.0   # common practice
CI_STRONG = 30.0    # common practice (Belsley, Kuh & Welsch)
SHARE_STRONG = 0.5


def corr_colormap():
    pos = [p for p, _ in CORR_STOPS]
    col = [c for _, c in CORR_STOPS]
    return pg.ColorMap(pos, col)


class OverlapsPanel(Panel):
    key = "overlaps"
    title = "What overlaps in this table"
    nav = "What overlaps"

    def build(self, body):
        lay = QtWidgets.QHBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        left = QtWidgets.QWidget()
        ll = QtWidgets.QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.addWidget(caption("Set aside by OLS, and why"))
        self.aside_text = QtWidgets.QTextBrowser()
        ll.addWidget(self.aside_text, 2)
        ll.addWidget(caption("Variance inflation (VIF) and what explains each column"))
        self.vif_model = GridModel()
        self.vif_view = make_view(self.vif_model)
        ll.addWidget(self.vif_view, 3)
        self.tabs = QtWidgets.QTabWidget()
        corr = QtWidgets.QWidget()
        rl = QtWidgets.QVBoxLayout(corr)
        rl.setContentsMargins(4, 4, 4, 4)
        self.glw = pg.GraphicsLayoutWidget()
        self.glw.export_name = "correlation map"
        self.corr_plot = self.glw.addPlot(row=0, col=0)
        # The matrix fills the plot (cells need not be square): a locked aspect left bands of empty space.
        self.corr_plot.setAspectLocked(False)
        self.corr_plot.setMouseEnabled(x=False, y=False)
        self.corr_plot.invertY(True)
        self.corr_plot.setMenuEnabled(False)
        self.image = pg.ImageItem()
        self.corr_plot.addItem(self.image)
        self.image.setColorMap(corr_colormap())
        self.bar = pg.ColorBarItem(values=(-1, 1), colorMap=corr_colormap(), width=12, interactive=False,
                                   orientation="horizontal", label="weighted correlation")
        self.bar.setImageItem(self.image)
        self.glw.addItem(self.bar, row=1, col=0)
        self.corr_readout = QtWidgets.QLabel(" ")
        self.corr_readout.setStyleSheet(f"color: {PALETTE['muted']};")
        rl.addWidget(self.glw, 1)
        rl.addWidget(self.corr_readout)
        self.glw.scene().sigMouseMoved.connect(self._hover)
        self.tabs.addTab(corr, "Correlation map")
        ci = QtWidgets.QWidget()
        cl = QtWidgets.QVBoxLayout(ci)
        cl.setContentsMargins(4, 4, 4, 4)
        self.ci_model = GridModel()
        self.ci_view = make_view(self.ci_model, stretch_last=False)
        cl.addWidget(caption("Condition indices (worst first) with each term's share of its variance"))
        cl.addWidget(self.ci_view, 1)
        self.tabs.addTab(ci, "Condition indices")
        self.ci_tab = ci
        self._ci_waiting = None
        self.tabs.currentChanged.connect(lambda *_: self._fill_ci())
        split = QtWidgets.QSplitter(Qt.Horizontal)
        split.addWidget(left)
        split.addWidget(self.tabs)
        split.setStretchFactor(0, 1)
        split.setStretchFactor(1, 1)
        split.setSizes([560, 480])   # room for the VIF table's explanation column
        lay.addWidget(split)
        self._corr = None
        self._corr_cols = ()
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def plots(self):
        return [self.glw]

    def views(self):
        return [self.vif_view, self.ci_view]

    def refresh(self, session):
        results = session.results
        design = session.design
        if design is None or design.p == 0:
            self._draw_corr(None)
        else:   # the map's numbers come from the worker; the panel only draws them
            self.prepare(self._draw_corr, design, lambda: correlation_map(design), "Measuring how columns overlap")
        if results is None:
            self.aside_text.clear()
            self.vif_model.set_rows([], [])
            self.ci_model.set_rows([], [])
            self._ci_waiting = None
            self.set_sentences(["Fit the models to see which columns OLS sets aside."])
            return
        ols, diag = results.ols, results.diagnostics
        if ols.set_aside:
            html = "".join(f"<p><b>{sa.column}</b>: {sa.sentence()}</p>" for sa in ols.set_aside)
        else:
            html = "<p>OLS kept every column: none is reproduced by the others.</p>"
        if diag.near_dependencies:
            html += "".join(f"<p>{nd.sentence}</p>" for nd in diag.near_dependencies)
        self.aside_text.setHtml(html)
        self.aside_text.document().setDocumentMargin(6)
        nd = {d.column: d for d in diag.near_dependencies}
        rows, bg = [], {}
        for i, c in enumerate(diag.columns):
            v = float(diag.vif[i])
            d = nd.get(c)
            rows.append([c, v, ", ".join(d.explained_by) if d else "", d.r_squared if d else None])
            if v > VIF_STRONG:
                bg[(i, 1)] = WARN_BG
        self.vif_model.set_rows(rows, ["Column", "VIF", "Mostly explained by", "R² of that"], backgrounds=bg)
        self.vif_view.resizeColumnsToContents()
        # The condition indices' tab is filled when it is brought forward, or a turn later.
        self._ci_waiting = diag
        if self.tabs.currentWidget() is self.ci_tab:
            self._fill_ci()
        else:
            self.defer(self._fill_ci)
        sentences = list(diag.sentences[:2]) or [sa.sentence() for sa in ols.set_aside[:2]]
        self.set_sentences(sentences or ["No column overlaps strongly with the others."])

    def clear(self):
        super().clear()
        self._ci_waiting = None

    def _fill_ci(self):
        """Fill the condition indices' table if it waits: one array, the worst dimension first."""
        diag, self._ci_waiting = self._ci_waiting, None
        if diag is None:
            return
        ci = np.asarray(diag.condition_indices, dtype=float)
        vp = np.asarray(diag.variance_proportions, dtype=float).reshape(len(ci), -1)
        order = np.argsort(ci)[::-1]
        grid = np.column_stack([ci[order], vp[order]])
        # Belsley, Kuh & Welsch's marks: a large index, and the shares above one half on its row.
        strong = ci[order] > CI_STRONG
        bg = {(int(r), 0): WARN_BG for r in np.flatnonzero(strong)}
        rs, js = np.nonzero(strong[:, None] & (vp[order] > SHARE_STRONG))
        bg.update({(int(r), int(j) + 1): WARN_BG for r, j in zip(rs, js)})
        self.ci_model.set_rows(grid, ["Condition index"] + list(diag.terms), backgrounds=bg, digits=3)
        # Sizing reads a few rows of every column (6,000 texts for 1,000 terms): a turn of its own.
        self.defer(self._size_ci)

    def _size_ci(self):
        self.ci_view.resizeColumnsToContents()

    def _draw_corr(self, cmap):
        """Draw a correlation map computed on the worker (None: nothing to draw)."""
        if cmap is None:
            self.image.clear()
            self._corr = None
            return
        if self._corr is not None and getattr(self, "_corr_map", None) is cmap:
            return
        self._corr_map = cmap
        C = cmap.matrix
        self._corr, self._corr_cols = C, cmap.columns
        self.image.setImage(np.nan_to_num(C.T), levels=(-1, 1))
        p = len(cmap.columns)
        short = [c if len(c) <= 18 else c[:16] + "…" for c in cmap.columns]
        self.corr_plot.setRange(xRange=(0, p), yRange=(0, p), padding=0)
        # Names down the side, their numbers along the bottom (long names would collide there); as many
        # as fit a line of text (or a number) apart, chosen again on every resize.
        centres = np.arange(p) + 0.5
        name_categories(self.corr_plot, "left", centres, [f"{short[j]}  {j + 1}" for j in range(p)])
        name_categories(self.corr_plot, "bottom", centres, [str(j + 1) for j in range(p)])

    def _hover(self, pos):
        if self._corr is None:
            return
        pt = self.corr_plot.vb.mapSceneToView(pos)
        i, j = int(np.floor(pt.y())), int(np.floor(pt.x()))
        p = len(self._corr_cols)
        if 0 <= i < p and 0 <= j < p:
            self.corr_readout.setText(f"{self._corr_cols[i]} × {self._corr_cols[j]}: r = {self._corr[i, j]:.3f}")

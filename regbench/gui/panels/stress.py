"""When an input breaks: damage one column and see which model's predictions move."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from regbench.analysis.stress import (DEFAULT_STRENGTH, STRESS_KINDS, StressConfig, rank_columns, run_stress,
                                      stress_sweep)
from regbench.data.table import BOOLEAN, CATEGORICAL
from regbench.errors import RegbenchError
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.style import PALETTE, model_colour, plain_axes
from regbench.gui.tables import GridModel, WARN_BG, make_view
from regbench.models.results import model_label
from regbench.session import check_stress

Qt = QtCore.Qt
KIND_WORDS = {
    "shuffle": "shuffle (share of rows)",
    "noise": "add noise (× its SD)",
    "constant": "freeze at a constant",
    "rescale": "rescale (a unit change)",
    "wild": "wild values (share of rows)",
    "missing": "lose values (share of rows)",
}


#: Damage that means something for a column of categories (codes or text): no unit, no spread.
CATEGORY_KINDS = ("shuffle", "constant", "missing")


def kinds_for(session, column: str) -> tuple:
    """The kinds of damage that make sense for ``column``: rescaling or adding noise to category codes does not."""
    if session is None or not column:
        return STRESS_KINDS
    try:
        info = session.columns_table.columns[column] if hasattr(session, "columns_table") else session.table.columns[column]
    except KeyError:
        return STRESS_KINDS
    if info.kind in (CATEGORICAL, BOOLEAN) or column in session.roles.categorical:
        return CATEGORY_KINDS
    return STRESS_KINDS


class StressPanel(Panel):
    key = "stress"
    title = "When an input breaks: the stress test"
    nav = "When an input breaks"
    uses_comparisons = True

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        self.column = QtWidgets.QComboBox()
        self.column.setMinimumWidth(140)
        self.kind = QtWidgets.QComboBox()
        for k in STRESS_KINDS:
            self.kind.addItem(KIND_WORDS.get(k, k), k)
        self.kind.currentIndexChanged.connect(self._kind_changed)
        self.column.currentIndexChanged.connect(self._offer_kinds)
        self.use_default = QtWidgets.QCheckBox("default")
        self.use_default.setChecked(True)
        self.strength = QtWidgets.QDoubleSpinBox()
        self.strength.setRange(0.0, 1000.0)
        self.strength.setDecimals(3)
        self.strength.setSingleStep(0.1)
        self.strength.setEnabled(False)
        self.use_default.toggled.connect(lambda on: self.strength.setEnabled(not on))
        self.seed = QtWidgets.QSpinBox()
        self.seed.setRange(0, 1_000_000)
        self.run_btn = QtWidgets.QPushButton("Run")
        self.run_btn.setObjectName("primary")
        self.run_btn.clicked.connect(self.run)
        self.rank_btn = QtWidgets.QPushButton("Rank every column")
        self.rank_btn.clicked.connect(self.rank)
        lay.addWidget(hbox(caption("Damage"), self.column, self.kind, self.use_default, self.strength,
                           caption("seed"), self.seed, stretch_last=True))
        self.history = QtWidgets.QComboBox()
        self.history.setMinimumWidth(220)
        self.history.currentIndexChanged.connect(self._show_history)
        lay.addWidget(hbox(self.run_btn, self.rank_btn, caption("Kept tests"), self.history,
                           stretch_last=True))
        split = QtWidgets.QSplitter(Qt.Horizontal)
        left = QtWidgets.QWidget()
        ll = QtWidgets.QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.addWidget(caption("How far each model moved"))
        self.shift_model = GridModel()
        self.shift_view = make_view(self.shift_model)
        ll.addWidget(self.shift_view, 1)
        self.rank_caption = caption("Every column damaged in turn (RMS shift of predictions)")
        ll.addWidget(self.rank_caption)
        self.rank_model = GridModel()
        self.rank_view = make_view(self.rank_model)
        ll.addWidget(self.rank_view, 1)
        split.addWidget(left)
        self.plot = pg.PlotWidget()
        self.plot.export_name = "stress sweep"
        self.plot.showGrid(x=True, y=True, alpha=0.25)
        self.plot.setLabel("left", "RMS shift of predictions")
        split.addWidget(self.plot)
        split.setSizes([700, 460])
        lay.addWidget(split, 1)
        self.result = None
        self.sweep = None
        self.ranking = None
        self._rank_request = None    # (kind, strength, seed) the person asked to rank by
        self._rankings = {}          # session key -> ranking at those choices (undo brings one back)
        self._rank_job_key = None
        self._kind_changed()
        plain_axes(*self.plots())  # axis numbers in the units the tables show, never "(x0.001)"

    def clear(self):
        """Forget everything shown for another session (a new table must not show the old results)."""
        self.result = self.sweep = self.ranking = None
        self._rank_request = None
        self._rankings = {}
        self._rank_job_key = None
        self.shift_model.set_rows([], [])
        self.rank_model.set_rows([], [])
        self.history.clear()
        self.column.clear()
        self.plot.clear()
        self.set_sentences([])

    def _offer_kinds(self, *_):
        """Only the damage that makes sense for the chosen column's kind."""
        allowed = kinds_for(self.session, self.column.currentText())
        current = self.kind.currentData()
        self.kind.blockSignals(True)
        self.kind.clear()
        for k in STRESS_KINDS:
            if k in allowed:
                self.kind.addItem(KIND_WORDS.get(k, k), k)
        self.kind.setCurrentIndex(max(0, self.kind.findData(current)))
        self.kind.blockSignals(False)
        self._kind_changed()

    def plots(self):
        return [self.plot]

    def views(self):
        return [self.shift_view, self.rank_view]

    def _kind_changed(self, *_):
        d = DEFAULT_STRENGTH.get(self.kind.currentData())
        if d is not None:
            self.strength.setValue(d)

    # -- commands -----------------------------------------------------------------------
    def config(self):
        strength = None if self.use_default.isChecked() else float(self.strength.value())
        return StressConfig(column=self.column.currentText(), kind=self.kind.currentData(), strength=strength,
                            seed=int(self.seed.value()))

    def run(self):
        """Damage the chosen column off the GUI thread, then keep the test in the session."""
        session = self.session
        if session is None or session.results is None:
            return
        config = self.config()
        try:
            check_stress(config, session.design, session.table)
        except RegbenchError as exc:
            self.window_.show_error("This stress test cannot run", exc)
            return
        if not self._models_ready(session):
            return
        design, models = session.design, session.models()

        def work(progress, cancel):
            progress(0, 2, f"stress test: {config.kind} {config.column}")
            result = run_stress(design, models, config)
            sweep = None
            if config.kind != "constant":
                progress(1, 2, "strength sweep")
                sweep = stress_sweep(design, models, config.column, config.kind, seed=config.seed,
                                     tolerance=config.tolerance)
            return result, sweep

        def done(out):
            if self.session is not session:
                return
            self.result, self.sweep = out
            try:
                session.add_stress(config)
            except RegbenchError as exc:
                self.window_.show_error("The stress test was not kept", exc)
            self._show(self.result, self.sweep)

        self.window_.run_job(work, "Stress test", done, slot="stress")

    def _models_ready(self, session) -> bool:
        """The models at the chosen α come from the worker; until they arrive, ask for them and wait."""
        if session.derived_ready:
            return True
        self.window_.request_derived()
        self.window_.set_status("The models at the chosen α are still being compared; try again in a moment.")
        return False

    def rank(self):
        """Damage every column in turn (with the kind chosen) and rank them; kept across α changes and undo."""
        session = self.session
        if session is None or session.results is None:
            return
        strength = None if self.use_default.isChecked() else float(self.strength.value())
        self._rank_request = (self.kind.currentData(), strength, int(self.seed.value()))
        self._rankings = {}
        self._start_ranking(session)

    def _start_ranking(self, session):
        if self._rank_request is None or not self._models_ready(session):
            return
        key = session.key()
        if key in self._rankings or self._rank_job_key == key:
            return
        design, models = session.design, session.models()
        kind, strength, seed = self._rank_request
        columns = tuple(c for c in dict.fromkeys(design.sources) if kind in kinds_for(session, c))
        if not columns:
            self.window_.set_status(f"No column can take '{KIND_WORDS.get(kind, kind)}'.")
            return

        def work(progress, cancel):
            return rank_columns(design, models, kind=kind, strength=strength, seed=seed, columns=columns,
                                progress=progress, cancel=cancel)

        def done(rk):
            self._rank_job_key = None
            if self.session is not session:
                return
            self._rankings[key] = rk
            if session.key() == key:
                self.ranking = rk
                self._show_ranking(rk)
                self.set_sentences(list(rk.sentences[:3]))
            else:
                self._start_ranking(session)

        def stopped(exc=None):
            if self._rank_job_key == key:
                self._rank_job_key = None
            if exc is not None:
                self.window_.show_error("Ranking the columns did not finish", exc)

        self._rank_job_key = key
        self.window_.runner.start(work, label="Ranking the columns", slot="rank", done=done,
                                  failed=stopped, cancelled=stopped)

    # -- display ------------------------------------------------------------------------
    def refresh(self, session):
        design = session.design
        cols = list(dict.fromkeys(design.sources)) if design is not None else []
        cur = self.column.currentText()
        self.column.blockSignals(True)
        self.column.clear()
        self.column.addItems(cols)
        if cur in cols:
            self.column.setCurrentText(cur)
        self.column.blockSignals(False)
        self._offer_kinds()
        if session.results is None:
            self.set_sentences(["Fit the models, then damage one input to see which model moves."])
            return
        configs = list(session.stress_configs)
        self.history.blockSignals(True)
        self.history.clear()
        for i, c in enumerate(configs):
            strength = "default" if c.strength is None else f"{c.strength:g}"
            self.history.addItem(f"{i + 1}. {c.kind} {c.column} ({strength})", i)
        self.history.blockSignals(False)
        if configs:
            self.history.setCurrentIndex(len(configs) - 1)
            self._show_history()
        else:
            self.set_sentences(["No stress test yet: choose a column and a kind of damage, then Run."])
        if self._rank_request is not None:
            rk = self._rankings.get(session.key())
            if rk is not None:
                self.ranking = rk
                self._show_ranking(rk)
            else:
                # The models moved (a new α, an undo): rank again at the new choices, saying so meanwhile.
                self.rank_model.set_rows([["ranking again for the models now chosen…"]], ["Column"])
                self._start_ranking(session)

    def _show_history(self, *_):
        session = self.session
        i = self.history.currentData()
        if session is None or i is None:
            return
        results = session.stress_results()
        if not 0 <= i < len(results):
            return
        res = results[i]
        sweep = None
        for sw in session.stress_sweeps():
            if sw.column == res.config.column and sw.kind == res.config.kind:
                sweep = sw
        self.column.setCurrentText(res.config.column)
        self.kind.setCurrentIndex(max(0, self.kind.findData(res.config.kind)))
        self._show(res, sweep)

    def _show(self, res, sweep):
        rows, bg = [], {}
        worst = max((res.shifts[n].shift_rmse for n in res.models), default=0.0)
        for r, n in enumerate(res.models):
            s = res.shifts[n]
            rows.append([model_label(n), "yes" if s.uses_column else "no", s.shift_rmse, s.mean_shift,
                         s.moved_share, s.error_clean, s.error_damaged])
            if worst > 0 and s.shift_rmse == worst:
                bg[(r, 2)] = WARN_BG
        self.shift_model.set_rows(rows, ["Model", f"Uses {res.config.column}", "RMS shift", "Mean shift",
                                         "Rows moved", "Error before", "Error after"], backgrounds=bg,
                                  percent_cols=(4,))
        self.shift_view.resizeColumnsToContents()
        sentences = list(res.sentences[:2])
        if sweep is not None:
            sentences += list(sweep.sentences[:1])
        self.set_sentences(sentences)
        self.defer(self._plot_sweep, sweep)

    def _plot_sweep(self, sweep):
        self.plot.clear()
        legend = self.plot.getPlotItem().legend or self.plot.addLegend(offset=(10, 10), labelTextSize="8pt")
        legend.clear()
        if sweep is not None:
            for n in sweep.models:
                c = model_colour(n)
                self.plot.plot(np.asarray(sweep.strengths), np.asarray(sweep.shift_rmse[n]), pen=pg.mkPen(c, width=2),
                               symbol="o", symbolSize=6, symbolBrush=c, symbolPen=None, name=model_label(n))
            self.plot.setLabel("bottom", f"strength of '{KIND_WORDS.get(sweep.kind, sweep.kind)}' on {sweep.column}")

    def _show_ranking(self, rk):
        shift = np.asarray(rk.shift_rmse)
        order = np.argsort(-shift.max(axis=0))
        rows = [[rk.columns[j]] + [float(shift[i, j]) for i in range(len(rk.models))] for j in order]
        self.rank_model.set_rows(rows, ["Column"] + [model_label(n) for n in rk.models])
        self.rank_caption.setText(f"Every column damaged in turn ({rk.kind}): RMS shift of predictions")
        self.rank_view.resizeColumnsToContents()

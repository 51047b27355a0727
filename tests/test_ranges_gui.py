"""The window's view of equally good models, driven offscreen (pytest-qt).

What it shows is checked against the headless core on the same session (every number in
the window comes from :func:`regbench.analysis.ranges.compute_ranges`).
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.data import Roles  # noqa: E402
from regbench.demo import GREENHOUSE_ROLES  # noqa: E402
from regbench.models.results import FitSettings  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
SAMPLE_CSV = os.path.join(os.path.dirname(__file__), "..", "sample_projects", "greenhouse.csv")
TIMEOUT_MS = 120_000


def _idle(qtbot, w):
    qtbot.waitUntil(lambda: not w.runner.busy() and w.session.derived_ready, timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()


def test_panel_shows_the_core_ranges_and_the_tolerance_control_recomputes_without_a_refit(qtbot):
    from regbench.analysis.ranges import compute_ranges
    from regbench.gui.window import MainWindow
    from regbench.session import Session

    s = Session.from_table_file(SAMPLE_CSV, Roles.from_dict(GREENHOUSE_ROLES), FitSettings(folds=3, n_penalties=20))
    s.set_bootstrap(0)
    s.compute()
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("ranges")
    panel = w.panel("ranges")
    w._refresh_panel(panel)
    panel.flush()   # the tables on hidden tabs are filled in later turns
    core = compute_ranges(s.design, s.results, None, models=s.models())
    assert panel.sentences.text().startswith(core.sentences[0])
    assert "held-out default" in panel.in_force.text()
    m = panel.columns_model
    j = core.columns.index("humidity_pct")
    assert m.value(j, 0) == pytest.approx(core.low[j]) and m.value(j, 1) == pytest.approx(core.high[j])
    assert m.value(core.columns.index("day_temp_f"), 0) == "no bound"
    assert panel.rows_model.value(0, 0) == _row_name(s, core.widest[0]["row"])
    assert [panel.fits_model.value(k, 0) for k in range(4)] == ["OLS", "Ridge", "Lasso", "Elastic net"]

    results = s.results
    panel.choice.setCurrentIndex(2)  # within 1 %
    panel._chosen(2)
    _idle(qtbot, w)
    w._refresh_panel(panel)
    assert s.results is results and s.settings.range_tolerance == 0.01  # the fits stay
    assert "set here" in panel.in_force.text() and "within 1 %" in panel.sentences.text()
    one = compute_ranges(s.design, s.results, 0.01, models=s.models())
    assert m.value(j, 1) == pytest.approx(one.high[j])
    panel.flush()   # the plots are drawn a turn after the tables
    assert len(panel.plots()) == 2 and all(p.getPlotItem().listDataItems() or p.getPlotItem().items
                                           for p in panel.plots())
    w.undo()
    _idle(qtbot, w)
    assert s.settings.range_tolerance is None and panel.choice.currentIndex() == 0
    w.dirty = False
    w.close()


def test_panel_without_fits_says_so(qtbot):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    qtbot.addWidget(w)
    assert "ranges" in [p.key for p in w.panels]
    w.close()


def test_panel_labels_the_quadratic_approximation_for_a_yes_no_outcome(qtbot):
    from regbench.analysis.ranges import compute_ranges
    from regbench.data.reader import table_from_frame
    from regbench.demo import GRADING_ROLES, grading
    from regbench.gui.window import MainWindow
    from regbench.session import Session

    s = Session(table_from_frame(grading(), "grading.csv"), Roles.from_dict(GRADING_ROLES),
                FitSettings(folds=3, n_penalties=10, range_tolerance=0.05))
    s.set_bootstrap(0)
    s.compute()
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("ranges")
    panel = w.panel("ranges")
    w._refresh_panel(panel)
    panel.flush()   # the plots are drawn a turn after the tables
    core = compute_ranges(s.design, s.results, 0.05, models=s.models())
    assert "Quadratic approximation" in panel.in_force.text() and "log-odds" in panel.in_force.text()
    assert panel.sentences.text().startswith(core.sentences[0][:60])
    assert "quadratic approximation" in panel.sentences.text()
    # The rows table shows probabilities, widest in probability first, as the core computes them.
    assert panel.rows_model.headers[1] == "Logistic probability"
    assert panel.rows_model.value(0, 0) == _row_name(s, core.widest[0]["row"])
    assert panel.rows_model.value(0, 2) == pytest.approx(core.widest[0]["p_low"])
    assert panel.fits_model.headers[1] == "Training log-loss above the best (%)"
    assert "probability" in panel.strip.getPlotItem().getAxis("left").labelText
    w.dirty = False
    w.close()


def test_panel_says_why_a_separated_outcome_has_no_ranges(qtbot):
    import pandas as pd

    from regbench.data.reader import table_from_frame
    from regbench.gui.window import MainWindow
    from regbench.session import Session

    rng = np.random.default_rng(2)
    x = rng.normal(size=60)
    frame = pd.DataFrame({"x": x, "z": rng.normal(size=60), "ok": np.where(x > 0.2, "yes", "no")})
    s = Session(table_from_frame(frame, "sep.csv"), Roles(target="ok"), FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(0)
    s.compute()
    assert s.results.logistic.separation is not None and s.ranges() is None
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("ranges")
    panel = w.panel("ranges")
    w._refresh_panel(panel)
    assert "the outcome is separated" in panel.sentences.text() and "no minimum" in panel.sentences.text()
    assert panel.columns_model.rowCount() == 0
    w.dirty = False
    w.close()


def _row_name(session, row):
    """A row as the panel names it: by the table's identifier column when it has one, else its number."""
    from regbench.data.identifiers import row_label_column, row_names

    return row_names(session.table, [row])[0] if row_label_column(session.table) else row


def test_first_visit_fills_the_shown_table_now_and_the_hidden_tabs_in_later_turns(qtbot):
    """A wide table's first visit fills and sizes only the table on show; the tables behind the other
    two tabs wait for later turns of the event loop (so the visit holds the GUI thread less), and
    flush() or bringing a tab forward fills them.  Checked against the headless core's ranges."""
    from regbench.analysis.ranges import compute_ranges
    from regbench.gui.window import MainWindow
    from regbench.session import Session

    s = Session.from_table_file(SAMPLE_CSV, Roles.from_dict(GREENHOUSE_ROLES), FitSettings(folds=3, n_penalties=20))
    s.set_bootstrap(0)
    s.compute()
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    panel = w.panel("ranges")
    assert w.draw_in_steps and panel.tabs.currentIndex() == 0
    w._refresh_panel(panel)   # the first visit's own turn, before the event loop runs again
    core = compute_ranges(s.design, s.results, None, models=s.models())
    assert panel.columns_model.rowCount() == len(core.columns)
    assert panel.rows_model.rowCount() == 0 and panel.fits_model.rowCount() == 0
    # Bringing a tab forward fills its table at once, before its turn comes.
    panel.tabs.setCurrentIndex(2)
    assert [panel.fits_model.value(k, 0) for k in range(4)] == ["OLS", "Ridge", "Lasso", "Elastic net"]
    assert panel.rows_model.rowCount() == 0
    panel.flush()
    assert panel.rows_model.rowCount() == len(core.widest)
    assert panel.rows_model.value(0, 0) == _row_name(s, core.widest[0]["row"])
    # Filled once: the turns left over find nothing more to fill.
    assert not panel._deferred and not panel._unfilled
    # A refresh with the fits tab shown fills that table now and the columns and rows tables later.
    w._refresh_panel(panel)
    assert panel.fits_model.rowCount() == 4 and sorted(panel._unfilled) == [0, 1]
    qtbot.waitUntil(lambda: not panel._deferred, timeout=10_000)
    assert not panel._unfilled and panel.columns_model.rowCount() == len(core.columns)
    w.dirty = False
    w.close()

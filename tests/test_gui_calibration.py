"""The probabilities panel and the outcome controls, driven offscreen through real widgets (pytest-qt).

The numbers shown are checked against the session's own classification results
(which tests/test_calibration.py checks against scikit-learn), and the recorded
threshold against the session state the project file keeps.
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.analysis.stress import StressConfig  # noqa: E402
from regbench.data import Roles  # noqa: E402
from regbench.data.reader import table_from_frame  # noqa: E402
from regbench.demo import GRADING_ROLES, grading  # noqa: E402
from regbench.models.results import FitSettings  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
TIMEOUT = 180_000


def _session():
    from regbench.session import Session

    s = Session(table_from_frame(grading(), "grading.csv"), Roles.from_dict(GRADING_ROLES),
                FitSettings(folds=4, seed=3, n_penalties=12))
    s.add_stress(StressConfig("firmness_n", "rescale", 0.1))
    s.set_bootstrap(0)
    return s


@pytest.fixture
def win(qtbot):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    with qtbot.waitSignal(w.results_applied, timeout=TIMEOUT):
        w.adopt(_session())
    qtbot.waitUntil(lambda: not w.runner.busy(), timeout=TIMEOUT)
    yield w
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def test_panel_shows_the_session_numbers_and_records_a_threshold(win, qtbot):
    panel = win.panel("calibration")
    i = win.panels.index(panel)
    assert not win.nav.item(i).isHidden()
    win.show_panel("calibration")
    qtbot.waitUntil(lambda: panel._cl is not None, timeout=TIMEOUT)
    cl = win.session.classification()
    assert panel.summary.row_labels[0] == "Logistic"
    j = panel.summary.headers.index("AUC")
    assert panel.summary.rows[0][j] == pytest.approx(cl.discrimination["held_out"]["logistic"].auc)
    assert panel.sentences.text().strip()
    panel.threshold_spin.setValue(0.3)
    panel.note_edit.setText("a second grader checks these")
    panel.record_btn.click()
    assert win.session.threshold == {"value": 0.3, "note": "a second grader checks these"}
    qtbot.waitUntil(lambda: win.session.derived_ready and win.session.classification() is not None, timeout=TIMEOUT)
    win.refresh_all(now=True)
    qtbot.waitUntil(lambda: any("(recorded)" in r for r in panel.table.row_labels), timeout=TIMEOUT)
    assert "0.3" in panel.recorded.text()
    # The stress test now counts the rows that cross the recorded threshold.
    assert win.session.stress_results()[0].shifts["lasso"].crossed_share is not None
    assert win.errors == []


def test_outcome_control_swaps_yes_and_panel_hidden_for_numbers(win, qtbot):
    bar, draft = win.question, win.draft
    assert bar.yes_level.isVisibleTo(bar)
    assert bar.yes_level.currentData() == "binary:top"
    assert draft.roles() == win.session.roles   # nothing pending after loading
    # Swap which value counts as yes, then fit.
    bar.yes_level.setCurrentIndex(bar.yes_level.findData("binary:standard"))
    bar._outcome_chosen()
    assert draft.roles().positive_level == "standard"
    with qtbot.waitSignal(win.results_applied, timeout=TIMEOUT):
        win.fit_pressed()
    qtbot.waitUntil(lambda: not win.runner.busy(), timeout=TIMEOUT)
    assert win.session.design.levels == ("top", "standard")
    # A numeric target hides the panel and the yes control.
    draft.set_target("brix")
    draft.set_ticked("top_grade", False)
    assert not bar.yes_level.isVisibleTo(bar)
    with qtbot.waitSignal(win.results_applied, timeout=TIMEOUT):
        win.fit_pressed()
    qtbot.waitUntil(lambda: not win.runner.busy(), timeout=TIMEOUT)
    QtWidgets.QApplication.processEvents()
    assert win.session.design.outcome == "numeric"
    assert win.nav.item(win.panels.index(win.panel("calibration"))).isHidden()

"""What the core says beside its numbers reaches the window: the CV minimum at the grid's edge,
cluster-robust standard errors, why standard errors are missing, a stale cache refitted, and
identifier-like columns left out (pytest-qt, offscreen).

Each check compares the words on screen with the result the headless core produced for the same
session, so the window cannot say something the fit JSON does not.
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.data import Roles, table_from_frame  # noqa: E402
from regbench.models.results import FitSettings  # noqa: E402
from regbench.session import Session  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
TIMEOUT_MS = 120_000


def _window(qtbot):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    return w


def _idle(qtbot, w):
    qtbot.waitUntil(lambda: not w.runner.busy() and (w.session is None or w.session.results is None
                                                      or w.session.derived_ready), timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()


def _fitted(frame, **settings):
    s = Session.from_table(table_from_frame(frame), Roles(target="y"), FitSettings(folds=3, n_penalties=20, **settings))
    s.set_bootstrap(0)
    assert s.apply_results(s.compute_results())
    return s


def _close(w):
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def test_cv_minimum_at_the_grid_edge_is_said_in_the_penalty_view(qtbot):
    # Nearly noiseless y from three columns: held-out error keeps falling as α shrinks, so its
    # lowest value is at the smallest α of the grid (cv.py's at_edge).
    rng = np.random.default_rng(3)
    f = pd.DataFrame({"a": rng.normal(size=200), "b": rng.normal(size=200), "c": rng.normal(size=200)})
    f["y"] = 2 * f.a - f.b + 0.5 * f.c + rng.normal(scale=0.01, size=200)
    s = _fitted(f)
    assert s.results.penalized["lasso"].cv.at_edge
    w = _window(qtbot)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("paths")
    panel = w.panel("paths")
    panel.family.setCurrentIndex(panel.family.findData("lasso"))
    QtWidgets.QApplication.processEvents()
    text = panel.sentences.text()
    assert "At the edge of the grid" in text and "a smaller α might predict better" in text
    assert s.results.penalized["lasso"].cv.edge_sentence() in text
    _close(w)


def test_cluster_robust_standard_errors_show_beside_the_classical_ones(qtbot, greenhouse_fitted):
    # The sample holds out whole glasshouses, so OLS carries cluster-robust SEs by glasshouse
    # (checked against statsmodels' cov_type='cluster' in tests/test_ols.py).
    s = greenhouse_fitted
    ols = s.results.ols
    assert ols.cluster_std_errors is not None and ols.n_clusters == 8
    w = _window(qtbot)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("coefficients")
    panel = w.panel("coefficients")
    panel.scale.setCurrentIndex(panel.scale.findData("orig"))
    QtWidgets.QApplication.processEvents()
    m = panel.model
    header = "OLS SE by glasshouse"
    assert header in m.headers
    j = m.headers.index(header)
    shown = {label: m.rows[i][j] for i, label in enumerate(m.row_labels)}
    assert shown["(intercept)"] == pytest.approx(ols.cluster_intercept_se, rel=1e-12)
    kept = [c for c in ols.kept]
    for c in kept:
        assert shown[c] == pytest.approx(ols.cluster_std_errors[ols.columns.index(c)], rel=1e-12)
    assert "cluster-robust by glasshouse (8 groups" in panel.sentences.text()
    _close(w)


def test_missing_standard_errors_say_why(qtbot):
    # 12 rows, 14 columns: OLS keeps 11 and fits every row exactly, leaving no degrees of freedom.
    rng = np.random.default_rng(3)
    f = pd.DataFrame({f"x{j}": rng.normal(size=12) for j in range(14)})
    f["y"] = f.x0 - f.x1 + rng.normal(scale=0.1, size=12)
    s = _fitted(f)
    note = s.results.ols.inference_note
    assert note.startswith("No standard errors or p-values")
    w = _window(qtbot)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    w.show_panel("coefficients")
    panel = w.panel("coefficients")
    assert note in panel.sentences.text()
    m = panel.model
    j = m.headers.index("OLS SE")
    assert np.isnan(m.rows[1][j])
    assert m.data(m.index(1, j), QtCore.Qt.ToolTipRole) == note
    _close(w)


def test_a_stale_cache_refitted_on_opening_says_why(qtbot, greenhouse_fitted, tmp_path, monkeypatch):
    import regbench.project.store as store
    from regbench.project import save_project

    path = tmp_path / "gh.regbench"
    save_project(greenhouse_fitted, str(path))
    # The engine this window runs is "newer" than the one that wrote the cache: the cache is stale.
    monkeypatch.setattr(store, "ENGINE_VERSION", store.ENGINE_VERSION + 1)
    w = _window(qtbot)
    with qtbot.waitSignal(w.results_applied, timeout=TIMEOUT_MS):
        w.open_path(str(path))
    _idle(qtbot, w)
    s = w.session
    assert s.cache_status == "stale" and "were not used" in s.cache_note
    status = w.status_label.text()
    assert status.startswith("Results refitted: the saved results were not used because they were computed by "
                             f"engine version {store.ENGINE_VERSION - 1}, this is {store.ENGINE_VERSION}; the models "
                             "are fitted again with the same choices, and nothing in the project is lost")
    w.show_panel("data")
    QtWidgets.QApplication.processEvents()
    assert "On opening, the saved results were not used because they were computed by engine version" \
        in w.panel("data").sentences.text()
    _close(w)


def test_identifier_columns_left_out_say_so_in_the_data_view_without_command_line_words(qtbot, tmp_path):
    rng = np.random.default_rng(5)
    n = 40
    f = pd.DataFrame({"row": np.arange(1, n + 1), "x1": rng.normal(size=n), "x2": rng.normal(size=n)})
    f["y"] = f.x1 - f.x2 + rng.normal(scale=0.1, size=n)
    s = Session.from_table(table_from_frame(f), Roles(target="y"))
    w = _window(qtbot)
    w.adopt(s, fit=False)
    _idle(qtbot, w)
    text = w.panel("data").sentences.text()
    assert "row (looks like an identifier: counts up by 1 from row to row, like a row number" in text
    assert "tick it to use it" in text and "--predictors" not in text and "among the predictors" not in text
    cm = w.panel("data").columns_model
    assert cm.part("row") == "left out: counts up by 1 from row to row, like a row number"
    _close(w)


def test_grading_sample_opens_as_a_yes_no_outcome_and_fit_quality_speaks_of_brier_scores(qtbot):
    """The grading sample's last column, top_grade ('top' / 'standard'), is the target by the stated
    rule, read as yes/no; the fit-quality table and sentence give Brier scores, checked against
    scikit-learn's brier_score_loss on the same held-out probabilities."""
    from dataclasses import replace

    from sklearn.metrics import brier_score_loss

    sample = os.path.join(os.path.dirname(__file__), "..", "sample_projects", "grading.csv")
    w = _window(qtbot)
    with qtbot.waitSignal(w.session_changed, timeout=TIMEOUT_MS):
        w.open_path(sample)
    _idle(qtbot, w)
    s = w.session
    assert s.results is None and s.roles.target == "top_grade"
    assert "two values (yes/no)" in w.status_label.text()
    assert w.question.yes_level.isVisible()
    assert "batch" not in s.roles.predictors   # 480 batch labels name rows
    w.draft.set_settings(replace(w.draft.settings, folds=3, n_penalties=15), bootstrap=0)
    with qtbot.waitSignal(w.results_applied, timeout=TIMEOUT_MS):
        w.question.fit_btn.click()
    _idle(qtbot, w)
    s = w.session
    assert s.design.outcome == "binary"
    assert w.panel("calibration").applies(s)
    w.show_panel("fit")
    panel = w.panel("fit")
    w._refresh_panel(panel)
    qtbot.waitUntil(lambda: not panel._deferred, timeout=TIMEOUT_MS)   # its numbers come from the worker
    m = panel.fit_model
    assert m.headers[1:5] == ["Brier fitted", "Brier held-out", "Brier skill fitted", "Brier skill held-out"]
    q = panel.quality
    for i, name in enumerate(q.models):
        p = q.predicted[(name, "held_out")]
        ref = brier_score_loss(s.design.y, p, sample_weight=s.design.weights)
        assert m.rows[i][2] == pytest.approx(ref, rel=1e-10)
    text = panel.sentences.text()
    assert "lowest Brier score on held-out rows" in text and "explains" not in text
    _close(w)

"""At the default 1400 × 900 no table header is clipped: a squeezed column's header takes two
lines instead of losing letters (pytest-qt, offscreen)."""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.gui.tables import GridModel, make_view, two_lines  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
Qt = QtCore.Qt


def _clipped_headers(view) -> list:
    """Headers whose section is narrower than the text it shows (one or two lines) needs."""
    h = view.horizontalHeader()
    out = []
    for i in range(h.count()):
        if h.isSectionHidden(i):
            continue
        if h.sectionSize(i) < h.sectionSizeHint(i) - 1:
            out.append((i, view.model().headerData(i, Qt.Horizontal), h.sectionSize(i), h.sectionSizeHint(i)))
    return out


def test_two_lines_breaks_at_the_middle_space():
    assert two_lines("RMSE held-out") == "RMSE\nheld-out"
    assert two_lines("Limits of agreement: low") == "Limits of\nagreement: low"
    assert two_lines("Model") == "Model"


def test_a_squeezed_column_wraps_its_header_and_copy_keeps_one_line(qtbot):
    from regbench.gui.tables import model_to_tsv

    model = GridModel()
    model.set_rows([["OLS", 0.0631, 0.0828, 0.7144, 0.5083, 0.0656]],
                   ["Model", "RMSE fitted", "RMSE held-out", "R² fitted", "R² held-out", "MAE held-out"])
    view = make_view(model)
    qtbot.addWidget(view)
    view.resize(420, 200)
    view.show()
    view.resizeColumnsToContents()
    QtWidgets.QApplication.processEvents()
    assert model.wrapped, "the headers are wider than the numbers: some must take two lines"
    assert "\n" in model.headerData(min(model.wrapped), Qt.Horizontal)
    assert _clipped_headers(view) == []
    assert model_to_tsv(model).splitlines()[0] == "\tModel\tRMSE fitted\tRMSE held-out\tR² fitted\tR² held-out\tMAE held-out"
    # Room again: one line each.
    view.resize(1200, 200)
    QtWidgets.QApplication.processEvents()
    assert model.wrapped == frozenset()


def test_no_header_is_clipped_on_any_panel_at_1400_by_900(qtbot, greenhouse_fitted):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    w.adopt(greenhouse_fitted, fit=False)
    qtbot.waitUntil(lambda: not w.runner.busy() and w.session.derived_ready, timeout=120_000)
    clipped = {}
    for panel in w.panels:
        w.show_panel(panel.key)
        w._refresh_panel(panel)
        QtWidgets.QApplication.processEvents()
        for k, view in enumerate(panel.views()):
            if view.isVisible() and view.model().columnCount():
                bad = _clipped_headers(view)
                if bad:
                    clipped[(panel.key, k)] = bad
    assert clipped == {}
    # The sentence's weights-kind choice shows its whole word.
    kind = w.question.weights_kind
    if kind.isVisible():
        assert kind.width() >= kind.sizeHint().width()
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def _open_sample(qtbot, name):
    from regbench.gui.window import MainWindow
    from regbench.project import load_project

    path = os.path.join(os.path.dirname(__file__), "..", "sample_projects", name)
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    w.adopt(load_project(path), path=path, fit=False)
    qtbot.waitUntil(lambda: not w.runner.busy() and w.session.derived_ready, timeout=120_000)
    return w


def _close(w):
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


@pytest.mark.parametrize("sample", ["greenhouse.regbench", "grading.regbench"])
def test_range_and_stability_tables_fit_their_room_at_1400_by_900(qtbot, sample):
    w = _open_sample(qtbot, sample)
    scrolls = {}
    for key in ("ranges", "stability"):
        panel = w.panel(key)
        w.show_panel(key)
        w._refresh_panel(panel)
        panel.flush()
        for k, view in enumerate(panel.views()):
            panel.tabs.setCurrentWidget(view)
            QtWidgets.QApplication.processEvents()
            assert view.model().columnCount() > 0
            # Sideways scrolling is what the squeeze avoids: every column sits in the view's width.
            if view.horizontalScrollBar().maximum() > 0:
                scrolls[(key, k)] = [view.horizontalHeader().sectionSize(i) for i in range(view.model().columnCount())]
            assert _clipped_headers(view) == []
    assert scrolls == {}
    _close(w)


def test_prediction_strip_row_names_never_overlap(qtbot):
    # The grading sample's two widest rows sit side by side at the top of the strip.
    w = _open_sample(qtbot, "grading.regbench")
    panel = w.panel("ranges")
    w.show_panel("ranges")
    w._refresh_panel(panel)
    panel.flush()
    for width in (1400, 1000, 1800):
        w.resize(width, 900)
        QtWidgets.QApplication.processEvents()
        labels = panel._strip_labels
        assert len(labels) == 3
        shown = [t.sceneBoundingRect() for t in labels if t.isVisible()]
        assert shown, "the widest row is always named"
        assert labels[0].isVisible()
        assert not any(a.intersects(b) for i, a in enumerate(shown) for b in shown[i + 1:])
        # Each name shown lies inside the plot (not cut by its top or sides).
        area = panel.strip.getViewBox().sceneBoundingRect().adjusted(-1, -1, 1, 1)
        assert all(area.contains(b) for b in shown)
    # The names hidden are still listed in the rows table.
    listed = {panel.rows_model.value(r, 0) for r in range(panel.rows_model.rowCount())}
    assert {t.toPlainText() for t in labels} <= listed   # by the table's identifier (batch) in both places
    _close(w)

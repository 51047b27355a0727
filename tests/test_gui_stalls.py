"""The window's GUI thread stays free: numbers are computed on the worker, drawing comes in steps.

Nothing here times anything (timings belong to ``python -m regbench.gui.heartbeat``); each test checks
a mechanism that keeps a piece of GUI-thread work short: which thread runs an analysis, how many
drawing steps share one turn of the event loop, whether a panel is laid out while hidden, how many
cells and headers sizing a table asks for.
"""

from __future__ import annotations

import os
import threading
import time

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.gui import tables  # noqa: E402
from regbench.gui.tables import GridModel, make_view  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
TIMEOUT_MS = 120_000


@pytest.fixture
def win(qtbot, greenhouse_fitted):
    """A window on the fitted greenhouse sample, idle."""
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    w.adopt(greenhouse_fitted)
    qtbot.waitUntil(lambda: not w.runner.busy(), timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()
    yield w
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def _settle(qtbot, w, panel):
    qtbot.waitUntil(lambda: not panel._deferred and not w.runner.busy(), timeout=TIMEOUT_MS)


def _record_threads(monkeypatch, module, name, seen):
    """Replace ``module.name`` by a wrapper noting the thread each call runs on."""
    real = getattr(module, name)

    def wrapper(*args, **kwargs):
        seen.append(threading.current_thread())
        return real(*args, **kwargs)

    monkeypatch.setattr(module, name, wrapper)


def test_correlation_map_and_fit_quality_are_computed_off_the_gui_thread(win, qtbot, monkeypatch):
    from regbench.analysis.correlation import correlation_map
    from regbench.analysis.fit_quality import fit_quality
    from regbench import session as session_module
    from regbench.gui.panels import fitquality, overlaps

    seen_map, seen_fit = [], []
    _record_threads(monkeypatch, overlaps, "correlation_map", seen_map)
    for module in (fitquality, session_module):   # wherever the window may call it from
        if hasattr(module, "fit_quality"):
            _record_threads(monkeypatch, module, "fit_quality", seen_fit)
    gui = threading.current_thread()
    for key, seen in (("overlaps", seen_map), ("fit", seen_fit)):
        win.show_panel(key)
        _settle(qtbot, win, win.panel(key))
        assert seen and all(t is not gui for t in seen), key
    # The panels draw what the worker computed: the same numbers as the analysis layer's own call.
    s = win.session
    np.testing.assert_array_equal(win.panel("overlaps")._corr, correlation_map(s.design).matrix)
    want = fit_quality(s.design, s.models(), s.heldout())
    got = win.panel("fit").quality
    assert [f.rmse for f in got.fits] == [f.rmse for f in want.fits]


def test_agreement_predictions_on_training_rows_are_computed_off_the_gui_thread(win, qtbot, monkeypatch):
    from regbench.models import results

    panel = win.panel("agreement")
    win.show_panel("agreement")
    _settle(qtbot, win, panel)
    seen = []
    _record_threads(monkeypatch, results.LinearModel, "predict", seen)
    gui = threading.current_thread()
    panel.split_box.setCurrentIndex(panel.split_box.findData("training"))
    _settle(qtbot, win, panel)
    assert seen and all(t is not gui for t in seen)
    # The scatter shows one point per training row (the sample caps only tables over its size).
    s = win.session
    items = [i for i in panel.plot.getPlotItem().items if hasattr(i, "points")]
    assert items and len(items[0].points()) == min(s.design.n, 20_000)
    a = panel.a_box.currentData()
    xs = np.sort(items[0].getData()[0])
    np.testing.assert_allclose(xs, np.sort(s.models()[a].predict(s.design.X)), rtol=1e-12)


def test_deferred_drawings_take_one_turn_each(win, qtbot):
    """An event queued after the action that asked for two deferred drawings runs before the first of
    them, and one queued during the first runs before the second: never after both."""
    panel = win.panel("coefficients")
    order = []

    def first():
        order.append("first")
        QtCore.QTimer.singleShot(0, lambda: order.append("other"))

    def second():
        order.append("second")

    panel.defer(first)
    panel.defer(second)
    QtCore.QTimer.singleShot(0, lambda: order.append("before"))
    qtbot.waitUntil(lambda: len(order) == 4, timeout=5_000)
    assert order == ["before", "first", "other", "second"]


def test_a_panel_is_filled_while_hidden_and_keeps_the_focus(win, qtbot, monkeypatch):
    """Filling a shown panel lays out the whole window for every widget it shows or hides; filled while
    hidden, the window is laid out once."""
    panel = win.panel("stress")
    visible = []
    real = panel.refresh

    def refresh(session):
        visible.append(panel.isVisible())
        real(session)

    monkeypatch.setattr(panel, "refresh", refresh)
    win._stale.add("stress")
    win.show_panel("stress")              # first visit: filled before it shows
    assert visible == [False] and panel.isVisible()
    win.nav.setFocus()
    win.refresh_all(now=True)             # a shown panel: hidden for the refill, shown again at once
    assert visible == [False, False] and panel.isVisible()
    panel.rank_view.setFocus()
    qtbot.waitUntil(lambda: panel.rank_view.hasFocus(), timeout=5_000)
    win.refresh_all(now=True)             # the focus is inside: the panel stays shown, the focus stays
    assert visible == [False, False, True] and panel.rank_view.hasFocus()


def test_the_columns_list_is_sized_once_not_at_every_layout(win, qtbot):
    from regbench.gui.roles import ColumnsModel

    panel = win.panel("data")
    view = panel.columns_view
    header = view.horizontalHeader()
    modes = [header.sectionResizeMode(c) for c in range(ColumnsModel.C_PART)]
    assert QtWidgets.QHeaderView.ResizeToContents not in modes
    # Sized from the text all the same: each column at least as wide as Qt's own size for its cells.
    win.show_panel("data")
    QtWidgets.QApplication.processEvents()
    for c in (ColumnsModel.C_NAME, ColumnsModel.C_KIND):
        if not view.isColumnHidden(c):
            assert header.sectionSize(c) >= view.sizeHintForColumn(c) - 1


class _Counting(GridModel):
    def __init__(self):
        super().__init__()
        self.cells = 0
        self.headers_asked = 0

    def data(self, index, role=QtCore.Qt.DisplayRole):
        if role == QtCore.Qt.DisplayRole:
            self.cells += 1
        return super().data(index, role)

    def cell_display(self, r, c):   # sizing reads a cell's text here, without a model index
        self.cells += 1
        return super().cell_display(r, c)

    def headerData(self, section, orientation, role=QtCore.Qt.DisplayRole):
        self.headers_asked += 1
        return super().headerData(section, orientation, role)


def test_sizing_a_wide_grid_reads_a_bounded_number_of_cells_and_headers(qtbot):
    p = 60
    rng = np.random.default_rng(0)
    model = _Counting()
    view = make_view(model)
    qtbot.addWidget(view)
    view.resize(900, 600)
    view.show()
    model.set_rows(rng.normal(size=(p, p)).tolist(), [f"column_{j:02d}" for j in range(p)], digits=3)
    model.cells = model.headers_asked = 0
    view.resizeColumnsToContents()
    assert model.cells <= getattr(tables, "SIZE_CELLS", 480) + p
    assert model.headers_asked <= 3 * p + 100   # Qt's own size hint asks each header for many roles
    # Every column still fits its header's text (Qt's size for it) and its widest sampled cell.
    header = view.horizontalHeader()
    assert all(header.sectionSize(c) >= header.sectionSizeHint(c) for c in range(p))
    # A grid of 1,000 columns reads at most SIZE_CELLS_WIDE cells (two rows each), and fits every header.
    p = 1000
    model.set_rows(rng.normal(size=(8, p)), [f"c{j:03d}" for j in range(p)], digits=3)
    model.cells = 0
    view.resizeColumnsToContents()
    assert 0 < model.cells <= tables.SIZE_CELLS_WIDE + p
    assert all(header.sectionSize(c) >= header.sectionSizeHint(c) for c in range(p))


def test_header_widths_match_qt_size_hints(qtbot):
    model = GridModel()
    view = make_view(model)
    qtbot.addWidget(view)
    heads = ["a", "Row", "RMSE held-out", "Limits of agreement: low", "As\ncategories", "R² of that", ""]
    model.set_rows([[1.0] * len(heads)], heads)
    widths = tables._header_widths(view.horizontalHeader())
    assert [widths(c) for c in range(len(heads))] == [view.horizontalHeader().sectionSizeHint(c)
                                                      for c in range(len(heads))]


def test_stepping_alpha_lays_out_only_what_moves(win, qtbot, monkeypatch):
    from regbench.gui import penaltyfigure

    win.show_panel("paths")
    panel = win.panel("paths")
    fig = panel.figure
    fig.grab()                               # painted once: the whole figure laid out
    QtWidgets.QApplication.processEvents()
    calls = {"build": 0, "move": 0}
    real_build, real_move = penaltyfigure.build_figure, getattr(penaltyfigure, "move_figure", None)

    def build(*args, **kwargs):
        calls["build"] += 1
        return real_build(*args, **kwargs)

    def move(*args, **kwargs):
        calls["move"] += 1
        return real_move(*args, **kwargs)

    monkeypatch.setattr(penaltyfigure, "build_figure", build)
    monkeypatch.setattr(penaltyfigure, "move_figure", move, raising=False)
    before = fig.data.alpha
    fig.setFocus()
    qtbot.keyClick(fig, QtCore.Qt.Key_Right)
    fig.grab()
    assert fig.data.alpha != before
    assert calls["build"] == 0 and calls["move"] >= 1
    # The handle sits where a figure laid out afresh at the new α puts it.
    fresh = real_build(fig.data, fig.width(), fig.height())
    assert fig.figure().handle_x == fresh.handle_x and fig.figure().prims == fresh.prims


def test_a_big_scatter_is_added_a_slice_per_turn(win, qtbot):
    from regbench.gui.panels.base import SLICE_POINTS

    panel = win.panel("agreement")
    rng = np.random.default_rng(5)
    n = 2 * SLICE_POINTS + 123
    x, y = rng.normal(size=n), rng.normal(size=n)
    panel.plot.clear()
    panel.scatter(panel.plot, x, y, size=5, pen=None)

    def shown():
        return [i for i in panel.plot.getPlotItem().items if hasattr(i, "points")]

    assert [len(i.points()) for i in shown()] == [SLICE_POINTS]   # the first slice at once
    qtbot.waitUntil(lambda: not panel._deferred, timeout=5_000)
    assert [len(i.points()) for i in shown()] == [SLICE_POINTS, SLICE_POINTS, 123]
    got = np.concatenate([i.getData()[0] for i in shown()])
    np.testing.assert_array_equal(got, x)   # every point, in order, none twice
    # A plot cleared before the slices are in drops the rest of the older drawing.
    panel.plot.clear()
    panel.scatter(panel.plot, x, y, size=5, pen=None)
    panel.plot.clear()
    qtbot.waitUntil(lambda: not panel._deferred, timeout=5_000)
    assert shown() == []


def test_fit_quality_numbers_from_the_worker_fill_the_panel_while_hidden(win, qtbot, monkeypatch):
    panel = win.panel("fit")
    visible = []
    real = panel._show

    def show(session):
        visible.append(panel.isVisible())
        real(session)

    monkeypatch.setattr(panel, "_show", show)
    win.nav.setFocus()
    win.show_panel("fit")
    _settle(qtbot, win, panel)
    assert visible and visible[0] is False and panel.isVisible()
    assert panel.fit_model.rowCount() == len(win.session.models())


def test_a_timer_due_during_a_drawing_runs_before_the_next_drawing(win, qtbot):
    """The next drawing waits behind timers (and input) already due, so the window answers between them."""
    panel = win.panel("coefficients")
    order = []

    def first():
        order.append("first")
        timer = QtCore.QTimer(panel)
        timer.setSingleShot(True)
        timer.setInterval(0)
        timer.timeout.connect(lambda: order.append("timer"))
        timer.start()

    def second():
        order.append("second")

    panel.defer(first)
    panel.defer(second)
    qtbot.waitUntil(lambda: len(order) == 3, timeout=5_000)
    assert order == ["first", "timer", "second"]


@pytest.mark.parametrize("key", ["fit", "agreement", "overlaps", "ranges", "calibration"])
def test_a_panel_visited_before_shows_without_drawing_again(win, qtbot, monkeypatch, key):
    """Switching back to a panel whose numbers have not changed only shows it: no refresh, no work sent
    to the worker, no plot cleared or scatter added, no drawing left for later turns."""
    from regbench.gui.panels import base

    panel = win.panel(key)
    win.show_panel(key)
    _settle(qtbot, win, panel)
    win.show_panel("data")
    _settle(qtbot, win, win.panel("data"))
    items_before = [list(p.getPlotItem().items) for p in panel.plots() if hasattr(p, "getPlotItem")]
    calls = []
    for name in ("refresh", "clear"):
        real = getattr(panel, name)
        monkeypatch.setattr(panel, name, lambda *a, _real=real, _name=name, **k: (calls.append(_name), _real(*a, **k)))
    for name in ("prepare", "defer", "scatter"):
        real = getattr(base.Panel, name)
        monkeypatch.setattr(base.Panel, name,
                            lambda self, *a, _real=real, _name=name, **k: (calls.append(_name), _real(self, *a, **k)))
    real_start = win.runner.start
    monkeypatch.setattr(win.runner, "start", lambda *a, **k: (calls.append("worker"), real_start(*a, **k))[1])
    win.show_panel(key)
    QtWidgets.QApplication.processEvents()
    _settle(qtbot, win, panel)
    assert panel.isVisible() and win.current_panel() is panel
    assert calls == []
    assert [list(p.getPlotItem().items) for p in panel.plots() if hasattr(p, "getPlotItem")] == items_before


def test_the_window_leaves_a_core_for_its_gui_thread(qtbot):
    """BLAS threads spin after each call; the window limits them to every core but one, so the GUI thread
    finds a core while the worker makes many small calls."""
    from threadpoolctl import threadpool_info

    from regbench.gui.app import application, release_the_cores

    application()
    try:
        blas = [lib for lib in threadpool_info() if lib["user_api"] == "blas"]
        assert blas and all(lib["num_threads"] <= max(1, (os.cpu_count() or 1) - 1) for lib in blas)
    finally:
        release_the_cores()


def test_the_window_sets_the_loaded_libraries_aside_from_full_collections(qtbot):
    """A full garbage collection walks every container object; those loaded before the window opens are
    frozen (gc.freeze), so a collection on the GUI thread walks only what came after them."""
    import gc

    from regbench.gui.app import application, release_the_cores

    gc.unfreeze()
    assert gc.get_freeze_count() == 0
    try:
        application()
        assert gc.get_freeze_count() > 10_000     # numpy, pandas, Qt and pyqtgraph alone hold more
    finally:
        gc.unfreeze()
        release_the_cores()


def test_the_stall_harness_names_what_ran_while_the_gui_thread_was_late(qtbot, tmp_path):
    """The heartbeat keeps a profile of its longest gap and, when watching, writes every thread's stack
    while the GUI thread is late: a drawing that holds the thread 300 ms shows up by name in both."""
    import pstats

    from regbench.gui.heartbeat import Heartbeat

    def slow_drawing():
        time.sleep(0.3)

    beat = Heartbeat(profile=True)
    dumps = open(tmp_path / "stacks.txt", "w")
    beat.start()
    beat.watch(dumps)
    try:
        QtCore.QTimer.singleShot(20, slow_drawing)
        qtbot.wait(500)
    finally:
        beat.stop()
        import faulthandler

        faulthandler.cancel_dump_traceback_later()
        dumps.close()
    wall, _cpu = beat.worst()
    assert wall >= 0.3
    names = {func for (_file, _line, func) in pstats.Stats(beat.worst_profile).stats}
    assert "slow_drawing" in names
    text = (tmp_path / "stacks.txt").read_text()
    assert "slow_drawing" in text and text.count("Timeout") == 1   # one dump per late tick

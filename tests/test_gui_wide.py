"""The window on a wide table: 300 overlapping columns (pytest-qt, offscreen).

Every check compares what is drawn with the headless result of the same session or with geometry Qt
reports; nothing here is timed (``python -m regbench.gui.heartbeat`` measures the GUI thread).  The
table is invented: pairs of columns that track each other, as sensors on one line do.
"""

from __future__ import annotations

import copy
import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
import pyqtgraph as pg  # noqa: E402
from PySide6 import QtCore, QtGui, QtWidgets  # noqa: E402

from regbench.data import Roles, table_from_frame  # noqa: E402
from regbench.models.results import FitSettings  # noqa: E402
from regbench.report.pathfig import HAIRLINE, MANY_PATHS, FigureData, Points, build_figure  # noqa: E402
from regbench.session import Session  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
TIMEOUT_MS = 120_000
P = 300


def _frame(p=P, n=600, seed=11):
    """``p`` columns in pairs (each odd one the one before plus a little noise) and a target."""
    rng = np.random.default_rng(seed)
    cols = {}
    for j in range(p):
        base = cols[f"sensor_{j - 1:03d}"] if j % 2 else rng.normal(size=n)
        cols[f"sensor_{j:03d}"] = base + (0.2 * rng.normal(size=n) if j % 2 else 0)
    frame = pd.DataFrame(cols)
    frame["y"] = frame.iloc[:, :6].sum(axis=1) + rng.normal(size=n)
    return frame


@pytest.fixture(scope="module")
def wide_session():
    frame = _frame()
    s = Session.from_table(table_from_frame(frame), Roles(target="y", predictors=tuple(frame.columns[:-1])),
                           FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(10)
    assert s.apply_results(s.compute_results())
    return s


@pytest.fixture
def win(qtbot, wide_session):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    w.adopt(copy.deepcopy(wide_session), path=None, fit=False)
    _idle(qtbot, w)
    yield w
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def _idle(qtbot, w):
    qtbot.waitUntil(lambda: not w.runner.busy() and (w.session.results is None or w.session.derived_ready),
                    timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()


def _show(qtbot, w, key):
    w.show_panel(key)
    panel = w.panel(key)
    _idle(qtbot, w)
    qtbot.waitUntil(lambda: not panel._deferred, timeout=TIMEOUT_MS)
    QtWidgets.QApplication.processEvents()
    return panel


def _names_apart(plot, side="left"):
    """The names an axis shows and the smallest distance between two of them, in pixels."""
    axis = plot.getPlotItem().getAxis(side) if hasattr(plot, "getPlotItem") else plot.getAxis(side)
    vb = axis.linkedView()
    ticks = axis._tickLevels[0]
    along = "y" if side in ("left", "right") else "x"
    pos = sorted(getattr(vb.mapViewToScene(QtCore.QPointF(v, v)), along)() for v, _ in ticks)
    return [t for _, t in ticks], (np.diff(pos).min() if len(pos) > 1 else np.inf)


@pytest.mark.parametrize("key, plot", [("coefficients", "plot"), ("stability", "plot"), ("ranges", "bars")])
def test_a_wide_tables_column_names_beside_bars_never_run_together(win, qtbot, key, plot):
    """300 columns in a plot a few hundred pixels tall: every k-th column is named, a line of text apart;
    zoomed in on 12 columns, each of them is named."""
    panel = _show(qtbot, win, key)
    plot = getattr(panel, plot)
    line = QtGui.QFontMetrics(QtWidgets.QApplication.font()).height()
    names, gap = _names_apart(plot)
    assert 4 <= len(names) < P
    assert gap >= line, (key, gap, line)
    cols = list(win.session.results.columns)
    assert set(names) <= set(cols)
    # A column with the longest bar (the widest band) is among those named.
    assert _heaviest(win.session, key, cols) & set(names), key
    # The bars stand at P-1 … 0, the first column on top; zoomed in on 12 of them, all 12 are named.
    plot.getPlotItem().getViewBox().setYRange(100, 111, padding=0)
    QtWidgets.QApplication.processEvents()
    names, gap = _names_apart(plot)
    assert [cols[P - 1 - y] for y in range(111, 99, -1)] == sorted(names, key=cols.index), (key, names)
    assert gap >= line


def _heaviest(session, key, cols):
    """The columns whose bar or band is longest in the panel ``key`` (the headless numbers it draws)."""
    from regbench.models.results import aligned

    if key == "coefficients":
        models = session.models().values()
        return _longest(cols, np.max([np.abs(aligned(m, cols, standardized=True)) for m in models], axis=0))
    if key == "stability":
        st = session.stability
        shares = [np.asarray(st.set_aside_freq, float)] + [np.asarray(v, float) for m, v in st.selected_freq.items()
                                                            if m not in ("ols", "logistic", "ridge")]
        return _longest(list(st.columns), np.max(shares, axis=0))
    rg = session.ranges()
    width = np.where(rg.bounded, np.asarray(rg.high_std) - np.asarray(rg.low_std), np.inf)
    return _longest(list(rg.columns), width)


def _longest(cols, values) -> set:
    return {c for c, v in zip(cols, values) if v == np.max(values)}


def test_the_correlation_map_of_300_columns_names_what_fits(win, qtbot):
    """Names down the side and numbers along the bottom a line (a number) apart, in the column order."""
    panel = _show(qtbot, win, "overlaps")
    fm = QtGui.QFontMetrics(QtWidgets.QApplication.font())
    side, gap = _names_apart(panel.corr_plot, "left")
    assert 4 <= len(side) < P and gap >= fm.height()
    cols = list(panel._corr_cols)
    for text in side:   # "name  number": the number is the column's place in the map
        name, number = text.rsplit("  ", 1)
        assert cols[int(number) - 1].startswith(name.rstrip("…"))
    bottom, gap = _names_apart(panel.corr_plot, "bottom")
    assert 4 <= len(bottom) < P and gap >= fm.horizontalAdvance(str(P))


def test_condition_indices_of_a_wide_table_fill_their_tab_from_one_array(win, qtbot):
    """The tab behind the map is filled a turn later (or when brought forward): every condition index,
    worst first, with each term's share, as the headless diagnostics computed them."""
    panel = _show(qtbot, win, "overlaps")
    diag = win.session.results.diagnostics
    model = panel.ci_model
    assert model.rowCount() == len(diag.condition_indices)
    assert model.columnCount() == 1 + len(diag.terms)
    worst = int(np.argmax(diag.condition_indices))
    # The grid holds the very numbers: the copied text reads back as the float computed.
    assert float(model.raw_text(0, 0)) == float(diag.condition_indices[worst])
    j = model.columnCount() - 1
    assert float(model.raw_text(0, j)) == float(np.asarray(diag.variance_proportions)[worst, j - 1])
    assert model.data(model.index(0, 0), QtCore.Qt.DisplayRole) not in (None, "")


def test_ranges_draw_every_band_of_one_kind_as_one_item(win, qtbot):
    """300 bands (sign settled, sign open, no bound) as at most three items, each band where the headless
    ranges put it."""
    panel = _show(qtbot, win, "ranges")
    rg = win.session.ranges()
    bars = [i for i in panel.bars.getPlotItem().items if isinstance(i, pg.BarGraphItem)]
    assert 1 <= len(bars) <= 3
    drawn = sum(len(np.atleast_1d(b.opts["y"])) for b in bars)
    assert drawn == P == len(rg.columns)
    # Each band spans the lowest to the highest standardized coefficient the headless ranges give its column.
    bounded, checked = np.asarray(rg.bounded, bool), 0
    for b in bars:
        ys = np.atleast_1d(b.opts["y"])
        for x0, w, y in zip(np.broadcast_to(b.opts["x0"], ys.shape), np.broadcast_to(b.opts["width"], ys.shape), ys):
            j = P - 1 - int(y)
            if bounded[j]:
                assert x0 == rg.low_std[j] and np.isclose(x0 + w, rg.high_std[j], rtol=1e-12, atol=1e-12)
                checked += 1
    assert checked == int(bounded.sum()) > 0


def test_a_wide_penalty_figure_draws_its_paths_as_hairlines_and_keeps_the_look_below(qtbot):
    """Beyond MANY_PATHS paths every path is a hairline (the highlighted one stays bold); a figure of 12
    paths keeps its 1.5-pixel lines; each path's points are the laid-out curve."""
    rng = np.random.default_rng(3)
    alphas = np.logspace(1, -3, 40)
    for p, want in ((12, 1.5), (MANY_PATHS + 1, HAIRLINE)):
        cols = [f"c{j:03d}" for j in range(p)]
        coef = np.outer(1 - np.exp(-1 / alphas), rng.normal(size=p))
        fig = build_figure(FigureData(alphas=alphas, coef=coef, columns=cols, alpha=0.1), 1000, 560)
        curves = [x for x in fig.prims if x.role.startswith("curve:")]
        assert len(curves) == p and {c.width for c in curves} == {want}
        for c in curves[:3]:
            xs, ys = fig.curves[c.role[len("curve:"):]]
            assert c.pts == tuple(zip(xs.tolist(), ys.tolist()))
        fig = build_figure(FigureData(alphas=alphas, coef=coef, columns=cols, alpha=0.1, highlight="c005"), 1000, 560)
        widths = {x.role: x.width for x in fig.prims if x.role.startswith("curve:")}
        assert widths.pop("curve:c005") == 2.8 and set(widths.values()) == {1.1 if p == 12 else HAIRLINE}


def test_a_polyline_painted_from_its_array_equals_one_painted_point_by_point(qtbot):
    """The window fills a long polyline through a numpy view of its memory: the pixels equal those of the
    same polyline built point by point."""
    from regbench.gui.penaltyfigure import polygon

    xs = np.linspace(5, 395, 120)
    ys = 100 + 60 * np.sin(xs / 30)
    pts = Points(np.column_stack((xs, ys)))
    images = []
    for poly in (polygon(pts), QtGui.QPolygonF([QtCore.QPointF(x, y) for x, y in zip(xs, ys)])):
        img = QtGui.QImage(400, 200, QtGui.QImage.Format_ARGB32)
        img.fill(QtGui.QColor("#ffffff"))
        painter = QtGui.QPainter(img)
        painter.setRenderHint(QtGui.QPainter.Antialiasing, True)
        painter.setPen(QtGui.QPen(QtGui.QColor("#336699"), 1.0))
        painter.drawPolyline(poly)
        painter.end()
        images.append(img)
    assert images[0] == images[1]
    assert images[0].pixelColor(200, int(round(100 + 60 * np.sin(200 / 30)))) != QtGui.QColor("#ffffff")


def test_a_sentence_listing_every_column_is_cut_at_a_word_with_the_whole_in_its_tooltip(win, qtbot):
    """A result saved by an older engine may list a thousand columns in one sentence: the panel shows the
    start (cut at a word, ending in "…") and keeps the whole text in the tooltip; short ones are untouched."""
    from regbench.gui.panels.base import SENTENCE_CHARS

    panel = win.panel("coefficients")
    long = "Across the overlapping columns " + ", ".join(f"s{j:03d}" for j in range(1000)) + ": all kept."
    panel.set_sentences([long])
    shown = panel.sentences.text()
    assert len(shown) <= SENTENCE_CHARS + 2 and shown.endswith(" …")
    assert long.startswith(shown[:-2]) and long[len(shown) - 2] in " ,"   # cut between two names
    assert panel.sentences.toolTip() == long
    panel.set_sentences(["OLS uses all 300 columns."])
    assert panel.sentences.text() == "OLS uses all 300 columns." and panel.sentences.toolTip() == ""

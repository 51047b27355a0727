"""The window on a table beyond memory: the "Reading the rows" settings and the streamed open (pytest-qt, offscreen).

Source for the numbers: the streamed route of this package, which tests/test_stream.py and
tests/test_session_batches.py check against the in-memory route to 1e-9.
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

from regbench.gui.rowsettings import HEAD_ROWS  # noqa: E402
from regbench.models.spec import RowSource  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)


def make_window(qtbot):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    return w


def wait_idle(qtbot, w, timeout=120_000):
    qtbot.waitUntil(lambda: not w.runner.busy(), timeout=timeout)
    QtWidgets.QApplication.processEvents()


def test_the_settings_dialog_checks_what_it_is_given(qtbot):
    from regbench.gui.rowsettings import RowSettingsDialog

    d = RowSettingsDialog(RowSource(memory_budget=5 * 10**8, cluster="local"))
    qtbot.addWidget(d)
    assert d.memory.text() == "500MB" and d.where.currentText() == "a local cluster"
    assert not d.address.isEnabled()
    d.where.setCurrentIndex(2)
    assert d.address.isEnabled()
    d.address.setText("tcp://127.0.0.1:8786")
    d.memory.setText("2GB")
    assert d.values() == RowSource(memory_budget=2 * 10**9, cluster="tcp://127.0.0.1:8786")
    # A bad address or size: one line under the fields, and the dialog stays open.
    d.address.setText("somewhere")
    d.accept()
    assert "Where to run: 'somewhere' is not 'local' or a scheduler address" in d.problem.text()
    assert d.result() != QtWidgets.QDialog.DialogCode.Accepted
    d.address.setText("tcp://127.0.0.1:8786")
    d.memory.setText("plenty")
    d.accept()
    assert "Memory for rows: 'plenty' is not a size" in d.problem.text()
    d.memory.setText("")
    d.where.setCurrentIndex(0)
    d.accept()
    assert d.chosen == RowSource()


def test_the_window_reads_a_table_beyond_the_budget_in_batches_and_says_so(qtbot, tmp_path):
    rng = np.random.default_rng(4)
    n = 24_000
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) + j for j in range(6)})
    f["site"] = [f"s{v:02d}" for v in rng.integers(0, 9, n)]
    f["y"] = f["x0"] - 0.5 * f["x1"] + rng.normal(size=n)
    f.insert(0, "row_id", np.arange(n))   # counts the rows: left out of the inputs, listed all the same
    path = tmp_path / "big.parquet"
    f.to_parquet(path, index=False, row_group_size=5000)
    w = make_window(qtbot)
    w.set_row_source(RowSource(memory_budget=10**6))
    assert "memory for rows 1 MB" in w.status_label.text()
    w.open_path(str(path), confirmed=True)
    wait_idle(qtbot, w)
    s = w.session
    # Opening reads only the first rows, every column, and starts nothing long: the roles are drafted
    # from them (the window's rule) and wait for Fit, as for a table in memory.
    assert s is not None and s.source == str(path.resolve()) and s.awaiting_pass and s.results is None
    assert s.streamed is None and not s.sampled and s.table.n_rows == HEAD_ROWS
    assert w.draft.names == list(f.columns) and w.draft.target == "y"
    assert "press Fit to read every row in batches" in w.status_label.text()
    w.refresh_everything()
    assert f"The first {HEAD_ROWS:,} rows of big.parquet are shown" in w.panel("data").sentences.text()
    with qtbot.waitSignal(w.results_applied, timeout=120_000):
        w.fit_pressed()
    # The pass ran on the worker: every row fitted, a seeded sample of 20,000 at hand, and said so.
    assert s is w.session and s.sampled and not s.awaiting_pass
    assert s.streamed.rows_used == n and s.design.n == 20_000 and s.rows == RowSource(memory_budget=10**6)
    assert s.roles.target == "y" and "site" in s.design.sources  # a text input, coded as in memory
    assert "row_id" not in s.table.names and "row_id" not in s.design.sources
    # The sample holds only the fit's columns; the column list still lists every column of the table,
    # after a change of roles too.
    assert w.draft.names == list(f.columns) and not w.draft.uses("row_id")
    w.draft.set_ticked("x5", False)
    with qtbot.waitSignal(w.results_applied, timeout=120_000):
        w.fit_pressed()
    assert "x5" not in s.roles.predictors and w.draft.names == list(f.columns)
    data = w.panel("data")
    w.show_panel("data")
    w.refresh_everything()
    said = data.sentences.text()
    assert "seeded sample of 20,000" in said and "every fitted number uses all 24,000" in said
    assert "Stability is not computed" in said and "Held-out predictions are not shown" not in said
    assert w.panel("data").frame_model.rowCount() == 20_000
    # Each sampled row is numbered as in the file (line below the header), and its cells are that line's.
    fm = data.frame_model
    for r in (0, 1, 19_999):
        line = int(fm.headerData(r, QtCore.Qt.Vertical))
        assert line == s.table.line_numbers[r]
        j = list(s.table.frame.columns).index("x0")
        assert float(fm.raw_text(r, j)) == f["x0"].iloc[line - 1]
    # The comparisons follow on the worker; the project keeps the budget and refers to the file.
    wait_idle(qtbot, w)
    assert s.derived_ready and set(s.heldout()) == set(s.models())  # from every row's fold statistics
    out = tmp_path / "p.regbench"
    assert w.save_to(str(out))
    from regbench.project.store import session_document

    assert session_document(s)["table_file"]["path"] == str(path.resolve())
    # Reopening the project reads the file again on the worker and says so the same way.
    w.open_path(str(out), confirmed=True)
    wait_idle(qtbot, w)
    assert w.errors == [] and w.session is not s
    assert w.session.source == str(path.resolve()) and w.session.sampled
    assert w.session.rows == RowSource(memory_budget=10**6)
    assert w.draft.names == list(f.columns)   # every column again, from the file's first rows
    w.refresh_everything()
    assert "seeded sample of 20,000" in w.panel("data").sentences.text()
    w.dirty = False
    w.runner.cancel_all()
    w.close()


def test_the_row_settings_go_into_the_open_project(qtbot, tmp_path):
    from regbench.data.reader import table_from_frame
    from regbench.data import Roles
    from regbench.session import Session

    rng = np.random.default_rng(0)
    t = table_from_frame(pd.DataFrame({"a": rng.normal(size=40), "b": rng.normal(size=40), "y": rng.normal(size=40)}))
    w = make_window(qtbot)
    w.adopt(Session.from_table(t, Roles(target="y")), fit=False)
    w.set_row_source(RowSource(memory_budget=2 * 10**9, cluster="local"))
    assert w.session.rows == RowSource(2 * 10**9, "local") and w.session.dirty
    w.undo()
    assert w.session.rows == RowSource()
    w.dirty = False
    w.close()


def test_the_readme_names_the_windows_own_words_for_the_row_settings(qtbot):
    import pathlib

    from regbench.gui.rowsettings import WHERE

    w = make_window(qtbot)
    readme = (pathlib.Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Tables beyond memory and clusters", 1)[1].split("\n## ", 1)[0]
    assert f"Edit ▸ {w.act_rows.text()}" in section
    assert all(words.rstrip("…") in section for words, _ in WHERE)
    w.close()


def test_reading_in_batches_can_be_cancelled_and_changes_nothing(qtbot, tmp_path):
    rng = np.random.default_rng(5)
    n = 30_000
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) for j in range(5)})
    f["y"] = f["x0"] + rng.normal(size=n)
    path = tmp_path / "big.parquet"
    f.to_parquet(path, index=False, row_group_size=5000)
    w = make_window(qtbot)
    w.set_row_source(RowSource(memory_budget=10**6))
    w.open_path(str(path), confirmed=True)
    wait_idle(qtbot, w)
    s = w.session
    assert s is not None and s.awaiting_pass
    # Fit, then cancel at once: the pass checks between its steps and stops there (it takes far longer
    # than this call); the session keeps its first rows and waits for Fit again.
    w.fit_pressed()
    w.cancel_work()
    wait_idle(qtbot, w)
    assert w.session is s and s.awaiting_pass and s.results is None and w.errors == []
    assert "cancelled; nothing was changed." in w.status_label.text()
    w.dirty = False
    w.close()


def test_installing_the_pass_draws_the_data_panel_once_and_its_cells_in_a_later_turn(qtbot, tmp_path, monkeypatch):
    """The turn that installs a pass's results draws the data panel's sentences only; its 20,000 sampled
    cells fill in a later turn, once, and the comparisons arriving afterwards do not redraw it (each
    redraw lays out and paints the panel again on the GUI thread)."""
    from regbench.gui.panels.data import DataPanel

    rng = np.random.default_rng(6)
    n = 24_000
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) for j in range(4)})
    f["y"] = f["x0"] + rng.normal(size=n)
    path = tmp_path / "big.parquet"
    f.to_parquet(path, index=False, row_group_size=6000)
    w = make_window(qtbot)
    w.set_row_source(RowSource(memory_budget=10**6))
    w.open_path(str(path), confirmed=True)
    wait_idle(qtbot, w)
    qtbot.waitUntil(lambda: not w.panel("data")._deferred, timeout=10_000)
    data = w.panel("data")
    assert data.frame_model.rowCount() == HEAD_ROWS
    calls = []
    for name in ("refresh", "_fill_cells"):
        real = getattr(DataPanel, name)
        monkeypatch.setattr(DataPanel, name, lambda self, *a, real=real, name=name: (calls.append(name), real(self, *a)))
    at_install = []
    w.results_applied.connect(lambda: at_install.append((list(calls), data.frame_model.rowCount())))
    w.fit_pressed()
    qtbot.waitUntil(lambda: bool(at_install), timeout=120_000)
    wait_idle(qtbot, w)
    qtbot.waitUntil(lambda: w.session.derived_ready and not data._deferred and not w.runner.busy(), timeout=120_000)
    QtWidgets.QApplication.processEvents()
    assert at_install[0] == (["refresh"], HEAD_ROWS)       # sentences now, the cells not yet
    assert calls == ["refresh", "_fill_cells"]              # each once, the comparisons redrew nothing here
    assert data.frame_model.rowCount() == 20_000 and w.session.sampled
    w.dirty = False
    w.close()


def test_a_table_read_in_batches_saved_before_its_first_fit_reopens_with_every_row(qtbot, tmp_path):
    rng = np.random.default_rng(7)
    n = 24_000
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) for j in range(3)})
    f["note"] = [f"n{v}" for v in range(n)]   # names every row: listed, left out of the inputs
    f["y"] = f["x0"] + rng.normal(size=n)
    path = tmp_path / "big.parquet"
    f.to_parquet(path, index=False, row_group_size=6000)
    w = make_window(qtbot)
    w.set_row_source(RowSource(memory_budget=10**6))
    w.open_path(str(path), confirmed=True)
    wait_idle(qtbot, w)
    assert w.session.awaiting_pass
    out = tmp_path / "p.regbench"
    assert w.save_to(str(out)) and w.errors == []
    from regbench.project.store import session_document

    doc = session_document(w.session)["table_file"]
    assert doc["path"] == str(path.resolve()) and "rows_used" not in doc   # no pass has run yet
    w.open_path(str(out), confirmed=True)
    wait_idle(qtbot, w)
    s = w.session
    assert w.errors == [] and s.sampled and s.streamed.rows_used == n and not s.awaiting_pass
    assert w.draft.names == list(f.columns) and not w.draft.uses("note")
    w.dirty = False
    w.close()

"""Details of the window: the status line, the coefficient table's width, the snapshot command's words
(pytest-qt, offscreen).

Checked against Qt's own measures (QFontMetrics, the header's section sizes), against the project
layer's one line on saved results this version does not use (regbench/project/FORMAT.md: stale,
never refused, one line saying why, as ``regbench report`` prints it), on scikit-learn's diabetes
table (``sklearn.datasets.load_diabetes(as_frame=True)``, written to CSV).
"""

from __future__ import annotations

import hashlib
import json
import pathlib
import zipfile

import pytest

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtWidgets  # noqa: E402

pytestmark = pytest.mark.gui
QtCore.QStandardPaths.setTestModeEnabled(True)
ROOT = pathlib.Path(__file__).resolve().parents[1]


def test_a_long_status_ends_in_an_ellipsis_and_keeps_the_whole_text_as_its_tooltip(qtbot):
    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    qtbot.addWidget(w)
    w.resize(1100, 700)
    w.show()
    long = ("Explaining yield_kg_m2 (the last column of numbers or of two values that is not an identifier); "
            "change it in the sentence above, tick the columns to use, then press Fit. ") * 2
    w.set_status(long)
    QtWidgets.QApplication.processEvents()
    label = w.status_label
    assert label.text() == long and label.toolTip() == long
    shown = label.shown_text()
    assert shown.endswith("…") and len(shown) < len(long)
    assert long.startswith(shown[:-1])
    assert label.fontMetrics().horizontalAdvance(shown) <= label.contentsRect().width()
    assert w.width() == 1100, "a long message does not widen the window"
    # Wider, more of it shows; a short message shows whole.
    w.resize(1600, 700)
    QtWidgets.QApplication.processEvents()
    assert len(label.shown_text()) > len(shown)
    w.set_status("Fit done.")
    assert label.shown_text() == "Fit done." and label.toolTip() == "Fit done."
    w.close()


def test_snapshot_says_in_one_line_that_saved_results_are_fitted_again(tmp_path, capsys):
    from regbench.cli import main
    from regbench.data import Roles
    from regbench.models.results import FitSettings
    from regbench.project import save_project
    from regbench.session import Session

    s = Session.from_table_file(ROOT / "sample_projects" / "greenhouse.csv",
                                Roles(target="yield_kg_m2", predictors=("day_temp_c", "night_temp_c", "co2_ppm"),
                                      groups="glasshouse"),
                                FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(0)
    s.compute()
    path = tmp_path / "p.regbench"
    save_project(s, path)
    # Saved results of another engine version: the project opens and fits again, with one line.
    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    doc = json.loads(members["results.json"])
    doc["engine_version"] = -1
    members["results.json"] = json.dumps(doc).encode()
    manifest = json.loads(members["manifest.json"])
    manifest["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                           for n, b in members.items() if n != "manifest.json"]
    members["manifest.json"] = json.dumps(manifest).encode()
    stale = tmp_path / "stale.regbench"
    with zipfile.ZipFile(stale, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    capsys.readouterr()
    assert main(["report", str(stale), "-o", str(tmp_path / "r.html")]) == 0
    said_by_report = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip() and "\r" not in ln]
    assert main(["snapshot", str(stale), "--out", str(tmp_path / "shots")]) == 0
    out = capsys.readouterr()
    said = [ln for ln in out.err.splitlines() if ln.strip() and "\r" not in ln]
    assert len(said) == 1 and said[0].startswith("regbench snapshot: stale.regbench: the saved results were not used")
    assert said[0].replace("regbench snapshot: ", "", 1) == said_by_report[0].replace("regbench report: ", "", 1)
    assert len(out.out.split()) >= 8 and all(pathlib.Path(p).is_file() for p in out.out.split())


def test_the_coefficient_table_sizes_its_columns_to_their_numbers_and_leaves_no_wide_empty_column(qtbot, tmp_path):
    from sklearn.datasets import load_diabetes

    from regbench.gui.window import MainWindow

    path = tmp_path / "diabetes.csv"
    load_diabetes(as_frame=True).frame.to_csv(path, index=False)
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    with qtbot.waitSignal(w.session_changed, timeout=120_000):
        w.open_path(str(path), confirmed=True)
    with qtbot.waitSignal(w.results_applied, timeout=120_000):
        w.fit_pressed()
    qtbot.waitUntil(lambda: not w.runner.busy() and w.session.derived_ready, timeout=120_000)
    w.show_panel("coefficients")
    panel = w.panel("coefficients")
    w._refresh_panel(panel)
    panel.flush()
    QtWidgets.QApplication.processEvents()
    view, header = panel.view, panel.view.horizontalHeader()
    assert panel.model.headers[-1] == "Elastic net"
    natural = view.content_widths()
    sizes = [header.sectionSize(i) for i in range(header.count())]
    # Every column as wide as its widest number or header (Qt's measure), the last one no wider.
    assert all(s >= n - 1 for s, n in zip(sizes, natural)), (sizes, natural)
    assert sizes[-1] <= natural[-1] + 1, (sizes, natural)
    # No wide empty stretch beside the last column: the plot beside the table takes that room.
    spare = view.viewport().width() - sum(sizes)
    assert 0 <= spare <= view.verticalScrollBar().sizeHint().width() + 4, spare
    assert panel.plot.width() > view.width()
    w.dirty = False
    w.close()


def test_a_table_narrower_than_its_view_shares_the_spare_room_among_its_columns(qtbot):
    """The stress ranking's case: four short columns of numbers in a wide view. Each column gets its
    own width plus the same share of the room left over, so the last one stands no further from its
    header than the others (Qt's stretch-last would give it all the spare room)."""
    from regbench.gui.tables import GridModel, make_view

    model = GridModel()
    view = make_view(model)
    qtbot.addWidget(view)
    view.resize(900, 300)
    view.show()
    model.set_rows([["brix", 0.1346, 0.0546, 0.0841], ["variety", 0.0455, 0.0138, 0.0]],
                   ["Column", "Logistic", "Ridge", "Elastic net"])
    view.resizeColumnsToContents()
    QtWidgets.QApplication.processEvents()
    header = view.horizontalHeader()
    natural = view.content_widths()
    extra = [header.sectionSize(i) - natural[i] for i in range(header.count())]
    assert min(extra) >= 0 and max(extra) - min(extra) <= 1, extra
    # The columns fill the view: nothing is left over beside the last one.
    assert abs(sum(header.sectionSize(i) for i in range(header.count())) - (view.viewport().width() - 2)) <= 1

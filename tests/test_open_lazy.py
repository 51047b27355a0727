"""Opening a saved project reads its table and builds its design; the per-fold cross-products the
engine continues from are gathered only when a refit first needs them, and then equal a fresh fit's."""

from __future__ import annotations

import threading

import numpy as np
import pytest

from regbench.models.engine import model_at
from regbench.project import load_project, save_project


@pytest.fixture(scope="module")
def saved(_greenhouse_fitted_once, tmp_path_factory):
    path = tmp_path_factory.mktemp("lazy") / "greenhouse.regbench"
    save_project(_greenhouse_fitted_once, path)
    return path


@pytest.fixture
def passes(monkeypatch):
    """Each per-fold pass the project layer runs, as (on the main thread?)."""
    import regbench.project.store as store_mod

    seen = []
    real = store_mod.per_fold

    def counting(*a, **k):
        seen.append(threading.current_thread() is threading.main_thread())
        return real(*a, **k)

    monkeypatch.setattr(store_mod, "per_fold", counting)
    return seen


def _same_stats(a, b):
    for name in ("sx", "xx", "xy", "shift_x"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert (a.W, a.n, a.sy, a.yy) == (b.W, b.n, b.sy, b.yy)


@pytest.mark.parametrize("compute", [False, True])
def test_opening_and_reporting_need_no_pass_over_the_rows(saved, passes, compute, tmp_path):
    from regbench.report.html import report_html
    from regbench.sentences import fit_summary_text

    s = load_project(saved, compute=compute)
    assert s.cache_status == "used" and s.results is not None
    # What `regbench report` and `regbench open` show comes from the cache: still no pass.
    html = report_html(s)
    text = fit_summary_text(s.design, s.results)
    assert passes == [] and s.results.gram is None
    assert "lasso" in text.lower() and "<html" in html.lower()


def test_a_refit_after_opening_equals_an_eager_open_and_a_fresh_fit(saved, passes, _greenhouse_fitted_once):
    # Source of truth: the session fitted in this run (fit_all's own per-fold accumulation), and the
    # open as it was before (the pass run at once, here forced right after opening).
    fresh = _greenhouse_fitted_once
    lazy = load_project(saved, compute=False)
    eager = load_project(saved, compute=False)
    eager.results.whole_stats()
    assert passes == [True] and lazy.results.gram is None
    for name, alpha in (("elastic_net", 0.01), ("lasso", 0.002), ("ridge", 3.0)):
        want = model_at(fresh.design, fresh.results, name, alpha)
        for s in (lazy, eager):
            got = model_at(s.design, s.results, name, alpha)
            assert got.intercept == want.intercept and np.array_equal(got.coef, want.coef), name
    # The lazy open gathered the statistics once, on the first refit, and they are the fresh fit's bit for bit.
    assert passes == [True, True]
    _same_stats(lazy.results.gram, fresh.results.gram)
    _same_stats(eager.results.gram, fresh.results.gram)
    # The whole update a new α brings (models, comparisons, stress) equals the fresh session's.
    a, b = lazy.compute_for_alpha("lasso", 0.003), fresh.compute_for_alpha("lasso", 0.003)
    assert np.array_equal(a.models["lasso"].coef, b.models["lasso"].coef)
    assert passes == [True, True]


def test_results_equality_and_the_project_file_ignore_the_lazy_statistics(saved, tmp_path):
    lazy = load_project(saved, compute=False)
    eager = load_project(saved, compute=False)
    eager.results.whole_stats()
    assert lazy.results == eager.results
    again = tmp_path / "again.regbench"
    save_project(lazy, again)
    assert lazy.results.gram is None  # saving does not gather them either
    assert load_project(again, compute=False).results == eager.results


@pytest.mark.gui
def test_the_window_opens_a_project_without_the_pass_and_refits_on_the_worker(saved, passes, qtbot):
    pytest.importorskip("pytestqt")
    from PySide6 import QtWidgets

    from regbench.gui.window import MainWindow

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    with qtbot.waitSignal(w.session_changed, timeout=120_000):
        w.open_path(str(saved))
    qtbot.waitUntil(lambda: not w.runner.busy(), timeout=120_000)
    for panel in w.panels:
        w.show_panel(panel.key)
        qtbot.waitUntil(lambda: not panel._deferred and not w.runner.busy(), timeout=60_000)
        QtWidgets.QApplication.processEvents()
    # Every panel drew from the cache: the per-fold pass has not run, on any thread.
    assert passes == [] and w.session.results.gram is None
    w.set_alpha("lasso", 0.003)
    qtbot.waitUntil(lambda: not w.runner.busy(), timeout=120_000)
    # The new α needed the pass: it ran once, on the worker, never on the GUI thread.
    assert passes == [False]
    assert w.session.chosen_alpha.get("lasso") == 0.003
    w.dirty = False
    w.runner.cancel_all()
    w.runner.wait(60_000)
    w.close()


def test_the_table_is_not_hashed_again_when_the_cache_names_its_bytes(saved, monkeypatch, tmp_path):
    # Source of truth: the fingerprint recomputed cell by cell from the opened table.
    import json
    import zipfile

    import regbench.session as session_mod

    real = session_mod.table_fingerprint
    hashed = []
    monkeypatch.setattr(session_mod, "table_fingerprint", lambda t: hashed.append(1) or real(t))
    s = load_project(saved, compute=False)
    assert s.cache_status == "used" and hashed == []
    assert s.table_hash == real(s.table)
    # A file whose cache does not name the table's bytes (as written before) hashes the table, and uses the cache.
    with zipfile.ZipFile(saved) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    doc = json.loads(members["results.json"])
    assert isinstance(doc.pop("table_sha256"), str)
    members["results.json"] = json.dumps(doc).encode()
    import hashlib

    m = json.loads(members["manifest.json"])
    for e in m["members"]:
        e["size"], e["sha256"] = len(members[e["name"]]), hashlib.sha256(members[e["name"]]).hexdigest()
    members["manifest.json"] = json.dumps(m).encode()
    older = tmp_path / "older.regbench"
    with zipfile.ZipFile(older, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    s2 = load_project(older, compute=False)
    assert hashed == [1] and s2.cache_status == "used" and s2.table_hash == s.table_hash


def test_the_stored_table_is_read_in_place_and_still_checked(saved, tmp_path):
    # Source of truth: Python's zipfile reading the same member (with its CRC check).
    import zipfile

    from regbench.errors import ProjectError
    from regbench.project.store import _Archive

    ar = _Archive(saved)
    try:
        view = ar.in_place("table.parquet")
        assert view is not None and bytes(view) == ar.raw("table.parquet")
        assert ar.in_place("results.json") is None  # compressed members go through zipfile
        del view
    finally:
        ar.close()
    # One byte of the table changed in the file, the manifest left as it was: refused by its SHA-256.
    data = bytearray(saved.read_bytes())
    with zipfile.ZipFile(saved) as zf:
        info = zf.getinfo("table.parquet")
        table = zf.read(info)
    at = bytes(data).find(table[1000:1100])
    assert at > 0
    data[at + 10] ^= 0xFF
    bad = tmp_path / "bad.regbench"
    bad.write_bytes(bytes(data))
    with pytest.raises(ProjectError, match="SHA-256"):
        load_project(bad, compute=False)

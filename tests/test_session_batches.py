"""A session on a table read in batches (or on a cluster) against the same session in memory.

Source: the in-memory session of this package (read_table, build_design, fit_all and the analyses),
which the other test files check against NIST StRD, statsmodels and scikit-learn. On a small table with
a tiny memory budget every usable row is in the streamed route's sample, so every number — fits,
held-out predictions, agreement, structure, stress, ranges and stability — must equal the in-memory
session's to 1e-9.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from regbench.analysis.stress import StressConfig
from regbench.data import Roles
from regbench.data.reader import read_table
from regbench.errors import DataError
from regbench.models.results import FitSettings
from regbench.models.spec import RowSource
from regbench.session import Session
from test_stream import _frame

TOL = 1e-9
#: Internal factors fixed only up to the signs of their rows (R and -R factor the same cross-products).
SIGN_FREE = {"r_factor"}
#: The solver's certificates (duality gaps of size round-off, iteration counts), not results.
ROUND_OFF = {"convergence"}


def _close(a, b, where="") -> None:
    """Numbers equal to TOL (relative, or absolute on the scale of the values), recursively through results."""
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for f in dataclasses.fields(a):
            if f.compare and f.name not in SIGN_FREE | ROUND_OFF:
                _close(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, dict):
        assert set(a) == set(b), where
        for k in a:
            _close(a[k], b[k], f"{where}[{k}]")
    elif isinstance(a, (list, tuple)) and not isinstance(a, str):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{where}[{i}]")
    elif isinstance(a, np.ndarray) and a.dtype.kind in "fc":
        assert a.shape == b.shape, where
        scale = np.nanmax(np.abs(a[np.isfinite(a)])) if np.isfinite(a).any() else 1.0
        np.testing.assert_allclose(b, a, rtol=TOL, atol=TOL * max(scale, 1e-300), equal_nan=True, err_msg=where)
    elif isinstance(a, np.ndarray):
        np.testing.assert_array_equal(a, b, err_msg=where)
    elif isinstance(a, float) or isinstance(a, np.floating):
        assert (math.isnan(a) and math.isnan(b)) or b == pytest.approx(a, rel=TOL, abs=TOL), where
    elif isinstance(a, str):
        pass  # sentences round their numbers; the numbers themselves are compared
    else:
        assert a == b, where


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The same grouped, weighted table in memory and read in batches under a 1 MB budget."""
    f = _frame(n=1500, seed=1)
    path = tmp_path_factory.mktemp("rows") / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    out = []
    for session in (Session(read_table(path), roles, settings),
                    Session.from_batches(path, roles, settings, RowSource(memory_budget=10**6))):
        session.add_stress(StressConfig("x0", "rescale", 1.8))
        session.add_stress(StressConfig("x1", "shuffle", None, seed=2))
        session.set_bootstrap(20)
        session.compute()
        out.append(session)
    return path, out[0], out[1]


def test_a_session_read_in_batches_equals_the_session_in_memory(pair):
    _, mem, st = pair
    assert st.source is not None and mem.source is None
    assert st.streamed.route == "streamed" and not st.sampled
    assert st.design.n == mem.design.n and st.table.n_rows == st.design.n
    np.testing.assert_array_equal(st.design.row_numbers, mem.design.row_numbers)
    np.testing.assert_array_equal(st.table.row_numbers, mem.design.row_numbers)  # the file's own row numbers
    _close(mem.results, st.results, "results")
    for key in ("models", "heldout", "agreement", "structure", "stress", "sweeps", "ranges"):
        _close(mem.derived_results()[key], st.derived_results()[key], key)
    _close(mem.fit_quality(), st.fit_quality(), "fit_quality")
    assert st.stability is not None
    _close(mem.stability, st.stability, "stability")
    # Every row is at hand: the one sentence says so and nothing is withheld.
    assert "every one of its 1,495 usable rows" in st.row_sample_note and st.sample_limits() == {}
    assert mem.row_sample_note is None


def test_a_chosen_alpha_on_a_session_read_in_batches_matches_memory(pair):
    _, mem, st = pair
    for s in (mem, st):
        s.apply_alpha_update(s.compute_for_alpha("lasso", 0.05))
    _close(mem.models()["lasso"], st.models()["lasso"], "lasso at 0.05")
    _close(mem.agreement(), st.agreement(), "agreement at 0.05")


def test_a_sampled_session_says_so_and_withholds_what_needs_every_row(tmp_path):
    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", predictors=tuple(f"x{j}" for j in range(8)))
    settings = FitSettings(folds=4, seed=3)
    from regbench.data.stream import stream_fit

    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    st = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    st.set_bootstrap(20)
    st.compute()
    mem = Session(read_table(path), roles, settings)
    mem.compute(bootstrap=0)
    # Fitted numbers use every row (source: the in-memory fit).
    _close(mem.results.ols, st.results.ols, "ols")
    assert st.sampled and st.design.n == 300 and st.table.n_rows == 300
    note = st.row_sample_note
    assert "all 1,495 usable rows" in note and "sample of 300" in note and "seed 3" in note
    # Held-out predictions of the sampled rows come from each fold's cross-products over every row, so
    # they equal the in-memory route's at those rows (source: the in-memory session).
    at = np.searchsorted(mem.design.row_numbers, st.design.row_numbers)
    assert set(st.heldout()) == set(mem.heldout())
    for name, pred in mem.heldout().items():
        np.testing.assert_allclose(st.heldout()[name], pred[at], rtol=TOL, atol=TOL * np.abs(pred).max())
    # Stability needs every group's statistics: withheld with one line, not computed on the sample.
    assert st.stability is None and set(st.sample_limits()) == {"stability"}
    # Row-level views use the sample: the stress figures cover its 300 rows.
    assert st.stress_results() == () and st.agreement() is not None
    # Ranges over near-best models come from the statistics of every row, so they equal memory's.
    _close(mem.ranges().low, st.ranges().low, "ranges.low")


def test_row_settings_are_declared_and_checked():
    # Source: the declaration in models/spec.py (one place for type, range, default and help).
    from regbench.models import spec

    declared = spec.specs(RowSource)
    assert declared["memory_budget"][0].flag == "--memory-budget" and declared["memory_budget"][1] is None
    assert declared["cluster"][0].flag == "--cluster" and declared["cluster"][1] is None
    with pytest.raises(DataError, match="setting 'cluster': 'my-cluster' is not 'local' or a scheduler"):
        RowSource(cluster="my-cluster").check(DataError)
    with pytest.raises(DataError, match="setting 'memory_budget': 10 is out of range"):
        RowSource(memory_budget=10).check(DataError)
    RowSource(memory_budget=5 * 10**8, cluster="tcp://127.0.0.1:8786").check(DataError)
    s = Session(read_table_small(), Roles(target="y"))
    s.set_rows({"memory_budget": 2 * 10**9, "cluster": "local"})
    assert s.rows == RowSource(2 * 10**9, "local") and s.dirty
    s.undo()
    assert s.rows == RowSource() and not s.dirty
    with pytest.raises(DataError, match="cluster"):
        s.set_rows({"cluster": "nowhere"})


def read_table_small():
    import pandas as pd

    from regbench.data.reader import table_from_frame

    rng = np.random.default_rng(0)
    return table_from_frame(pd.DataFrame({"a": rng.normal(size=30), "b": rng.normal(size=30),
                                          "y": rng.normal(size=30)}))


# -- the command line, the project file and the report --------------------------------------


@pytest.fixture()
def big(tmp_path):
    """A 3,000-row grouped table (about 1.6 MB in memory): beyond a 1 MB budget."""
    f = _frame(n=3000, seed=5, missing=False)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=500)
    return path


def test_new_on_a_table_beyond_the_budget_writes_a_project_that_reads_the_file_again(big, tmp_path, capsys):
    from regbench.cli import main
    from regbench.project import inspect_project, load_project
    from regbench.project.store import session_document

    out = tmp_path / "p.regbench"
    base = [str(big), "--target", "y", "--groups", "site", "--weights", "w", "--folds", "4", "--seed", "3"]
    assert main(["new", *base, "--memory-budget", "1MB", "--bootstrap", "10", "-o", str(out)]) == 0
    said = capsys.readouterr().out
    assert "3000 rows used" in said and "refers to" in said and "every one of its 3,000 usable rows" in said
    info = inspect_project(out)
    assert info["table_rows"] == 3000 and info["table_file"]["path"] == str(big.resolve())
    assert info["rows"] == {"memory_budget": 10**6, "cluster": None}
    from regbench.sentences import inspect_text

    assert f"rows from    {big.resolve()} (3000 usable rows; the table above is every one of them)" in inspect_text(info)
    s = load_project(out)
    assert s.source == str(big.resolve()) and s.rows == RowSource(memory_budget=10**6)
    assert s.cache_note is None and not s.dirty
    doc = session_document(s)
    assert doc["rows"] == {"memory_budget": 10**6, "cluster": None}
    assert doc["table_file"]["path"] == str(big.resolve()) and doc["table_file"]["rows_used"] == 3000
    # Source: the same project fitted in memory (no budget).
    mem_out = tmp_path / "m.regbench"
    assert main(["new", *base, "--bootstrap", "10", "-o", str(mem_out)]) == 0
    mem = load_project(mem_out)
    assert mem.source is None and mem.rows == RowSource()
    _close(mem.results.ols, s.results.ols, "ols")
    _close(mem.stability, s.stability, "stability")
    # A changed file is read again and said so in one line.
    import os

    os.utime(big, ns=(1, 1))
    again = load_project(out)
    assert "changed since the project was saved" in again.cache_note
    # A missing file: one line naming it.
    big.rename(tmp_path / "gone.parquet")
    from regbench.errors import ProjectError

    with pytest.raises(ProjectError, match="reads its rows from .*t.parquet, which is not there"):
        load_project(out)


def test_project_keeps_the_row_settings_and_older_projects_open_unchanged(tmp_path):
    from regbench.project import load_project, save_project
    from regbench.project.store import session_document

    s = Session(read_table_small(), Roles(target="y"), FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(0)
    assert "rows" not in session_document(s) and "table_file" not in session_document(s)  # as older projects
    save_project(s, tmp_path / "a.regbench")
    assert load_project(tmp_path / "a.regbench", compute=False).rows == RowSource()
    s.set_rows(RowSource(memory_budget=5 * 10**8, cluster="tcp://127.0.0.1:8786"))
    save_project(s, tmp_path / "b.regbench")
    back = load_project(tmp_path / "b.regbench", compute=False)
    assert back.rows == RowSource(5 * 10**8, "tcp://127.0.0.1:8786") and back.source is None


def test_a_damaged_row_setting_in_a_project_is_one_line(tmp_path):
    import json
    import zipfile

    from regbench.errors import ProjectError
    from regbench.project import load_project, save_project

    s = Session(read_table_small(), Roles(target="y"), FitSettings(folds=3, n_penalties=10))
    s.set_rows(RowSource(memory_budget=10**9))
    save_project(s, tmp_path / "a.regbench")
    # Rewrite session.json with a cluster address that is not one (and the manifest's hash to match).
    import hashlib

    with zipfile.ZipFile(tmp_path / "a.regbench") as z:
        members = {n: z.read(n) for n in z.namelist()}
    doc = json.loads(members["session.json"])
    doc["rows"]["cluster"] = "somewhere"
    members["session.json"] = json.dumps(doc).encode()
    man = json.loads(members["manifest.json"])
    for m in man["members"]:
        if m["name"] == "session.json":
            m["size"], m["sha256"] = len(members["session.json"]), hashlib.sha256(members["session.json"]).hexdigest()
    members["manifest.json"] = json.dumps(man).encode()
    with zipfile.ZipFile(tmp_path / "b.regbench", "w") as z:
        for n, b in members.items():
            z.writestr(n, b)
    with pytest.raises(ProjectError, match=r"field rows.cluster is unusable: 'somewhere' is not 'local'"):
        load_project(tmp_path / "b.regbench")


def test_stress_on_a_table_beyond_the_budget_gives_every_row_figures_and_labels_the_sample(big, tmp_path, capsys):
    import json

    from regbench.cli import main

    base = [str(big), "--target", "y", "--groups", "site", "--weights", "w", "--folds", "4", "--seed", "3"]
    assert main(["stress", *base, "--column", "x0", "--kind", "rescale", "--strength", "1.8",
                 "--json", str(tmp_path / "m.json")]) == 0
    assert main(["stress", *base, "--column", "x0", "--kind", "rescale", "--strength", "1.8",
                 "--memory-budget", "1MB", "--json", str(tmp_path / "s.json")]) == 0
    m = json.loads((tmp_path / "m.json").read_text())
    s = json.loads((tmp_path / "s.json").read_text())
    assert s["route"] == "streamed" and s["row_sample"]["rows"] == 3000 and not s["row_sample"]["sampled"]
    # Source: the in-memory stress test on every row; the closed form over every row must equal it.
    for name, shift in m["models"].items():
        every = s["all_rows"]["x0"][name]
        for k in ("shift_rmse", "mean_shift", "error_clean", "error_damaged"):
            assert every[k] == pytest.approx(shift[k], rel=1e-9, abs=1e-12), (name, k)
        assert s["models"][name]["shift_rmse"] == pytest.approx(shift["shift_rmse"], rel=1e-9)
    # Text: the per-row figures are labelled, and the sentence on the rows closes it.
    assert main(["stress", *base, "--all-columns", "--kind", "shuffle", "--memory-budget", "1MB"]) == 0
    text = capsys.readouterr().out
    assert "Per-row figures below are on every row." in text and "every one of its 3,000 usable rows" in text
    assert "Over every row" not in text  # a shuffle has no closed form over rows not at hand


@pytest.mark.parametrize("kind,strength,fill", [("rescale", 1.8, None), ("rescale", 0.1, 3.0),
                                                ("constant", None, None), ("constant", None, 2.5)])
def test_closed_form_stress_equals_the_stress_test_on_every_row(pair, kind, strength, fill):
    from regbench.analysis.stress import run_stress
    from regbench.analysis.stress_stats import stress_from_stats

    _, mem, _ = pair
    cfg = StressConfig("x2", kind, strength, fill=fill)
    rows = run_stress(mem.design, mem.models(), cfg)  # source: the damage applied to every row
    stats = stress_from_stats(mem.results.gram, mem.design.columns, mem.models(), cfg)
    for name, shift in rows.shifts.items():
        for k in ("shift_rmse", "mean_shift", "error_clean", "error_damaged"):
            assert getattr(stats[name], k) == pytest.approx(getattr(shift, k), rel=1e-9, abs=1e-10), (name, k)
    with pytest.raises(DataError, match="random per row"):
        stress_from_stats(mem.results.gram, mem.design.columns, mem.models(), StressConfig("x2", "shuffle", None))


def test_the_report_says_which_rows_the_row_level_views_use(tmp_path):
    from regbench.report import render_report

    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", predictors=tuple(f"x{j}" for j in range(8)))
    from regbench.data.stream import stream_fit

    settings = FitSettings(folds=4, seed=3)
    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    s = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    s.set_bootstrap(10)
    s.compute()
    render_report(s, tmp_path / "r.html")
    html = (tmp_path / "r.html").read_text()
    assert 'id="row-sample"' in html and "a seeded sample of 300 of them (seed 3)" in html
    assert "1495 of the table" in html  # rows used over the whole table, not the sample
    assert "Stability is not computed" in html and "Held-out predictions are not shown" not in html
    assert "--memory-budget 1000000" in html and "memory for rows 1 MB" in html


@pytest.mark.timeout(240)
def test_the_readme_way_to_a_cluster_runs_a_session_on_a_local_cluster(tmp_path):
    """README's "Tables beyond memory and clusters": the flag and the window's setting it names, and a
    session whose cluster is 'local' (a Dask cluster started on this machine, loopback only)."""
    pytest.importorskip("dask.distributed")
    import pathlib
    import re

    readme = (pathlib.Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Tables beyond memory and clusters", 1)[1].split("\n## ", 1)[0]
    assert "--cluster local" in section and re.search(r"--cluster tcp://HOST:\d+", section)
    assert "Edit ▸ Reading the rows…" in section and "*Where to run*" in section and "*Memory for rows*" in section
    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    s = Session.from_batches(path, roles, settings, RowSource(cluster="local"))
    assert s.streamed.route == "cluster" and "on a Dask cluster" in s.row_sample_note
    mem = Session(read_table(path), roles, settings)
    mem.compute(bootstrap=0)
    _close(mem.results, s.results, "results")  # source: the in-memory session


def test_row_numbers_of_a_table_read_in_batches_are_the_files_own(tmp_path):
    """Row groups of 5,000 rows read in batches of 4,096 (a 1 MB budget): every sampled and excluded row
    keeps its row number in the file (source: the in-memory route's row numbers)."""
    from regbench.data.stream import stream_fit

    f = _frame(n=12_000, seed=2)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=5000)
    roles = Roles(target="y", weights="w", predictors=tuple(f"x{j}" for j in range(8)))
    s = stream_fit(path, roles, FitSettings(), memory_budget=10**6, sample_rows=20_000)
    mem = Session(read_table(path), roles, FitSettings())
    np.testing.assert_array_equal(s.design.row_numbers, mem.design.row_numbers)
    assert [e.row for e in s.design.excluded] == [e.row for e in mem.design.excluded]
    np.testing.assert_array_equal(s.design.X, mem.design.X)


def test_text_predictors_and_derived_columns_on_a_table_read_in_batches(tmp_path):
    """A text predictor and a derived column through the session, the project file and back
    (source: the same session in memory)."""
    from regbench.cli import main
    from regbench.data.derive import make_derived
    from regbench.project import load_project

    f = _frame(n=3000, seed=1, missing=False)  # about 1.6 MB in memory: beyond a 1 MB budget
    f["x0"] = f["x0"].abs() + 1.0
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    log = make_derived("log", ("x0",))
    roles = Roles(target="y", weights="w", predictors=("x0", "x1", "x2", "site", log.name), derived=(log,))
    settings = FitSettings(folds=4, seed=3)
    mem = Session(read_table(path), roles, settings)
    mem.compute(bootstrap=0)
    st = Session.from_batches(path, roles, settings, RowSource(memory_budget=10**6))
    st.compute(bootstrap=0)
    assert st.design.columns == mem.design.columns
    # Variance-decomposition proportions of near-equal eigenvalues (the indicators of levels of similar
    # size) rotate with round-off; the condition indices themselves are compared.
    SIGN_FREE.add("variance_proportions")
    try:
        _close(mem.results, st.results, "results")
    finally:
        SIGN_FREE.discard("variance_proportions")
    _close(mem.agreement(), st.agreement(), "agreement")
    # The row sample as a table holds the file's own columns: the text column's words, the source of the
    # derived column (re-derived from it like any table column).
    assert list(st.table.frame["site"][:5]) == list(f["site"][:5])
    assert st.columns_table.names[-1] == log.name
    out = tmp_path / "p.regbench"
    base = [str(path), "--target", "y", "--weights", "w", "--predictors", "x0,x1,x2,site", "--derive", "log:x0",
            "--folds", "4", "--seed", "3", "--bootstrap", "0"]
    assert main(["new", *base, "--memory-budget", "1MB", "-o", str(out)]) == 0
    back = load_project(out)
    assert back.source == str(path.resolve()) and back.design.columns == mem.design.columns
    _close(mem.results.ols, back.results.ols, "ols")


def test_new_roles_on_a_table_read_in_batches_take_effect_at_the_next_pass(pair):
    path, _, st = pair
    s = Session.from_batches(path, st.roles, st.settings, RowSource(memory_budget=10**6))
    with pytest.raises(DataError, match="no column 'nope'"):
        s.set_roles(Roles(target="nope", weights="w", groups="site"))
    roles = Roles(target="y", weights="w", groups="site", predictors=("x0", "x1", "x3"))
    s.set_roles(roles)
    assert s.results is None
    s.compute(bootstrap=0)
    assert s.design.columns == ("x0", "x1", "x3") and tuple(s.table.names) == ("y", "x0", "x1", "x3", "w", "site")
    ref = Session(read_table(path), roles, st.settings)
    ref.compute(bootstrap=0)
    _close(ref.results.ols, s.results.ols, "ols")  # source: the same roles in memory
    assert s.undo() and s.design.columns == st.design.columns and "x2" in s.table.names


def test_held_out_predictions_of_a_grouped_sample_come_from_every_rows_folds(tmp_path):
    """Grouped folds on the one-pass grouped route: the sample's held-out predictions equal the in-memory
    route's at the same rows (source: the in-memory session)."""
    from regbench.data.stream import stream_fit

    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    st = Session.from_streamed(path, stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300),
                               roles, settings)
    st.compute(bootstrap=0)
    mem = Session(read_table(path), roles, settings)
    mem.compute(bootstrap=0)
    assert st.sampled and st.sample_limits() == {}
    at = np.searchsorted(mem.design.row_numbers, st.design.row_numbers)
    for name, pred in mem.heldout().items():
        np.testing.assert_allclose(st.heldout()[name], pred[at], rtol=TOL, atol=TOL * np.abs(pred).max())

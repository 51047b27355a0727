"""What a table read in batches keeps of each group: grouped bootstrap stability and cluster-robust
standard errors from every group's cross-products, with no row at hand.

Sources: the in-memory route of this package (read_table, build_design, fit_all, bootstrap_stability
on the rows' group cross-products), which test_stability_groups.py checks against refits on the rows
and test_rank_rule.py against statsmodels' cluster-robust standard errors; statsmodels OLS with
``cov_type="cluster"`` directly on the NIST StRD Longley rows (statsmodels.datasets.longley). The
streamed route must give the same draws, the same selection frequencies (exactly) and the same
numbers to 1e-9.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
import pandas as pd
import pytest

from regbench.analysis.stability import bootstrap_stability
from regbench.data import Roles, build_design, read_table
from regbench.data.stream import stream_fit
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings
from regbench.models.spec import RowSource
from regbench.session import Session
from test_session_batches import _close
from test_stream import _frame
from test_stream_parity import _longley_frame

TOL = 1e-9
LONGLEY = ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR")


def _alphas(results) -> dict:
    return {k: pf.alpha for k, pf in results.penalized.items()}


def _same_stability(mem, st, tol=TOL):
    """Same draws: every refit's coefficients to ``tol``, and the frequencies exactly."""
    assert st.models == mem.models and st.columns == mem.columns and st.grouped and mem.grouped
    np.testing.assert_array_equal(st.set_aside_freq, mem.set_aside_freq)
    for k in mem.models:
        np.testing.assert_array_equal(st.selected_freq[k], mem.selected_freq[k], err_msg=k)
        scale = np.nanmax(np.abs(mem.coef_draws[k]))
        np.testing.assert_allclose(st.coef_draws[k], mem.coef_draws[k], rtol=tol, atol=tol * scale,
                                   equal_nan=True, err_msg=k)


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_grouped_stability_of_a_row_sample_sums_every_groups_cross_products(tmp_path, kind):
    f = _frame(n=1500, seed=1)
    path = tmp_path / f"t.{kind}"
    if kind == "parquet":
        f.to_parquet(path, index=False, row_group_size=377)  # parts and batches of odd sizes
    else:
        f.to_csv(path, index=False)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    assert streamed.sampled and streamed.design.n < 400 and streamed.group_sums is not None
    st = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    st.set_bootstrap(25)
    st.compute()
    mem = Session(read_table(path), roles, settings)
    mem.set_bootstrap(25)
    mem.compute()
    assert st.stability is not None and "stability" not in st.sample_limits()
    _same_stability(mem.stability, st.stability)
    # One sentence more says where the refits' numbers come from; the rest read alike.
    assert st.stability.sentences[1:] == mem.stability.sentences
    assert "over all 1,495 usable rows, not the row sample" in st.stability.sentences[0]
    _close(mem.stability, dataclasses.replace(st.stability, sentences=mem.stability.sentences), "stability")
    # The same groups' statistics give OLS its cluster-robust standard errors over every row.
    _close(mem.results.ols, st.results.ols, "ols")
    assert st.results.ols.n_clusters == len(mem.design.group_labels)


def test_stability_from_group_sums_with_categories_penalty_factors_zero_weights_and_relaxed_families(tmp_path):
    from test_stream_parity import _frame as _frame_with_categories

    f = _frame_with_categories(n=1500, seed=4)
    f.loc[f["site"] == "s03", "w"] = 0.0  # a group of weight 0: drawn like any other, fitting nothing
    f.loc[::17, "w"] = 0.0
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=313)
    roles = Roles(target="y", weights="w", groups="site", categorical=("tray",),
                  predictors=("x0", "x1", "x2", "soil", "tray", "x4"))
    settings = FitSettings(folds=4, seed=1, relaxed=True, penalty_factors=(("x0", 0.0), ("soil", 2.0)))
    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    st = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    mem = Session(read_table(path), roles, settings)
    for s in (st, mem):
        s.set_bootstrap(20)
        s.compute()
    assert st.sampled and "relaxed_lasso" in st.stability.models
    _same_stability(mem.stability, st.stability)
    _close(mem.results.ols, st.results.ols, "ols")  # cluster-robust errors over 10 groups with weight
    assert st.results.ols.n_clusters == mem.results.ols.n_clusters == len(mem.design.group_labels) - 1


def test_longley_in_chunks_of_3_gives_memorys_cluster_errors_and_stability(tmp_path):
    f = _longley_frame()
    f["era"] = [f"e{i // 2}" for i in range(len(f))]  # eight groups of two consecutive years
    path = tmp_path / "longley.parquet"
    f.to_parquet(path, index=False, row_group_size=3)
    roles = Roles(target="TOTEMP", groups="era", predictors=LONGLEY)
    settings = FitSettings(folds=4, seed=1)
    design = build_design(read_table(path), roles)
    mem = fit_all(design, settings)
    s = stream_fit(path, roles, settings, memory_budget=10**7)
    o, m = s.results.ols, mem.ols
    np.testing.assert_allclose(o.cluster_std_errors, m.cluster_std_errors, rtol=TOL)
    assert o.cluster_intercept_se == pytest.approx(m.cluster_intercept_se, rel=TOL)
    # statsmodels OLS, cov_type="cluster" (its default factor G/(G-1)·(N-1)/(N-K)) on the same rows. Its
    # pseudo-inverse route keeps fewer digits on Longley than the certified classical errors this engine
    # matches to 1e-9 (test_stream_parity.py), hence 1e-7 here.
    import statsmodels.api as sm

    ref = sm.OLS(f["TOTEMP"].to_numpy(), sm.add_constant(f[list(LONGLEY)].to_numpy())).fit(
        cov_type="cluster", cov_kwds={"groups": np.arange(len(f)) // 2})
    np.testing.assert_allclose(o.cluster_std_errors, ref.bse[1:], rtol=1e-7)
    assert o.cluster_intercept_se == pytest.approx(ref.bse[0], rel=1e-7) and o.n_clusters == 8
    a = bootstrap_stability(design, settings, _alphas(mem), n_boot=40, seed=1, full_ols=mem.ols)
    b = bootstrap_stability(s.design, settings, _alphas(s.results), n_boot=40, seed=1, full_ols=o,
                            group_sums=s.group_sums)
    _same_stability(a, b)


def test_badly_conditioned_refits_are_solved_from_cross_products_and_said(tmp_path):
    rng = np.random.default_rng(4)
    n = 600
    f = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n)})
    f["c"] = f["a"] + f["b"] + 3e-4 * rng.normal(size=n)  # kept (above round-off), but the Gram's cond ~1e8
    f["g"] = [f"g{int(v):02d}" for v in rng.integers(0, 15, n)]
    f["y"] = f["a"] - f["b"] + 0.5 * f["c"] + rng.normal(size=n)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=97)
    roles = Roles(target="y", groups="g", predictors=("a", "b", "c"))
    settings = FitSettings(folds=3, seed=2)
    design = build_design(read_table(path), roles)
    mem = fit_all(design, settings)
    s = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=100)
    a = bootstrap_stability(design, settings, _alphas(mem), n_boot=12, seed=2, full_ols=mem.ols)
    b = bootstrap_stability(s.design, settings, _alphas(s.results), n_boot=12, seed=2, full_ols=s.results.ols,
                            group_sums=s.group_sums)
    # In memory such refits go to the rows; here the cross-products are all there is, so OLS's coefficients
    # carry the Gram's round-off times its condition number (about 1e-8), and the sentences say so.
    _same_stability(a, b, tol=1e-6)
    assert any("In 12 of the 12 refits OLS's kept columns overlap so closely" in x for x in b.sentences)


def test_too_many_groups_for_the_budget_withholds_stability_in_one_line(tmp_path):
    f = _frame(n=1500, seed=1)
    f["site"] = [f"r{i // 2:04d}" for i in range(len(f))]  # 750 groups of two rows
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    # 750 groups × (8² + 4·8) float64 numbers: 576 kB, more than half of 1 MB.
    assert streamed.group_sums is None
    note = streamed.group_sums_note
    assert note.startswith("Stability is not computed: the cross-products of the 750 groups take 576 kB, more than "
                           "half the memory budget (1 MB)") and "at least 1.15 MB" in note and "\n" not in note
    # The cluster-robust errors were taken before the statistics were let go (source: the in-memory fit).
    mem = fit_all(build_design(read_table(path), roles), settings)
    np.testing.assert_allclose(streamed.results.ols.cluster_std_errors, mem.ols.cluster_std_errors, rtol=TOL)
    st = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    st.set_bootstrap(10)
    st.compute()
    assert st.stability is None and st.sample_limits()["stability"] == note
    bigger = stream_fit(path, roles, settings, memory_budget=2 * 10**6, sample_rows=300)
    assert bigger.group_sums is not None and bigger.group_sums_note == ""


def test_the_report_and_the_cli_say_stability_uses_every_groups_rows(tmp_path, capsys, monkeypatch):
    import regbench.batches
    from regbench.cli import main
    from regbench.project import load_project
    from regbench.report import render_report

    # A sample of 300 rows stands in for the 20,000 a larger table would keep.
    monkeypatch.setattr(regbench.batches, "stream_fit", functools.partial(stream_fit, sample_rows=300))
    f = _frame(n=3000, seed=5, missing=False)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=500)
    out = tmp_path / "p.regbench"
    assert main(["new", str(path), "--target", "y", "--groups", "site", "--weights", "w", "--folds", "4",
                 "--memory-budget", "1MB", "--bootstrap", "10", "-o", str(out)]) == 0
    said = capsys.readouterr().out
    assert "seeded sample" in said and "Stability is not computed" not in said
    s = load_project(out)
    assert s.sampled and s.stability is not None
    render_report(s, tmp_path / "r.html")
    html = (tmp_path / "r.html").read_text()
    assert "Stability is not computed" not in html
    assert "each refit adds up the cross-products of the groups it drew over all 3,000 usable rows" in html
    assert "Cluster-robust SE" in html


@pytest.mark.gui
def test_the_window_says_where_stability_comes_from_and_why_it_is_withheld(qtbot, tmp_path):
    pytest.importorskip("pytestqt")
    from regbench.gui.window import MainWindow

    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    sessions = []
    for budget, sites in ((10**6, None), (10**6, [f"r{i // 2:04d}" for i in range(len(f))])):
        if sites is not None:
            f["site"] = sites  # 750 groups: their cross-products take more than half the budget
            f.to_parquet(path, index=False, row_group_size=400)
        streamed = stream_fit(path, roles, settings, memory_budget=budget, sample_rows=300)
        s = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=budget))
        s.set_bootstrap(10)
        s.compute()
        sessions.append(s)
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    qtbot.addWidget(w)
    w.show()
    said = []
    for s in sessions:
        w.adopt(s, fit=False)
        w.show_panel("stability")
        w.refresh_everything()
        said.append(w.panel("stability").sentences.text())
    assert "each refit adds up the cross-products of the groups it drew over all 1,495 usable rows" in said[0]
    assert "the cross-products of the 750 groups take" in said[1] and "No bootstrap refits yet" not in said[1]
    w.dirty = False
    w.close()

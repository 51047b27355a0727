"""The streamed route (batches of a Parquet file, a folder of Parquet files or a CSV) against
the in-memory route on the same table.

Source: the in-memory route of this package (read_table, build_design, fit_all), which the
other test files check against NIST StRD, statsmodels and scikit-learn; the streamed fit
must give the same numbers to 1e-9.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, read_table
from regbench.data.stream import fold_of_groups, parse_size, should_stream, stream_fit
from regbench.errors import Cancelled, DataError
from regbench.models.cv import fold_ids
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings


def _frame(n=1500, seed=0, missing=True):
    rng = np.random.default_rng(seed)
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) * (j + 1) + 100.0 * j for j in range(6)})
    # A near alias (an exact one makes the ridge path's far end amplify round-off by 1/α, the
    # same in both routes but not to 1e-9; the factor route's set-aside is checked in
    # test_one_pass.py).
    f["x6"] = 1.8 * f["x0"] + 32.0 + 0.1 * rng.normal(size=n)
    f["x7"] = f["x1"] + f["x2"] + 0.01 * rng.normal(size=n)
    f["w"] = rng.uniform(0.2, 2.0, n)
    f["site"] = [f"s{int(v):02d}" for v in rng.integers(0, 13, n)]
    f["y"] = f["x0"] - 0.5 * f["x1"] + 0.1 * f["x3"] + rng.normal(size=n)
    if missing:
        f.loc[[5, 77, 901], "x3"] = np.nan
        f.loc[[12], "y"] = np.nan
        f.loc[[400], "w"] = -1.0
    return f


def _compare(streamed, design, results, tol=1e-9):
    r2 = streamed.results
    assert streamed.rows_used == design.n
    assert r2.ols.kept == results.ols.kept
    assert [s.column for s in r2.ols.set_aside] == [s.column for s in results.ols.set_aside]
    scale = np.abs(results.ols.coef).max()
    np.testing.assert_allclose(r2.ols.coef, results.ols.coef, rtol=tol, atol=tol * scale)
    ok = np.isfinite(results.ols.std_errors)
    np.testing.assert_allclose(r2.ols.std_errors[ok], results.ols.std_errors[ok], rtol=tol)
    assert r2.ols.r_squared == pytest.approx(results.ols.r_squared, rel=tol)
    # Cluster-robust standard errors by group: each group's scores from its cross-products on the
    # streamed route, from the rows in memory (checked against statsmodels in test_rank_rule.py).
    if results.ols.cluster_std_errors is None:
        assert r2.ols.cluster_std_errors is None
    else:
        assert r2.ols.n_clusters == results.ols.n_clusters
        np.testing.assert_allclose(r2.ols.cluster_std_errors[ok], results.ols.cluster_std_errors[ok], rtol=tol)
        assert r2.ols.cluster_intercept_se == pytest.approx(results.ols.cluster_intercept_se, rel=tol)
    np.testing.assert_allclose(r2.diagnostics.vif, results.diagnostics.vif, rtol=1e-7)
    for name, pf in results.penalized.items():
        q = r2.penalized[name]
        np.testing.assert_allclose(q.path.alphas, pf.path.alphas, rtol=tol)
        np.testing.assert_allclose(q.cv.mean, pf.cv.mean, rtol=tol)
        assert q.alpha == pytest.approx(pf.alpha, rel=tol)
        s = np.abs(pf.path.coef).max()
        np.testing.assert_allclose(q.path.coef, pf.path.coef, rtol=tol, atol=tol * s)
        np.testing.assert_allclose(q.model.coef, pf.model.coef, rtol=tol, atol=tol * s)


@pytest.mark.parametrize("grouped", [True, False])
def test_streamed_parquet_in_small_batches_equals_the_in_memory_fit(tmp_path, grouped):
    f = _frame()
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    # Without groups, name the numeric predictors: the text column would be coded as categories.
    roles = Roles(target="y", weights="w", groups="site") if grouped else \
        Roles(target="y", weights="w", predictors=tuple(f"x{j}" for j in range(8)))
    design = build_design(read_table(path), roles)
    settings = FitSettings(folds=4, seed=3)
    results = fit_all(design, settings)
    # 1 MB budget: batches of 1024 rows inside row groups of 400; three passes merge.
    s = stream_fit(path, roles, settings, memory_budget=parse_size("1MB"), sample_rows=300)
    _compare(s, design, results)
    # A seeded sample of about 300 rows (a draw per row on the one-pass grouped route).
    assert s.sampled and (s.design.n == 300 if not grouped else 200 < s.design.n < 400)
    assert [e.row for e in s.design.excluded] == [e.row for e in design.excluded]
    # The sampled rows are real rows of the design, with their folds.
    at = np.searchsorted(design.row_numbers, s.design.row_numbers)
    np.testing.assert_array_equal(design.X[at], s.design.X)
    np.testing.assert_array_equal(results.fold_ids[at], s.results.fold_ids)


def test_streamed_folder_of_parquet_files_and_csv(tmp_path):
    f = _frame(seed=1)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i, a in enumerate(range(0, len(f), 500)):
        f.iloc[a:a + 500].to_parquet(folder / f"part-{i:03d}.parquet", index=False)
    csv = tmp_path / "t.csv"
    f.to_csv(csv, index=False)
    roles = Roles(target="y", groups="site")
    design = build_design(read_table(csv), roles)
    settings = FitSettings(folds=5, seed=0)
    results = fit_all(design, settings)
    _compare(stream_fit(folder, roles, settings, memory_budget=2_000_000), design, results)
    _compare(stream_fit(csv, roles, settings, memory_budget=2_000_000), design, results)
    assert should_stream(folder, None)


def test_grouped_folds_are_those_of_the_in_memory_route():
    rng = np.random.default_rng(4)
    groups = rng.integers(0, 30, 2000)
    w = rng.uniform(0.5, 2.0, 2000)
    ids = fold_ids(2000, 5, 7, groups, w)
    gw = np.bincount(groups, weights=w)
    gn = np.bincount(groups)
    # Source: models.cv.fold_ids on the rows.
    np.testing.assert_array_equal(fold_of_groups(gw, gn, 5, 7)[groups], ids)


def test_bad_budget_gets_one_line_and_a_text_predictor_is_coded(tmp_path):
    with pytest.raises(DataError, match="--memory-budget: 'lots'"):
        parse_size("lots")
    assert parse_size("500MB") == 500_000_000 and parse_size("1.5GiB") == int(1.5 * 2**30)
    f = _frame(missing=False)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=500)
    # Chosen by default, the text column 'site' is a category on both routes (tests/test_stream_parity.py).
    design = build_design(read_table(path), Roles(target="y"))
    results = fit_all(design, FitSettings())
    streamed = stream_fit(path, Roles(target="y"), FitSettings(), memory_budget=10**7)
    assert "site=s01" in streamed.design.columns
    # One indicator per level of 13 sites has an exact null direction (the indicators sum to the
    # intercept); ridge's closed form leaves it out rather than dividing either route's round-off
    # along it by α (which gave 7e-9 at the path's far end), so the routes agree to 1e-9 here too.
    _compare(streamed, design, results, tol=1e-9)
    ridge, mem = streamed.results.penalized["ridge"].path.coef, results.penalized["ridge"].path.coef
    np.testing.assert_allclose(ridge, mem, rtol=0, atol=1e-9 * np.abs(mem).max())


def test_streamed_csv_names_the_file_column_row_and_text_of_a_bad_cell(tmp_path):
    # The in-memory reader sets such a column aside naming its rows (tests/test_bad_tables.py);
    # the streamed route cannot set it aside after the fact, so it refuses with the same facts.
    f = _frame(n=3000, missing=False).drop(columns=["site"])
    f["x2"] = f["x2"].astype(object)
    f.loc[2499, "x2"] = "n/a?"
    path = tmp_path / "t.csv"
    f.to_csv(path, index=False)
    with pytest.raises(DataError) as err:
        stream_fit(path, Roles(target="y"), FitSettings(), memory_budget=10**7)
    msg = str(err.value)
    assert "\n" not in msg and str(path) in msg
    assert "column 'x2', row 2500 holds 'n/a?'" in msg and "without --memory-budget" in msg
    # Leaving the column out of the predictors is the way round that the line offers.
    streamed = stream_fit(path, Roles(target="y", predictors=("x0", "x1", "x3")), FitSettings(), memory_budget=10**7)
    assert streamed.rows_used == 3000


def test_streamed_fit_cancels(tmp_path):
    f = _frame(n=300, missing=False)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False)
    with pytest.raises(Cancelled):
        stream_fit(path, Roles(target="y", groups="site"), FitSettings(), cancel=lambda: True)


def test_cli_fit_streams_beyond_the_budget_and_says_so(tmp_path, capsys):
    import json

    from regbench.cli import main

    f = _frame(n=3000, seed=5, missing=False)  # about 1.6 MB in memory: beyond a 1 MB budget
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=200)
    base = [str(path), "--target", "y", "--groups", "site", "--weights", "w"]
    assert main(["fit", *base, "--json", str(tmp_path / "m.json")]) == 0
    assert main(["fit", *base, "--memory-budget", "1MB", "--json", str(tmp_path / "s.json")]) == 0
    m = json.loads((tmp_path / "m.json").read_text())
    s = json.loads((tmp_path / "s.json").read_text())
    # Source: the in-memory route's JSON; the streamed one adds the route and the row sample.
    assert s["route"] == "streamed" and s["rows_used"] == m["rows_used"] == 3000
    assert s["row_sample"]["sampled"] is False
    assert s["rows"] == {"memory_budget": 10**6, "cluster": None}
    for name in ("ols", "ridge", "lasso", "elastic_net"):
        for col, v in m["models"][name]["coefficients"].items():
            assert s["models"][name]["coefficients"][col] == pytest.approx(v, rel=1e-9, abs=1e-12)
    # Cluster-robust standard errors by site, from each site's cross-products on the streamed route.
    assert s["models"]["ols"]["n_clusters"] == m["models"]["ols"]["n_clusters"] > 1
    assert s["models"]["ols"]["cluster_intercept_se"] == pytest.approx(m["models"]["ols"]["cluster_intercept_se"],
                                                                       rel=1e-9)
    for col, v in m["models"]["ols"]["cluster_std_errors"].items():
        assert s["models"]["ols"]["cluster_std_errors"][col] == pytest.approx(v, rel=1e-9)
    # `new` on a table beyond the budget writes a project that reads its rows from the file
    # (tests/test_session_batches.py checks what it holds).
    assert main(["new", *base, "--memory-budget", "1MB", "--bootstrap", "0", "-o", str(tmp_path / "p.regbench")]) == 0
    assert "refers to" in capsys.readouterr().out
    assert main(["fit", *base, "--memory-budget", "plenty"]) == 2
    assert "--memory-budget: 'plenty' is not a size" in capsys.readouterr().err


@pytest.mark.timeout(240)
def test_cluster_route_on_a_local_cluster_equals_the_in_memory_fit(tmp_path):
    pytest.importorskip("dask.distributed")
    from dask.distributed import Client, LocalCluster

    from regbench.cluster import cluster_fit

    f = _frame(seed=6)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i, a in enumerate(range(0, len(f), 300)):
        f.iloc[a:a + 300].to_parquet(folder / f"part-{i:03d}.parquet", index=False, row_group_size=150)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=5, seed=2)
    whole = tmp_path / "t.parquet"
    f.to_parquet(whole, index=False)
    design = build_design(read_table(whole), roles)
    results = fit_all(design, settings)
    # One worker in this process (in-process transport: no network at all).
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        s = cluster_fit(folder, roles, settings, client=client)
        assert len(client.scheduler_info()["workers"]) == 1
    assert s.route == "cluster"
    _compare(s, design, results)


def test_cluster_address_must_be_local_or_a_scheduler():
    pytest.importorskip("dask.distributed")
    from regbench.cluster import ClusterError, connect

    with pytest.raises(ClusterError, match="not 'local' or a scheduler address"):
        connect("my-cluster")


def test_one_pass_sets_a_constant_column_aside_as_the_in_memory_route(tmp_path):
    f = _frame(n=1200, seed=8)
    f.insert(2, "flat", 4.0)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=256)
    roles = Roles(target="y", groups="site")
    design = build_design(read_table(path), roles)
    results = fit_all(design, FitSettings())
    s = stream_fit(path, roles, FitSettings(), memory_budget=2_000_000)
    # Source: the in-memory route, which sets 'flat' aside before fitting.
    assert [u.column for u in s.design.unusable] == [u.column for u in design.unusable] == ["flat"]
    assert s.design.columns == design.columns
    _compare(s, design, results)

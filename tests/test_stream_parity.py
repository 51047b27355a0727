"""The streamed and cluster routes on what needs a look at the columns first: category
predictors, yes/no targets, derived columns, the identifier rule and wide tables.

Sources: the in-memory route of this package (read_table, build_design, fit_all), which the
other test files check against NIST StRD, statsmodels, scikit-learn and cvxpy; every fitted
number of the streamed route must equal it to 1e-9.  NIST StRD Longley certified values
(from memory, as /work/shared/REFERENCES.md records them) for the rows in chunks of 3.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, read_table
from regbench.data.derive import Derived
from regbench.data.stream import stream_fit
from regbench.errors import DataError
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings


def _frame(n=1200, seed=0):
    rng = np.random.default_rng(seed)
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) * (j + 1) + 50.0 * j for j in range(4)})
    f["x4"] = f["x0"] * 0.7 + f["x1"] * 0.3 + 0.05 * rng.normal(size=n)
    f["pos"] = rng.uniform(0.5, 30.0, n)
    f["soil"] = rng.choice(["loam", "clay", "sand", "peat"], n)
    # Whole-number codes marked as categories (sorted as text: "10" before "2").
    f["tray"] = rng.choice([2.0, 3.0, 10.0], n)
    f["w"] = rng.uniform(0.2, 2.0, n)
    f["site"] = [f"s{int(v):02d}" for v in rng.integers(0, 11, n)]
    effect = f["soil"].map({"loam": 0.0, "clay": 1.5, "sand": -0.8, "peat": 0.4})
    f["y"] = f["x0"] - 0.5 * f["x1"] + 0.3 * np.log(f["pos"]) + effect + 0.2 * (f["tray"] == 10) + rng.normal(size=n)
    return f


def _compare(streamed, design, results, tol=1e-9):
    """Every fitted number of the streamed fit against the in-memory fit (the source)."""
    r2 = streamed.results
    assert streamed.design.columns == design.columns
    assert streamed.design.sources == design.sources
    assert streamed.design.reference_levels == design.reference_levels
    assert [(u.column, u.rule) for u in streamed.design.unusable] == [(u.column, u.rule) for u in design.unusable]
    assert streamed.rows_used == design.n
    assert r2.ols.kept == results.ols.kept
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
    for name, pf in results.penalized.items():
        q = r2.penalized[name]
        assert q.model.columns == pf.model.columns
        assert q.model.reference_levels == pf.model.reference_levels
        np.testing.assert_allclose(q.path.alphas, pf.path.alphas, rtol=tol)
        np.testing.assert_allclose(q.cv.mean, pf.cv.mean, rtol=tol)
        assert q.alpha == pytest.approx(pf.alpha, rel=tol)
        s = np.abs(pf.path.coef).max()
        np.testing.assert_allclose(q.path.coef, pf.path.coef, rtol=tol, atol=tol * s)
        np.testing.assert_allclose(q.model.coef, pf.model.coef, rtol=tol, atol=tol * s)
        assert q.model.intercept == pytest.approx(pf.model.intercept, rel=tol, abs=tol * s)


def _in_memory(path, roles, settings):
    design = build_design(read_table(path), roles)
    return design, fit_all(design, settings)


@pytest.mark.parametrize("grouped", [True, False])
def test_category_predictors_are_coded_as_in_memory(tmp_path, grouped):
    f = _frame()
    # A level seen only on an excluded row must not count ("silt": its row misses the target).
    f.loc[7, "soil"] = "silt"
    f.loc[7, "y"] = np.nan
    f.loc[[30, 31], "soil"] = None
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=250)
    roles = Roles(target="y", weights="w", groups="site" if grouped else None, categorical=("tray",),
                  predictors=("x0", "x1", "x2", "soil", "tray", "x4"))
    settings = FitSettings(folds=4, seed=1, penalty_factors=(("x0", 0.0), ("soil", 2.0)))
    design, results = _in_memory(path, roles, settings)
    assert "soil=loam" in design.columns and "tray=2" in design.columns
    s = stream_fit(path, roles, settings, memory_budget=1_000_000, sample_rows=400)
    _compare(s, design, results)
    # Penalized fits carry one indicator per level, as models/coding.py fits them in memory.
    assert "soil=clay" in s.results.penalized["lasso"].model.columns


def test_reference_level_absent_from_the_usable_rows_and_csv(tmp_path):
    f = _frame(n=900, seed=3)
    # "clay" (the first level in sorted order) only on rows that are excluded: the reference becomes "loam".
    clay = f.index[f["soil"] == "clay"]
    f.loc[clay, "x2"] = np.nan
    for ext in ("parquet", "csv"):
        path = tmp_path / f"t.{ext}"
        f.to_parquet(path, index=False, row_group_size=200) if ext == "parquet" else f.to_csv(path, index=False)
        roles = Roles(target="y", predictors=("x0", "x1", "x2", "soil"))
        settings = FitSettings(folds=3, seed=0)
        design, results = _in_memory(path, roles, settings)
        assert design.reference_levels[0][1] == "loam"
        _compare(stream_fit(path, roles, settings, memory_budget=1_000_000), design, results)


def test_yes_no_target_is_refused_before_the_full_pass(tmp_path, monkeypatch):
    from regbench.data import stream

    f = _frame(n=400)
    f["passed"] = np.where(f["y"] > f["y"].median(), "yes", "no")
    f["flag"] = (f["y"] > f["y"].mean()).astype(float)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=100)

    def never(*a, **k):
        raise AssertionError("the full pass ran")

    monkeypatch.setattr(stream, "rows_pass", never)
    monkeypatch.setattr(stream, "group_pass", never)
    for target, words in (("passed", "('no' and 'yes')"), ("flag", "('0' and '1')")):
        with pytest.raises(DataError) as err:
            stream_fit(path, Roles(target=target, predictors=("x0", "x1")), FitSettings(), memory_budget=10**7)
        msg = str(err.value)
        assert "\n" not in msg and f"target '{target}' holds two distinct values {words}, a yes/no outcome" in msg
        assert "--outcome numeric" in msg
    monkeypatch.undo()
    # With the outcome declared numeric, a 0/1 target is fitted as a number, as in memory.
    roles = Roles(target="flag", predictors=("x0", "x1"), outcome="numeric")
    design, results = _in_memory(path, roles, FitSettings())
    _compare(stream_fit(path, roles, FitSettings(), memory_budget=10**7), design, results)


def test_derived_columns_are_computed_per_batch_as_in_memory(tmp_path):
    f = _frame(n=1000, seed=5)
    f["count"] = np.random.default_rng(2).poisson(2.0, len(f)).astype(float)
    f.loc[11, "pos"] = np.nan
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=300)
    derived = (Derived("log", ("pos",)), Derived("log1p", ("count",)), Derived("sqrt", ("pos",)),
               Derived("square", ("x1",)), Derived("standardize", ("x2",)), Derived("product", ("x0", "x3")),
               Derived("standardize", ("log(pos)",)))
    names = tuple(d.name for d in derived)
    roles = Roles(target="y", groups="site", derived=derived, predictors=("x0", "x1", "soil") + names)
    settings = FitSettings(folds=5, seed=4)
    design, results = _in_memory(path, roles, settings)
    assert "standardized(log(pos))" in design.columns
    s = stream_fit(path, roles, settings, memory_budget=1_000_000)
    _compare(s, design, results)
    assert s.design.derived == derived


def test_log_of_zeros_is_refused_with_the_count_of_such_rows(tmp_path):
    f = _frame(n=600, seed=6)
    f.loc[[40, 350, 599], "pos"] = 0.0
    f.loc[351, "pos"] = -2.0
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=128)
    roles = Roles(target="y", derived=(Derived("log", ("pos",)),), predictors=("x0", "log(pos)"))
    with pytest.raises(DataError) as mem:
        build_design(read_table(path), roles)
    with pytest.raises(DataError) as streamed:
        stream_fit(path, roles, FitSettings(), memory_budget=10**7)
    # Source: the in-memory route's line (data/derive.py), word for word.
    assert str(streamed.value) == str(mem.value)
    assert "4 rows of 'pos' hold 0 or less (first: row 41, value 0)" in str(streamed.value)


@pytest.mark.parametrize("ext", ["parquet", "csv"])
def test_identifier_rule_leaves_out_the_same_columns_with_the_same_words(tmp_path, ext):
    f = _frame(n=700, seed=7).drop(columns=["tray"])
    n = len(f)
    f.insert(0, "row", np.arange(1, n + 1, dtype=float))
    f.insert(1, "plantId", np.random.default_rng(1).permutation(n) + 5000)
    f.insert(2, "label", [f"bed-{i:04d}" for i in range(n)])
    f["empty"] = np.nan
    f["year"] = 1990.0 + np.arange(n) % 30  # whole numbers that repeat: a measurement, kept
    path = tmp_path / f"t.{ext}"
    # Parquet's row-group statistics rule most numeric columns out unread; a CSV's are read.
    f.to_parquet(path, index=False, row_group_size=200) if ext == "parquet" else f.to_csv(path, index=False)
    roles = Roles(target="y", groups="site", weights="w")
    settings = FitSettings(folds=4, seed=2)
    design, results = _in_memory(path, roles, settings)
    assert {u.column for u in design.unusable} >= {"row", "plantId", "label", "empty"}
    s = stream_fit(path, roles, settings, memory_budget=1_000_000)
    # Source: the in-memory route (data/identifiers.py): same columns, same reasons.
    assert [(u.column, u.reason, u.rule) for u in s.design.unusable] == \
        [(u.column, u.reason, u.rule) for u in design.unusable]
    _compare(s, design, results)


def test_wide_streamed_table_takes_the_strong_rules_path(tmp_path, monkeypatch):
    from regbench.models import penalized

    rng = np.random.default_rng(9)
    n, p = 60, 240  # above models/penalized.py WIDE_MIN_COLUMNS, as a wide table must be
    X = rng.normal(size=(n, p))
    f = pd.DataFrame(X, columns=[f"c{j:03d}" for j in range(p)])
    f["y"] = X[:, 0] - 2 * X[:, 3] + 0.5 * X[:, 10] + 0.3 * rng.normal(size=n)
    path = tmp_path / "wide.parquet"
    f.to_parquet(path, index=False, row_group_size=16)
    roles = Roles(target="y")
    settings = FitSettings(folds=3, seed=0, n_penalties=30)
    design, results = _in_memory(path, roles, settings)
    calls = []
    real = penalized.screened_path
    monkeypatch.setattr(penalized, "screened_path", lambda *a, **k: calls.append(1) or real(*a, **k))
    s = stream_fit(path, roles, settings, memory_budget=1_000_000)
    # The path from statistics screens with the strong rules, as in memory (models/penalized.py).
    assert calls
    _compare(s, design, results)


def _longley_frame():
    import statsmodels.api as sm

    data = sm.datasets.longley.load_pandas()
    f = data.exog.copy()
    f["TOTEMP"] = data.endog
    return f


def _check_longley(r):
    # NIST StRD Longley certified values (from memory, as REFERENCES.md records them).
    b = [15.0618722713733, -0.0358191792925910, -2.02022980381683, -1.03322686717359,
         -0.0511041056535807, 1829.15146461355]
    se = [84.9149257747669, 0.0334910077722432, 0.488399681651699, 0.214274163161675,
          0.226073200069370, 455.478499142212]
    assert np.max(np.abs(r.coef - b) / np.abs(b)) < 1e-9
    assert np.max(np.abs(r.std_errors - se) / np.abs(se)) < 1e-9
    assert abs(r.intercept / -3482258.63459582 - 1) < 1e-9
    assert abs(r.r_squared - 0.995479004577296) < 1e-10


def test_longley_streamed_in_chunks_of_3_rows_matches_nist(tmp_path):
    path = tmp_path / "longley.parquet"
    _longley_frame().to_parquet(path, index=False, row_group_size=3)
    s = stream_fit(path, Roles(target="TOTEMP"), FitSettings(folds=3), memory_budget=10**7)
    _check_longley(s.results.ols)


@pytest.mark.timeout(300)
def test_cluster_route_with_categories_derived_columns_and_longley(tmp_path):
    pytest.importorskip("dask.distributed")
    from dask.distributed import Client, LocalCluster

    from regbench.cluster import cluster_fit

    f = _frame(n=900, seed=11)
    f.insert(0, "row", np.arange(len(f), dtype=float))
    folder = tmp_path / "parts"
    folder.mkdir()
    for i, a in enumerate(range(0, len(f), 300)):
        f.iloc[a:a + 300].to_parquet(folder / f"part-{i:03d}.parquet", index=False, row_group_size=100)
    whole = tmp_path / "t.parquet"
    f.to_parquet(whole, index=False)
    derived = (Derived("log", ("pos",)), Derived("standardize", ("x3",)))
    roles = Roles(target="y", weights="w", groups="site", categorical=("tray",), derived=derived)
    settings = FitSettings(folds=4, seed=5)
    design, results = _in_memory(whole, roles, settings)
    assert "row" in {u.column for u in design.unusable} and "soil=peat" in design.columns
    longley = tmp_path / "longley.parquet"
    _longley_frame().to_parquet(longley, index=False, row_group_size=3)
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        s = cluster_fit(folder, roles, settings, client=client)
        ungrouped = cluster_fit(whole, Roles(target="y", predictors=("x0", "soil", "log(pos)"), derived=derived),
                                settings, client=client)
        nist = cluster_fit(longley, Roles(target="TOTEMP"), FitSettings(folds=3), client=client)
    assert s.route == "cluster"
    _compare(s, design, results)
    # Grouped stability from the groups' statistics the workers merged: the in-memory refits (on the rows'
    # group cross-products) with the same draws give the same frequencies and coefficients to 1e-9.
    from regbench.analysis.stability import bootstrap_stability

    a = bootstrap_stability(design, settings, {k: pf.alpha for k, pf in results.penalized.items()}, n_boot=10,
                            seed=5, full_ols=results.ols)
    b = bootstrap_stability(s.design, settings, {k: pf.alpha for k, pf in s.results.penalized.items()}, n_boot=10,
                            seed=5, full_ols=s.results.ols, group_sums=s.group_sums)
    for k in a.models:
        np.testing.assert_array_equal(b.selected_freq[k], a.selected_freq[k])
        scale = np.nanmax(np.abs(a.coef_draws[k]))
        np.testing.assert_allclose(b.coef_draws[k], a.coef_draws[k], rtol=1e-9, atol=1e-9 * scale, equal_nan=True)
    r2 = Roles(target="y", predictors=("x0", "soil", "log(pos)"), derived=derived)
    _compare(ungrouped, *_in_memory(whole, r2, settings))
    _check_longley(nist.results.ols)


def test_named_empty_column_and_one_level_category_are_set_aside_as_in_memory(tmp_path):
    f = _frame(n=800, seed=12)
    f["blank"] = np.nan
    f["house"] = "north"
    f.loc[3, "house"] = "south"  # the only other level, on a row the target leaves out
    f.loc[3, "y"] = np.nan
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=200)
    roles = Roles(target="y", predictors=("x0", "blank", "house", "soil", "x1"))
    settings = FitSettings(folds=3, seed=0)
    design, results = _in_memory(path, roles, settings)
    s = stream_fit(path, roles, settings, memory_budget=1_000_000)
    # Source: the in-memory route's reasons (data/design.py), word for word.
    assert [(u.column, u.reason, u.rule) for u in s.design.unusable] == \
        [(u.column, u.reason, u.rule) for u in design.unusable]
    assert {u.rule for u in design.unusable} == {"empty", "one_level"}
    _compare(s, design, results)


def test_one_column_in_two_parts_is_refused_with_the_in_memory_words(tmp_path):
    path = tmp_path / "t.parquet"
    _frame(n=100).to_parquet(path, index=False)
    for roles in (Roles(target="y", weights="y"), Roles(target="y", groups="site", predictors=("x0", "site"))):
        with pytest.raises(DataError) as mem:
            build_design(read_table(path), roles)
        with pytest.raises(DataError) as streamed:
            stream_fit(path, roles, FitSettings(), memory_budget=10**7)
        # Source: the in-memory route (data/design.py).
        assert str(streamed.value).split(": ", 1)[-1] == str(mem.value).split(": ", 1)[-1]


@pytest.mark.parametrize("ext", ["parquet", "csv"])
def test_text_of_yes_no_words_is_read_as_one_and_zero_as_in_memory(tmp_path, ext):
    f = _frame(n=900, seed=13)
    rng = np.random.default_rng(3)
    f["covered"] = rng.choice(["Yes", "no", "yes ", "NO"], len(f))
    f.loc[[5, 6], "covered"] = "NA"
    f["y"] = f["y"] + 0.7 * f["covered"].str.strip().str.lower().eq("yes")
    path = tmp_path / f"t.{ext}"
    f.to_parquet(path, index=False, row_group_size=200) if ext == "parquet" else f.to_csv(path, index=False)
    roles = Roles(target="y", predictors=("x0", "covered", "soil", "x1"))
    settings = FitSettings(folds=3, seed=1)
    design, results = _in_memory(path, roles, settings)
    # Source: the in-memory reader types such a column as yes/no (1 and 0) and excludes the rows it misses.
    assert "covered" in design.columns and len(design.excluded) == 2
    s = stream_fit(path, roles, settings, memory_budget=1_000_000)
    assert [e.row for e in s.design.excluded] == [e.row for e in design.excluded]
    _compare(s, design, results)

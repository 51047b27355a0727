"""Collinearity diagnostics, checked against outside sources.

Sources: statsmodels ``variance_inflation_factor`` and WLS regressions, numpy's
SVD computed directly here, the Hald cement VIFs (from memory, REFERENCES.md),
Belsley, Kuh & Welsch (1980) for the condition-index rule, and mathematical
facts (variance-decomposition proportions of each term sum to 1).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from regbench.data import Roles, build_design, design_from_arrays, read_table
from regbench.demo import GREENHOUSE_ROLES
from regbench.models.diagnostics import diagnose
from regbench.models.ols import fit_ols

ROOT = Path(__file__).resolve().parents[1]


def kept_matrix(design, result):
    pos = design.weights > 0
    idx = [design.index(c) for c in result.kept]
    return design.X[pos][:, idx], design.weights[pos]


def numpy_bkw(X, w):
    """Condition indices (ascending) and proportions computed straight from numpy's SVD."""
    Z = np.sqrt(w)[:, None] * np.column_stack([np.ones(len(X)), X])
    Z = Z / np.linalg.norm(Z, axis=0)
    _, s, Vt = np.linalg.svd(Z, full_matrices=False)
    phi = (Vt.T / s) ** 2
    return s[0] / s, (phi / phi.sum(axis=1, keepdims=True)).T


def wls_r2(target, X, w):
    import statsmodels.api as sm

    return sm.WLS(target, sm.add_constant(X, has_constant="add"), weights=w).fit().rsquared


def test_hald_vif_published_values_and_statsmodels(hald):
    from statsmodels.stats.outliers_influence import variance_inflation_factor
    import statsmodels.api as sm

    diag = diagnose(hald, fit_ols(hald))
    assert diag.columns == ("x1", "x2", "x3", "x4")
    # Montgomery, Peck & Vining (from memory, REFERENCES.md): 38.50, 254.42, 46.87, 282.51.
    np.testing.assert_allclose(diag.vif, [38.50, 254.42, 46.87, 282.51], atol=0.006)
    exog = sm.add_constant(hald.X)
    ref = [variance_inflation_factor(exog, i) for i in range(1, 5)]  # statsmodels
    np.testing.assert_allclose(diag.vif, ref, rtol=1e-9)


def test_vif_matches_statsmodels_on_greenhouse_columns(greenhouse):
    from statsmodels.stats.outliers_influence import variance_inflation_factor
    import statsmodels.api as sm

    unweighted = design_from_arrays(greenhouse.X, greenhouse.y, columns=greenhouse.columns)
    r = fit_ols(unweighted)
    diag = diagnose(unweighted, r)
    X, _ = kept_matrix(unweighted, r)
    exog = sm.add_constant(X)
    ref = [variance_inflation_factor(exog, i) for i in range(1, X.shape[1] + 1)]  # statsmodels
    np.testing.assert_allclose(diag.vif, ref, rtol=1e-8)


def test_weighted_vif_matches_weighted_regressions(greenhouse):
    r = fit_ols(greenhouse)
    diag = diagnose(greenhouse, r)
    X, w = kept_matrix(greenhouse, r)
    for j in range(X.shape[1]):
        r2 = wls_r2(X[:, j], np.delete(X, j, axis=1), w)  # statsmodels WLS of column j on the others
        assert diag.vif[j] == pytest.approx(1.0 / (1.0 - r2), rel=1e-8)


@pytest.mark.parametrize("which", ["hald", "greenhouse"])
def test_condition_indices_and_proportions_match_numpy_svd(which, hald, greenhouse):
    design = {"hald": hald, "greenhouse": greenhouse}[which]
    r = fit_ols(design)
    diag = diagnose(design, r)
    X, w = kept_matrix(design, r)
    ci, props = numpy_bkw(X, w)
    assert diag.terms == ("(intercept)",) + r.kept
    np.testing.assert_allclose(diag.condition_indices, ci, rtol=1e-8)
    assert np.all(np.diff(diag.condition_indices) >= 0)
    np.testing.assert_allclose(diag.variance_proportions, props, atol=1e-8)
    # Fact: each term's variance is split over the dimensions, so its shares add up to 1.
    np.testing.assert_allclose(diag.variance_proportions.sum(axis=0), 1.0, rtol=1e-12)
    # Belsley, Kuh & Welsch (1980): index > 30 and two or more shares > 0.5, from numpy's numbers.
    expected = [(d, [diag.terms[j] for j in np.flatnonzero(props[d] > 0.5)]) for d in range(len(ci))
                if ci[d] > 30 and np.count_nonzero(props[d] > 0.5) >= 2]
    assert [(x["dimension"], x["terms"]) for x in diag.damaging] == expected
    for x in diag.damaging:
        assert x["index"] == pytest.approx(ci[x["dimension"]], rel=1e-8)


def test_hald_has_a_damaging_dimension(hald):
    diag = diagnose(hald, fit_ols(hald))
    # The ingredients sum to about 100%, so the intercept and the four shares are tied (REFERENCES.md).
    assert diag.damaging and diag.condition_indices[-1] > 30
    assert len(diag.damaging[-1]["terms"]) >= 2
    assert len(diag.near_dependencies) == 4  # all VIFs above 10 (common practice)


def test_near_dependencies_explain_with_few_columns(greenhouse):
    r = fit_ols(greenhouse)
    diag = diagnose(greenhouse, r)
    X, w = kept_matrix(greenhouse, r)
    listed = {nd.column for nd in diag.near_dependencies}
    assert listed == {c for c, v in zip(diag.columns, diag.vif) if v > 10}  # common practice: VIF > 10
    for nd in diag.near_dependencies:
        j = r.kept.index(nd.column)
        others = [c for c in r.kept if c != nd.column]
        cols = [r.kept.index(c) for c in nd.explained_by]
        assert 1 <= len(cols) <= 4 and nd.column not in nd.explained_by
        # statsmodels WLS R² of the column on the columns named.
        assert nd.r_squared == pytest.approx(wls_r2(X[:, j], X[:, cols], w), abs=1e-9)
        r2_all = wls_r2(X[:, j], X[:, [r.kept.index(c) for c in others]], w)
        assert nd.vif == pytest.approx(1.0 / (1.0 - r2_all), rel=1e-8)
        assert nd.r_squared >= r2_all - 0.01 or len(cols) == 4
        # Greedy: the first column named is the single best explainer (statsmodels WLS R²).
        candidates = [i for i in range(X.shape[1]) if i != j]
        single = [wls_r2(X[:, j], X[:, [i]], w) for i in candidates]
        best = candidates[int(np.argmax(single))]
        assert nd.explained_by[0] == r.kept[best]
        assert nd.sentence.startswith(f"{nd.column} is ") and "explained by" in nd.sentence
        assert nd.explained_by[0] in nd.sentence and "poorly determined" in nd.sentence
    # Fact of the table: the vapour-pressure deficit is computed from day temperature and humidity.
    vpd = next(nd for nd in diag.near_dependencies if nd.column == "vpd_kpa")
    assert {"humidity_pct", "day_temp_c"} <= set(vpd.explained_by)


def test_summary_sentences(greenhouse):
    r = fit_ols(greenhouse)
    diag = diagnose(greenhouse, r)
    text = " ".join(diag.sentences)
    assert diag.sentences[0].startswith("2 columns were set aside") and "mean_temp_c, day_temp_f" in text
    n_high = int(np.sum(diag.vif > 10))
    assert f"{n_high} kept columns have a VIF above 10" in text
    assert f"worst condition index is {diag.condition_indices.max():.1f}" in text


def test_one_kept_column():
    rng = np.random.default_rng(3)
    x = rng.normal(5, 2, 40)
    X = np.column_stack([x, 2 * x + 1])  # the second is set aside
    d = design_from_arrays(X, 3 * x + rng.normal(size=40), columns=("x", "x2"))
    r = fit_ols(d)
    assert r.kept == ("x",)
    diag = diagnose(d, r)
    np.testing.assert_allclose(diag.vif, [1.0])  # no other column to explain it
    ci, props = numpy_bkw(x[:, None], np.ones(40))  # numpy SVD
    np.testing.assert_allclose(diag.condition_indices, ci, rtol=1e-10)
    np.testing.assert_allclose(diag.variance_proportions, props, atol=1e-10)
    assert diag.near_dependencies == () and diag.variance_proportions.shape == (2, 2)
    assert diag.sentences[0].startswith("1 column was set aside")


def test_no_kept_column():
    rng = np.random.default_rng(4)
    d = design_from_arrays(np.full((20, 1), 2.0), rng.normal(size=20), columns=("k",))
    r = fit_ols(d)
    diag = diagnose(d, r)
    assert r.kept == () and diag.vif.shape == (0,)
    np.testing.assert_allclose(diag.condition_indices, [1.0])
    np.testing.assert_allclose(diag.variance_proportions, [[1.0]])
    assert "weighted mean" in " ".join(diag.sentences)


def test_zero_weight_rows_do_not_change_the_diagnostics(hald):
    rng = np.random.default_rng(5)
    X = np.vstack([hald.X, rng.normal(50, 30, size=(4, 4))])  # extra rows that do not count
    w = np.r_[rng.uniform(0.5, 2.0, hald.n), np.zeros(4)]
    y = np.r_[hald.y, np.zeros(4)]
    with_zero = design_from_arrays(X, y, columns=hald.columns, weights=w)
    dropped = design_from_arrays(hald.X, hald.y, columns=hald.columns, weights=w[: hald.n])
    a = diagnose(with_zero, fit_ols(with_zero))
    b = diagnose(dropped, fit_ols(dropped))
    # Fact: a weight-0 row adds nothing to any weighted sum.
    np.testing.assert_allclose(a.vif, b.vif, rtol=1e-10)
    np.testing.assert_allclose(a.condition_indices, b.condition_indices, rtol=1e-10)
    np.testing.assert_allclose(a.variance_proportions, b.variance_proportions, atol=1e-10)


# -- the OLS factor is reused ---------------------------------------------------------------


def assert_same_diagnostics(a, b, rel):
    assert a.columns == b.columns and a.terms == b.terms
    np.testing.assert_allclose(a.vif, b.vif, rtol=rel)
    np.testing.assert_allclose(a.condition_indices, b.condition_indices, rtol=rel)
    np.testing.assert_allclose(a.variance_proportions, b.variance_proportions, rtol=0, atol=rel)
    assert [n.column for n in a.near_dependencies] == [n.column for n in b.near_dependencies]
    assert [n.explained_by for n in a.near_dependencies] == [n.explained_by for n in b.near_dependencies]
    assert [d["terms"] for d in a.damaging] == [d["terms"] for d in b.damaging]


def test_diagnostics_read_the_ols_factor_not_the_rows(greenhouse):
    import dataclasses

    r = fit_ols(greenhouse)
    assert r.r_factor is not None
    direct = diagnose(greenhouse, r)
    # Rows replaced by NaN: the diagnostics still come out the same, so they made no pass
    # over the rows when the OLS result carries its factor.
    blank = dataclasses.replace(greenhouse, X=np.full_like(greenhouse.X, np.nan))
    assert_same_diagnostics(diagnose(blank, r), direct, rel=0)
    # A result saved without the factor: the diagnostics rebuild it from the rows.
    old = dataclasses.replace(r, r_factor=None)
    assert_same_diagnostics(diagnose(greenhouse, old), direct, rel=1e-12)


@pytest.mark.parametrize("chunk", [1, 4, 37])
def test_diagnostics_from_blocks_equal_one_block(greenhouse, hald, chunk):
    for design in (greenhouse, hald):
        one = diagnose(design, fit_ols(design, chunk_rows=design.n))
        many = diagnose(design, fit_ols(design, chunk_rows=chunk))
        assert_same_diagnostics(many, one, rel=1e-12)
    # Blocks smaller than the columns still reproduce the published Hald VIFs
    # (Montgomery, Peck & Vining, from memory, REFERENCES.md).
    np.testing.assert_allclose(diagnose(hald, fit_ols(hald, chunk_rows=chunk)).vif,
                               [38.50, 254.42, 46.87, 282.51], atol=0.006)


def test_near_dependency_search_from_correlations_equals_the_search_on_coordinates():
    # The search reads its choices from the correlation matrix (one row per step); source: the same greedy
    # search carried out on the triangular coordinates, column by column, and statsmodels WLS R² of the
    # column on the columns named.
    from regbench.models import diagnostics as dm

    rng = np.random.default_rng(5)
    drivers = rng.normal(size=(800, 5))
    X = drivers @ rng.normal(size=(5, 40)) + rng.normal(0, 0.05, (800, 40))
    X[:, 39] = X[:, 0] + X[:, 1] + 1e-5 * rng.normal(size=800)  # a very near dependency, kept by OLS
    w = rng.uniform(0.5, 2.0, 800)
    d = design_from_arrays(X, drivers[:, 0] + rng.normal(size=800), weights=w)
    r = fit_ols(d)
    fast = diagnose(d, r)
    Xk, wk = kept_matrix(d, r)
    assert len(fast.near_dependencies) > 20
    R = None
    for nd in fast.near_dependencies:
        j = r.kept.index(nd.column)
        if R is None:
            from scipy import linalg

            Xc = (Xk - wk @ Xk / wk.sum()) * np.sqrt(wk)[:, None]
            R = linalg.qr(Xc / np.linalg.norm(Xc, axis=0), mode="r")[0][:Xk.shape[1]]
        chosen, r2 = dm._choose_on_coordinates(j, R, 1.0 - 1.0 / nd.vif)
        assert nd.explained_by == tuple(r.kept[i] for i in chosen)
        assert nd.r_squared == pytest.approx(r2, abs=1e-12)
        cols = [r.kept.index(c) for c in nd.explained_by]
        assert nd.r_squared == pytest.approx(wls_r2(Xk[:, j], Xk[:, cols], wk), abs=1e-9)

"""Wide tables (at least as many columns as rows), the α floor and the CV-edge flag.

References: scikit-learn Ridge, Lasso and ElasticNet on the standardized rows at the same α
(our α = sklearn's ``alpha`` for lasso and elastic net, ``n·α`` for Ridge, with the columns
standardized by their mean and population SD); numpy's ``matrix_rank`` for the rank of a wide
design; scikit-learn LassoCV on the same folds for where the CV minimum lies.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, design_from_arrays, table_from_frame
from regbench.errors import ModelError
from regbench.models.engine import fit_all, fit_models_at
from regbench.models.ols import fit_ols
from regbench.models.results import FitSettings


def wide(n=60, p=300, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * rng.uniform(0.5, 3.0, p) + rng.uniform(-10, 10, p)
    y = X[:, :6] @ rng.normal(size=6) + rng.normal(size=n)
    return X, y


def test_wide_table_builds_and_ols_keeps_a_largest_independent_set():
    X, y = wide()
    frame = pd.DataFrame(X, columns=[f"s{j}" for j in range(X.shape[1])]).assign(y=y)
    d = build_design(table_from_frame(frame), Roles(target="y"))
    assert d.p == 300 and d.n == 60  # no longer refused
    r = fit_ols(d)
    # numpy: the centered design has rank n - 1, so that many columns can be kept.
    assert r.rank == np.linalg.matrix_rank(X - X.mean(axis=0)) == 59
    assert r.kept == d.columns[:59]
    assert all(sa.reason == "too_few_rows" for sa in r.set_aside) and len(r.set_aside) == 241
    sentence = r.set_aside[0].sentence()
    assert "too few rows" in sentence and "60 rows" in sentence and "×" not in sentence
    assert np.all(np.isnan(r.std_errors)) and r.df_resid == 0 and "degrees of freedom" in r.inference_note
    # Set-aside columns contribute nothing; the kept ones interpolate the rows.
    np.testing.assert_allclose(r.model.predict(X), y, atol=1e-6 * np.abs(y).max())


def test_genuine_aliases_in_a_short_table_are_explained_as_combinations():
    # 20 columns plus 80 exact combinations of them on 40 rows: the combinations are facts
    # about the columns, not an accident of the row count.
    rng = np.random.default_rng(3)
    base = rng.normal(size=(40, 20))
    mix = rng.normal(size=(20, 80)) * (rng.random((20, 80)) < 0.1)
    mix[0] += 1.0  # every combination uses the first column at least
    X = np.column_stack([base, base @ mix])
    r = fit_ols(design_from_arrays(X, rng.normal(size=40)))
    assert r.rank == 20 and len(r.set_aside) == 80
    for sa in r.set_aside:
        assert sa.reason == "combination" and sa.exact
        j = int(sa.column[1:]) - 21
        expect = {f"x{i + 1}": mix[i, j] for i in np.flatnonzero(mix[:, j])}
        assert sa.combination == pytest.approx(expect, abs=1e-9)


@pytest.mark.parametrize("alpha", [0.05, 0.5])
def test_penalized_fits_on_a_wide_table_match_scikit_learn(alpha):
    from sklearn.linear_model import ElasticNet, Lasso, Ridge

    X, y = wide()
    n = X.shape[0]
    models = fit_models_at(design_from_arrays(X, y), FitSettings(alpha=alpha))
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    refs = {
        "ridge": Ridge(alpha=n * alpha).fit(Z, y).coef_,
        "lasso": Lasso(alpha=alpha, tol=1e-14, max_iter=1_000_000).fit(Z, y).coef_,
        "elastic_net": ElasticNet(alpha=alpha, l1_ratio=0.5, tol=1e-14, max_iter=1_000_000).fit(Z, y).coef_,
    }
    for name, ref in refs.items():
        np.testing.assert_allclose(models[name].coef_std, ref, atol=1e-6, err_msg=name)


def test_whole_fit_runs_on_a_wide_table():
    X, y = wide(n=40, p=250)
    d = design_from_arrays(X, y)
    r = fit_all(d, FitSettings(n_penalties=20, folds=4))
    assert r.ols.rank == 39 and len(r.diagnostics.vif) == 39
    assert np.all(np.isfinite(r.diagnostics.condition_indices))
    for pf in r.penalized.values():
        assert np.isfinite(pf.cv.mean).all() and np.isfinite(pf.model.coef).all()


def test_alpha_below_what_the_table_resolves_is_refused(tmp_path, capsys):
    from regbench.cli import main

    rng = np.random.default_rng(8)
    X = rng.normal(size=(50, 3))
    X = np.column_stack([X, X[:, 0] + X[:, 1]])  # exactly dependent
    assert np.linalg.matrix_rank(X - X.mean(axis=0)) == 3  # numpy: the dependency is exact
    y = X[:, 0] + rng.normal(size=50)
    d = design_from_arrays(X, y)
    with pytest.raises(ModelError, match="below what this table can resolve"):
        fit_models_at(d, FitSettings(alpha=1e-20))
    fit_models_at(d, FitSettings(alpha=1e-3))  # a resolvable α fits
    path = tmp_path / "t.csv"
    pd.DataFrame(X, columns=list("abcd")).assign(y=y).to_csv(path, index=False)
    assert main(["fit", str(path), "--target", "y", "--alpha", "1e-20"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "1e-20" in err[0] and "at least" in err[0]
    # A well-conditioned table resolves any α > 0 (ridge then approaches OLS).
    good = design_from_arrays(X[:, :3], y)
    fit_models_at(good, FitSettings(alpha=1e-20))


def test_cv_minimum_at_the_grid_edge_is_flagged(tmp_path):
    from sklearn.linear_model import LassoCV
    from sklearn.model_selection import PredefinedSplit

    from regbench.models.export import fit_summary_text, fit_to_json

    rng = np.random.default_rng(2)
    X = rng.normal(size=(400, 8))
    y = X @ np.arange(1, 9) + 0.01 * rng.normal(size=400)  # almost no noise: least shrinkage wins
    d = design_from_arrays(X, y)
    r = fit_all(d, FitSettings(n_penalties=30))
    lasso = r.penalized["lasso"]
    assert lasso.cv.at_edge and lasso.cv.alpha_min == lasso.cv.alphas.min()
    # scikit-learn LassoCV on the same folds and α grid also picks the grid's smallest α.
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    ref = LassoCV(alphas=lasso.cv.alphas, cv=PredefinedSplit(r.fold_ids), tol=1e-10, max_iter=100_000).fit(Z, y)
    assert ref.alpha_ == pytest.approx(lasso.cv.alphas.min())
    js = fit_to_json(d, r)
    assert js["models"]["lasso"]["cv"]["at_edge"] is True
    assert "smallest α tried" in fit_summary_text(d, r)


def test_screened_wide_path_matches_scikit_learn_enet_path():
    # Reference: scikit-learn enet_path on the rows standardized by mean and population SD, same α grid, a tight
    # tolerance (its default stops early). Our wide route screens columns by the sequential strong rules and checks the
    # rest; its fits must be the full problem's.
    from sklearn.linear_model import enet_path

    from regbench.models.gram import gram_stats
    from regbench.models.penalized import GAP_TOL, Problem, alpha_grid, duality_gaps, solve_beta

    X, y = wide(60, 400, seed=3)
    problem = Problem.from_stats(gram_stats(X, y, np.ones(60)))
    assert problem.wide
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    for rho in (1.0, 0.5, 0.1):
        grid = alpha_grid(problem.c, rho, 20, 1e-3)
        beta = solve_beta(problem, grid, rho)
        assert duality_gaps(problem, beta, grid, rho).max() <= GAP_TOL
        _, ref, _ = enet_path(Z, y - y.mean(), l1_ratio=rho, alphas=grid, tol=1e-14, max_iter=1_000_000)
        np.testing.assert_allclose(beta @ Z.T, ref.T @ Z.T, atol=1e-6 * y.std(), err_msg=f"ρ = {rho}")
        assert [int(np.count_nonzero(b)) for b in beta] == [int(np.count_nonzero(np.abs(r) > 1e-12)) for r in ref.T]


def test_wide_cross_validation_matches_scikit_learn_fold_by_fold():
    # Reference: for each fold, scikit-learn StandardScaler on the training rows and enet_path on them (same grid),
    # held-out mean squared error; the CV curve is their plain mean over folds, as LassoCV averages it.
    from sklearn.linear_model import enet_path
    from sklearn.preprocessing import StandardScaler

    X, y = wide(60, 400, seed=4)
    d = design_from_arrays(X, y)
    r = fit_all(d, FitSettings(n_penalties=15, folds=5))
    for name in ("lasso", "elastic_net"):
        pf = r.penalized[name]
        errors = []
        for k in range(5):
            tr, te = r.fold_ids != k, r.fold_ids == k
            sc = StandardScaler().fit(X[tr])
            _, coefs, _ = enet_path(sc.transform(X[tr]), y[tr] - y[tr].mean(), l1_ratio=pf.l1_ratio,
                                    alphas=pf.cv.alphas, tol=1e-14, max_iter=1_000_000)
            pred = y[tr].mean() + sc.transform(X[te]) @ coefs
            errors.append(np.mean((y[te][:, None] - pred) ** 2, axis=0))
        np.testing.assert_allclose(pf.cv.mean, np.mean(errors, axis=0), rtol=1e-6, err_msg=name)
        assert pf.convergence.converged

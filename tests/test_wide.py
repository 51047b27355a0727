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

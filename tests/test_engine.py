"""fit_all and the engine's exact refits, checked against scikit-learn and statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.linear_model import ElasticNet, Lasso, Ridge

from regbench.data import design_from_arrays
from regbench.errors import Cancelled, ModelError
from regbench.models.engine import fit_all, fit_models_at, heldout_predictions, model_at
from regbench.models.gram import GramStats, gram_stats
from regbench.models.results import FitSettings


def _design(seed=0, n=360, alias=True):
    rng = np.random.default_rng(seed)
    groups = rng.integers(0, 9, n)
    X = rng.normal(size=(n, 5)) * [2, 1, 4, 0.5, 3] + [20, 0, -5, 3, 50]
    X[:, 1] = 0.8 * X[:, 0] + rng.normal(0, 0.3, n)
    if alias:
        X = np.column_stack([X, 2.0 * X[:, 2] + 1.0])  # an exact alias OLS must set aside
    y = 1.0 + X[:, :5] @ [0.4, -0.3, 0.2, 0.0, 0.05] + rng.normal(0, 1.0, n)
    w = rng.uniform(0.5, 3.0, n)
    return design_from_arrays(X, y, weights=w, groups=groups)


def _std(X, w):
    W = w.sum()
    m = w @ X / W
    sd = np.sqrt(w @ (X - m) ** 2 / W)
    return m, sd, W


def _sk_fit(X, y, w, alpha, rho):
    """scikit-learn fit of our objective on rows (mapping as in tests/test_penalized.py)."""
    m, sd, W = _std(X, w)
    live = sd > 0
    Xs = (X[:, live] - m[live]) / sd[live]
    if rho == 0.0:
        est = Ridge(alpha=W * alpha).fit(Xs, y, sample_weight=w)
    elif rho == 1.0:
        est = Lasso(alpha=alpha, tol=1e-13, max_iter=500_000).fit(Xs, y, sample_weight=w * len(y) / W)
    else:
        est = ElasticNet(alpha=alpha, l1_ratio=rho, tol=1e-13, max_iter=500_000).fit(
            Xs, y, sample_weight=w * len(y) / W)
    coef = np.zeros(X.shape[1])
    coef[live] = est.coef_ / sd[live]
    return est.intercept_ - coef[live] @ m[live], coef


@pytest.fixture(scope="module")
def fitted():
    d = _design()
    return d, fit_all(d, FitSettings(folds=4, n_penalties=40, l1_ratios=(0.5, 0.9)))


def test_fit_all_returns_every_family_with_grouped_folds(fitted):
    d, r = fitted
    assert list(r.models()) == ["ols", "ridge", "lasso", "elastic_net", "elastic_net_0.9"]
    assert r.penalized["elastic_net_0.9"].l1_ratio == 0.9
    for g in np.unique(d.groups):
        assert np.unique(r.fold_ids[d.groups == g]).size == 1
    assert isinstance(r.gram, GramStats)
    np.testing.assert_allclose(r.gram.centered_xx(), gram_stats(d.X, d.y, d.weights).centered_xx(), rtol=1e-10)
    assert r.ols.set_aside and r.ols.set_aside[0].column == "x6"
    for pf in r.penalized.values():
        assert pf.alpha_rule == "cv_min" and pf.alpha == pf.cv.alpha_min
        assert pf.path.coef.shape == (40, d.p) and pf.cv.grouped


def test_chosen_model_equals_sklearn_at_that_alpha(fitted):
    d, r = fitted
    for name, pf in r.penalized.items():
        b0, coef = _sk_fit(d.X, d.y, d.weights, pf.alpha, pf.l1_ratio)
        # Source: scikit-learn on the standardized rows at the same α.  Between exactly aliased
        # columns (x3 and x6) the lasso may split weight differently, so compare predictions too.
        pred = pf.model.predict(d.X)
        np.testing.assert_allclose(pred, b0 + d.X @ coef, rtol=1e-7, atol=1e-6)
        if pf.l1_ratio < 1.0:
            np.testing.assert_allclose(pf.model.coef, coef, rtol=1e-5, atol=1e-7)


def test_model_at_is_exact_off_the_grid(fitted):
    d, r = fitted
    for name in ("ridge", "lasso", "elastic_net"):
        pf = r.penalized[name]
        alpha = float(np.sqrt(pf.path.alphas[10] * pf.path.alphas[11]))
        m = model_at(d, r, name, alpha)
        assert m.alpha == alpha and m.l1_ratio == pf.l1_ratio
        b0, coef = _sk_fit(d.X, d.y, d.weights, alpha, pf.l1_ratio)
        # Source: scikit-learn at the same α on the rows.
        np.testing.assert_allclose(m.predict(d.X), b0 + d.X @ coef, rtol=1e-7, atol=1e-6)
    assert model_at(d, r, "ols", 1.0) is r.ols.model
    with pytest.raises(ModelError, match="not a fitted model"):
        model_at(d, r, "elastic_net_0.3", 0.1)
    with pytest.raises(ModelError, match="positive"):
        model_at(d, r, "lasso", -1.0)


def test_fixed_alpha_and_one_se_rule():
    d = _design(seed=1)
    r = fit_all(d, FitSettings(folds=3, n_penalties=25, alpha=0.05))
    for pf in r.penalized.values():
        assert pf.alpha_rule == "fixed" and pf.alpha == 0.05 and pf.model.alpha == 0.05
        b0, coef = _sk_fit(d.X, d.y, d.weights, 0.05, pf.l1_ratio)
        np.testing.assert_allclose(pf.model.predict(d.X), b0 + d.X @ coef, rtol=1e-7, atol=1e-6)
    r1 = fit_all(d, FitSettings(folds=3, n_penalties=25, alpha_rule="cv_1se"))
    for pf in r1.penalized.values():
        assert pf.alpha_rule == "cv_1se" and pf.alpha == pf.cv.alpha_1se >= pf.cv.alpha_min


def test_heldout_predictions_equal_refits_without_each_fold(fitted):
    d, r = fitted
    models = r.models()
    held = heldout_predictions(d, r, models)
    assert set(held) == set(models)
    kept = [d.index(c) for c in r.ols.kept]
    for k in np.unique(r.fold_ids):
        tr, te = r.fold_ids != k, r.fold_ids == k
        # Source: statsmodels WLS on the columns OLS kept, fitted on the training rows.
        wls = sm.WLS(d.y[tr], sm.add_constant(d.X[tr][:, kept]), weights=d.weights[tr]).fit()
        np.testing.assert_allclose(held["ols"][te], wls.predict(sm.add_constant(d.X[te][:, kept], has_constant="add")),
                                   rtol=1e-8, atol=1e-8)
        for name in ("ridge", "lasso", "elastic_net"):
            m = models[name]
            b0, coef = _sk_fit(d.X[tr], d.y[tr], d.weights[tr], m.alpha, m.l1_ratio)
            # Source: scikit-learn refit on the training rows at the model's α.
            np.testing.assert_allclose(held[name][te], b0 + d.X[te] @ coef, rtol=1e-6, atol=1e-6)


def test_column_constant_in_a_training_fold_stays_exactly_zero_there():
    rng = np.random.default_rng(3)
    n = 240
    groups = np.repeat(np.arange(6), 40)
    X = rng.normal(size=(n, 3))
    X[:, 2] = np.where(groups == 0, rng.normal(size=n), 0.0)  # varies only inside group 0
    y = X @ [1.0, -1.0, 0.5] + rng.normal(size=n)
    d = design_from_arrays(X, y, groups=groups)
    r = fit_all(d, FitSettings(folds=3, n_penalties=20))
    k0 = r.fold_ids[0]
    tr = r.fold_ids != k0
    held = heldout_predictions(d, r, {"ridge": r.penalized["ridge"].model})
    b0, coef = _sk_fit(d.X[tr], d.y[tr], d.weights[tr], r.penalized["ridge"].alpha, 0.0)
    assert coef[2] == 0.0
    te = ~tr
    # Source: scikit-learn ridge on the training rows without the constant column.
    np.testing.assert_allclose(held["ridge"][te], b0 + d.X[te] @ coef, rtol=1e-8, atol=1e-8)


def test_fit_models_at_matches_model_at(fitted):
    d, r = fitted
    alphas = {name: pf.alpha for name, pf in r.penalized.items()}
    models = fit_models_at(d, r.settings, alphas)
    assert list(models) == list(r.models())
    np.testing.assert_allclose(models["ols"].coef, r.ols.model.coef, rtol=1e-12)
    for name in alphas:
        np.testing.assert_allclose(models[name].predict(d.X), r.models()[name].predict(d.X), rtol=1e-7, atol=1e-7)
    with pytest.raises(ModelError, match="no α given for ridge"):
        fit_models_at(d, r.settings, {"lasso": 0.1})


def test_progress_is_reported_and_cancel_stops():
    d = _design(seed=2)
    calls = []
    fit_all(d, FitSettings(folds=3, n_penalties=10), progress=lambda done, total, msg: calls.append((done, total, msg)))
    assert calls[0][0] == 0 and calls[-1][0] == calls[-1][1]
    assert [c[0] for c in calls] == sorted(c[0] for c in calls)
    asked = []

    def cancel():
        asked.append(1)
        return len(asked) >= 2

    with pytest.raises(Cancelled):
        fit_all(d, FitSettings(folds=3, n_penalties=10), cancel=cancel)
    assert len(asked) == 2


@pytest.mark.parametrize("settings,fragment", [
    (FitSettings(folds=1), "at least 2 folds"),
    (FitSettings(n_penalties=1), "at least 2 α"),
    (FitSettings(l1_ratios=(1.0,)), "outside"),
    (FitSettings(alpha=-2.0), "positive"),
    (FitSettings(alpha_rule="best"), "alpha_rule"),
    (FitSettings(folds=12), "only 9 groups for 12 folds"),
])
def test_bad_settings_are_refused(settings, fragment):
    with pytest.raises(ModelError, match=fragment):
        fit_all(_design(seed=4), settings)


def test_heldout_predictions_reuse_the_fits_fold_statistics(fitted, monkeypatch):
    from dataclasses import replace

    from regbench.models import engine

    d, r = fitted
    assert r.fold_stats is not None and len(r.fold_stats) == int(r.fold_ids.max()) + 1
    models = r.models()
    without = heldout_predictions(d, replace(r, fold_stats=None), models)  # a second pass over the rows
    calls = []
    monkeypatch.setattr(engine, "per_fold", lambda *a, **k: calls.append(1) or (_ for _ in ()).throw(AssertionError))
    held = heldout_predictions(d, r, models)
    assert not calls
    for name in models:
        # Source: the same refits from a fresh pass over the rows (bit for bit: the same sums).
        np.testing.assert_array_equal(held[name], without[name])

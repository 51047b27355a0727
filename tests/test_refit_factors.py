"""Refits at a fixed α by Cholesky factors against the eigen-decomposition route.

Sources: the eigen-decomposition of the standardized Gram, which solved every refit before
(ridge ``β = V diag(1/(λ+α)) Vᵀc``, OLS ``β = V diag(1/λ) Vᵀc`` with the rule λmin > λmax/limit
read from the eigenvalues), run on the same draws; scikit-learn's ``Ridge`` at the same α
(sklearn ``alpha`` = W·α on standardized columns, REFERENCES.md); and numpy's eigenvalues for
the condition rule.  Data: scikit-learn's diabetes table (``sklearn.datasets.load_diabetes``),
as it ships (442 × 10, taller than wide) and, for a wide table, its first 150 rows with every
product of up to three of its columns (285 columns); groups are consecutive blocks of rows.
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis import group_refits
from regbench.analysis.stability import bootstrap_stability
from regbench.data import design_from_arrays
from regbench.models import engine, penalized
from regbench.models.gram import gram_stats
from regbench.models.penalized import Problem, ridge_beta
from regbench.models.results import FitSettings


def _diabetes(wide: bool):
    from sklearn.datasets import load_diabetes
    from sklearn.preprocessing import PolynomialFeatures

    X, y = load_diabetes(return_X_y=True)
    if wide:
        X, y = X[:150], y[:150]
        X = PolynomialFeatures(degree=3, include_bias=False).fit_transform(X)
    groups = np.arange(X.shape[0]) * (15 if wide else 30) // X.shape[0]
    cols = tuple(f"x{j}" for j in range(X.shape[1]))
    return design_from_arrays(X, y, columns=cols, groups=groups)


def _eigen_solve(G, c, need_ill=True, factor=None):
    """The OLS refit as it was solved before: eigenvalues decide the rule, eigenvectors solve."""
    lam, V = np.linalg.eigh(G)
    return V @ ((V.T @ c) / lam), bool(lam[0] > lam[-1] / engine.GRAM_COND_LIMIT)


@pytest.mark.parametrize("wide", [False, True])
def test_refits_by_factors_equal_the_eigen_route(wide, monkeypatch):
    d = _diabetes(wide)
    settings = FitSettings()
    alphas = {"ridge": 0.5, "lasso": 0.4, "elastic_net": 0.6} if not wide else \
        {"ridge": 1.0, "lasso": 0.5, "elastic_net": 0.8}
    calls = {"eigen": 0}
    real_eigen = Problem.eigen

    def counted(self):
        calls["eigen"] += 1
        return real_eigen(self)

    monkeypatch.setattr(Problem, "eigen", counted)
    new = bootstrap_stability(d, settings, alphas, n_boot=30, seed=7, method="groups")
    if not wide:
        # A tall table's refits need no eigen-decomposition at all (a wide one's lasso screens by it).
        assert calls["eigen"] == 0
    with monkeypatch.context() as m:
        m.setattr(penalized, "RIDGE_FACTOR_MAX_ALPHAS", 0)
        m.setattr(group_refits, "gram_solve", _eigen_solve)
        old = bootstrap_stability(d, settings, alphas, n_boot=30, seed=7, method="groups")
    assert new.models == old.models
    for k in new.models:
        np.testing.assert_array_equal(new.selected_freq[k], old.selected_freq[k])
        scale = np.nanmax(np.abs(old.coef_draws[k]))
        np.testing.assert_allclose(new.coef_draws[k], old.coef_draws[k], rtol=0, atol=1e-9 * scale)
    np.testing.assert_array_equal(new.set_aside_freq, old.set_aside_freq)
    # Not a trivial comparison: lasso's choice varies between draws.
    assert np.any((new.selected_freq["lasso"] > 0) & (new.selected_freq["lasso"] < 1))
    if wide:
        # More columns than rows: OLS sets columns aside in every refit.
        assert new.set_aside_freq.max() == 1.0


@pytest.mark.parametrize("alpha", [1e-3, 0.3, 30.0])
def test_ridge_by_a_factor_matches_scikit_learn_and_the_eigen_route(alpha):
    from sklearn.linear_model import Ridge

    d = _diabetes(wide=False)
    problem = Problem.from_stats(gram_stats(d.X, d.y, d.weights))
    got = ridge_beta(problem, [alpha])[0]
    assert "pairs" not in problem._eig  # solved without the eigen-decomposition
    eig = ridge_beta(problem, np.array([alpha, alpha, alpha, alpha]))[0]  # four α: the eigen route
    np.testing.assert_allclose(got, eig, rtol=1e-10, atol=1e-12 * np.abs(eig).max())
    # Source: scikit-learn Ridge on the standardized columns with alpha = W·α (W = rows, unit weights).
    Z = (d.X - d.X.mean(axis=0)) / d.X.std(axis=0)
    ref = Ridge(alpha=d.n * alpha, solver="cholesky").fit(Z, d.y).coef_
    np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-11 * np.abs(ref).max())


def test_ridge_at_an_alpha_below_the_bound_takes_the_eigen_route():
    d = _diabetes(wide=False)
    problem = Problem.from_stats(gram_stats(d.X, d.y, d.weights))
    ridge_beta(problem, [1e-9])  # (‖G‖₁ + α)/α far above the bound
    assert "pairs" in problem._eig


def test_condition_rule_by_factor_agrees_with_the_eigenvalues():
    rng = np.random.default_rng(11)
    Q, _ = np.linalg.qr(rng.normal(size=(40, 40)))
    decided = []
    # Condition numbers on both sides of the limit and inside the band left to the eigenvalues.
    for kappa in (10.0, 1e4, 5e5, 3e6, 2e7, 1e9, 1e14):
        lam = np.geomspace(1.0 / kappa, 1.0, 40)
        G = (Q * lam) @ Q.T
        G = 0.5 * (G + G.T)
        c = G @ rng.normal(size=40)
        ev = np.linalg.eigvalsh(G)
        want = bool(ev[0] > ev[-1] / engine.GRAM_COND_LIMIT)  # the rule, from numpy's eigenvalues
        x, well = engine.gram_solve(G, c)
        assert well == want, kappa
        decided.append(well)
        if want:
            ref = np.linalg.solve(G, c)
            np.testing.assert_allclose(x, ref, rtol=0, atol=kappa * 1e-13 * np.abs(ref).max())
        y, well2 = engine.gram_solve(G, c, need_ill=False)
        assert well2 == want and (y is not None or not want)
    assert True in decided and False in decided

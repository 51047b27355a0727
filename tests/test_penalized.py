"""Ridge, lasso and elastic-net paths from the Gram, checked against scikit-learn and optimality.

Mapping to scikit-learn (stated once, used below).  Our objective is
``1/(2W)·Σ wᵢ(yᵢ − b₀ − x̃ᵢβ)² + α(ρ‖β‖₁ + (1−ρ)/2‖β‖²)`` on predictors x̃
standardized by weighted mean and weighted population SD.

* ``ElasticNet(alpha=α, l1_ratio=ρ)`` / ``Lasso(alpha=α)`` minimise
  ``1/(2n)·Σ sᵢ(yᵢ − b₀ − x̃ᵢβ)² + α(ρ‖β‖₁ + (1−ρ)/2‖β‖²)``; with
  ``sample_weight sᵢ = wᵢ·n/W`` the loss terms are identical, so the same α.
* ``Ridge(alpha=a)`` minimises ``Σ wᵢ(yᵢ − b₀ − x̃ᵢβ)² + a‖β‖²``; multiplying
  our ridge objective (ρ = 0) by 2W gives ``Σ wᵢ(…)² + Wα‖β‖²``, so ``a = W·α``.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_diabetes
from sklearn.linear_model import ElasticNet, Lasso, Ridge, lars_path

from regbench.models.gram import gram_stats
from regbench.models.penalized import (Problem, alpha_grid, alpha_max, enet_beta, fit_path, kkt_violation,
                                       ridge_beta)


def _data(n=300, p=6, seed=0, collinear=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * rng.uniform(0.5, 30, p) + rng.normal(0, 100, p)
    if collinear:
        X[:, 1] = 2.0 * X[:, 0] + rng.normal(0, 0.05, n)  # nearly the same column
        X[:, 3] = X[:, 2] - 0.5 * X[:, 4]  # an exact combination
    y = 5 + X @ rng.normal(0, 0.2, p) + rng.normal(0, 2, n)
    w = rng.uniform(0.3, 4.0, n)
    return X, y, w


def _standardize(X, y, w):
    W = w.sum()
    m = w @ X / W
    sd = np.sqrt(w @ (X - m) ** 2 / W)
    return (X - m) / sd, m, sd, W


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("rho", [1.0, 0.5, 0.2])
def test_enet_path_equals_sklearn_elasticnet_on_the_rows(weighted, rho):
    X, y, w = _data(seed=1)
    if not weighted:
        w = np.ones_like(w)
    n = len(y)
    Xs, m, sd, W = _standardize(X, y, w)
    problem = Problem.from_stats(gram_stats(X, y, w))
    alphas = alpha_grid(problem.c, rho, 30, 1e-3)
    beta = enet_beta(problem, alphas, rho)
    for i in (2, 10, 20, 29):
        est = ElasticNet(alpha=alphas[i], l1_ratio=rho, tol=1e-12, max_iter=200_000) if rho < 1 else \
            Lasso(alpha=alphas[i], tol=1e-12, max_iter=200_000)
        est.fit(Xs, y, sample_weight=w * n / W)
        # Source: scikit-learn ElasticNet/Lasso on the standardized rows (mapping in the module docstring).
        np.testing.assert_allclose(beta[i], est.coef_, rtol=1e-6, atol=1e-7)
        coef, b0 = problem.to_original(beta[i])
        assert b0 == pytest.approx(est.intercept_ - est.coef_ @ (m / sd), rel=1e-6, abs=1e-7)


@pytest.mark.parametrize("weighted", [False, True])
def test_ridge_equals_sklearn_ridge_with_alpha_times_W(weighted):
    X, y, w = _data(seed=2, collinear=True)
    if not weighted:
        w = np.ones_like(w)
    Xs, m, sd, W = _standardize(X, y, w)
    problem = Problem.from_stats(gram_stats(X, y, w))
    alphas = np.array([10.0, 0.3, 1e-3])
    beta = ridge_beta(problem, alphas)
    for a, b in zip(alphas, beta):
        ref = Ridge(alpha=W * a, solver="cholesky").fit(Xs, y, sample_weight=w)
        # Source: scikit-learn Ridge(alpha=W·α) on the standardized rows.
        np.testing.assert_allclose(b, ref.coef_, rtol=1e-7, atol=1e-8)


def test_ridge_closed_form():
    X, y, w = _data(seed=3)
    Xs, m, sd, W = _standardize(X, y, w)
    ybar = w @ y / W
    problem = Problem.from_stats(gram_stats(X, y, w))
    G = Xs.T @ (w[:, None] * Xs) / W
    c = Xs.T @ (w * (y - ybar)) / W
    for a in (5.0, 0.01):
        # Mathematical fact: the ridge minimiser solves (G + αI)β = c.
        np.testing.assert_allclose(ridge_beta(problem, [a])[0], np.linalg.solve(G + a * np.eye(len(c)), c),
                                   rtol=1e-9, atol=1e-11)


@pytest.mark.parametrize("rho", [1.0, 0.7, 0.5, 0.1])
def test_kkt_conditions_hold_at_every_alpha_of_the_path(rho):
    # Collinear on purpose: a near-copy and an exact combination, the product's everyday case.
    X, y, w = _data(n=500, p=7, seed=4, collinear=True)
    problem = Problem.from_stats(gram_stats(X, y, w))
    alphas = alpha_grid(problem.c, rho, 100, 1e-3)
    beta = enet_beta(problem, alphas, rho)
    for a, b in zip(alphas, beta):
        # Mathematical fact (optimality of the convex problem): with g = c − Gβ − α(1−ρ)β,
        # |g_j| ≤ αρ where β_j = 0 and g_j = αρ·sign(β_j) where β_j ≠ 0.
        assert kkt_violation(problem, b, a, rho) <= 1e-6 * a * rho + 1e-12


def test_kkt_detects_a_wrong_solution():
    X, y, w = _data(seed=5)
    problem = Problem.from_stats(gram_stats(X, y, w))
    a = alpha_grid(problem.c, 1.0, 10)[5]
    b = enet_beta(problem, [a], 1.0)[0]
    assert kkt_violation(problem, b, a, 1.0) < 1e-8
    assert kkt_violation(problem, b * 1.1, a, 1.0) > 1e-4


def test_alpha_max_is_the_smallest_alpha_that_zeroes_every_coefficient():
    X, y, w = _data(seed=6)
    problem = Problem.from_stats(gram_stats(X, y, w))
    for rho in (1.0, 0.5):
        top = alpha_max(problem.c, rho)
        # Mathematical fact: β = 0 is optimal iff |c_j| ≤ αρ for every j.
        assert np.all(enet_beta(problem, [top * (1 + 1e-9)], rho)[0] == 0.0)
        assert np.any(enet_beta(problem, [top * 0.99], rho)[0] != 0.0)
    # The ridge grid starts where an elastic net with ρ = 1e-3 would (documented convention).
    assert alpha_grid(problem.c, 0.0, 5)[0] == pytest.approx(np.max(np.abs(problem.c)) / 1e-3)
    g = alpha_grid(problem.c, 1.0, 50, 1e-4)
    assert g[0] == pytest.approx(alpha_max(problem.c, 1.0)) and g[-1] == pytest.approx(1e-4 * g[0])
    assert np.all(np.diff(np.log(g)) < 0) and np.allclose(np.diff(np.log(g)), np.log(1e-4) / 49)


def test_constant_column_stays_exactly_zero_on_every_path():
    X, y, w = _data(seed=7)
    X[:, 3] = 2.5
    stats = gram_stats(X, y, w)
    for rho in (0.0, 0.5, 1.0):
        path = fit_path(stats, "m", rho, alpha_grid(Problem.from_stats(stats).c, rho, 20), [f"x{j}" for j in range(6)])
        assert np.all(path.coef[:, 3] == 0.0) and np.all(path.coef_std[:, 3] == 0.0)
        assert np.any(path.coef[:, 0] != 0.0)


def test_original_units_reproduce_the_standardized_predictions():
    X, y, w = _data(seed=8)
    Xs, m, sd, W = _standardize(X, y, w)
    stats = gram_stats(X, y, w)
    path = fit_path(stats, "lasso", 1.0, alpha_grid(Problem.from_stats(stats).c, 1.0, 10), [f"x{j}" for j in range(6)])
    ybar = w @ y / W
    for i in range(10):
        # Mathematical fact: b₀ + X·coef = ȳ + X̃·β with coef = β/sd and b₀ = ȳ − Σ coef·mean.
        np.testing.assert_allclose(path.intercepts[i] + X @ path.coef[i], ybar + Xs @ path.coef_std[i],
                                   rtol=1e-10, atol=1e-9)


DIABETES_ENTRY_ORDER = ["bmi", "s5", "bp", "s3", "sex", "s6", "s1", "s4", "s2", "age"]
# Efron, Hastie, Johnstone & Tibshirani (2004), Least Angle Regression, Ann. Statist. 32(2),
# OLS end of the path on scikit-learn's scaled diabetes columns (REFERENCES.md item 4, from memory,
# reproduced with scikit-learn's lars_path).
DIABETES_OLS = {"age": -10.0, "sex": -239.8, "bmi": 519.8, "bp": 324.4, "s1": -792.2, "s2": 476.7,
                "s3": 101.0, "s4": 177.1, "s5": 751.3, "s6": 67.6}


def _first_entry(coefs_by_alpha, names):
    """Column names in the order they first become non-zero along a path (rows: α descending)."""
    first = [int(np.argmax(coefs_by_alpha[:, j] != 0)) if np.any(coefs_by_alpha[:, j] != 0) else 10**9
             for j in range(len(names))]
    return [names[j] for j in np.argsort(first, kind="stable")], first


def test_diabetes_lasso_entry_order_matches_efron_et_al_and_lars_path():
    data = load_diabetes()
    X, y, names = data.data, data.target, list(data.feature_names)
    problem = Problem.from_stats(gram_stats(X, y))
    alphas = alpha_grid(problem.c, 1.0, 400, 1e-5)
    beta = enet_beta(problem, alphas, 1.0)
    order, first = _first_entry(beta, names)
    assert len(set(first)) == len(first), "two columns entered between the same grid points"
    # Source: Efron et al. (2004), from memory (REFERENCES.md item 4).
    assert order == DIABETES_ENTRY_ORDER
    # Source: scikit-learn lars_path (method='lasso') on the same standardized data.
    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    _, _, lars_coefs = lars_path(Xs, y - y.mean(), method="lasso")
    lars_order, _ = _first_entry(lars_coefs.T, names)
    assert order == lars_order


def test_diabetes_path_ends_at_the_ols_fit():
    data = load_diabetes()
    X, y, names = data.data, data.target, list(data.feature_names)
    problem = Problem.from_stats(gram_stats(X, y))
    top = alpha_max(problem.c, 1.0)
    path_end = enet_beta(problem, alpha_grid(problem.c, 1.0, 100, 1e-4), 1.0)[-1]
    beta = enet_beta(problem, [1e-9 * top], 1.0, coef_init=path_end)[0]
    coef, b0 = problem.to_original(beta)
    # Source: Efron et al. (2004), rounded to 0.1 (REFERENCES.md item 4, from memory).
    assert b0 == pytest.approx(152.1, abs=0.05)
    for j, name in enumerate(names):
        assert coef[j] == pytest.approx(DIABETES_OLS[name], abs=0.06), name
    # Source: numpy least squares with an intercept on the same columns.
    ols = np.linalg.lstsq(np.column_stack([np.ones(len(y)), X]), y, rcond=None)[0]
    np.testing.assert_allclose(coef, ols[1:], rtol=1e-5, atol=1e-3)


def test_ridge_grid_reaches_the_least_squares_end():
    # A long table needs little shrinkage; the ridge path must reach α well below the
    # smallest eigenvalue of G so CV is not forced to its last grid point.
    X, y, w = _data(n=20_000, p=6, seed=9)
    problem = Problem.from_stats(gram_stats(X, y, w))
    grid = alpha_grid(problem.c, 0.0, 100, 1e-3, evals=problem.evals)
    assert grid[0] == pytest.approx(np.max(np.abs(problem.c)) / 1e-3)
    assert grid[-1] <= 1e-2 * problem.evals.min() * (1 + 1e-12)
    beta = ridge_beta(problem, grid[-1:])[0]
    ols = np.linalg.lstsq(np.column_stack([np.ones(len(y)), X]) * np.sqrt(w)[:, None], y * np.sqrt(w), rcond=None)[0]
    ols_std = ols[1:] * problem.sd
    # Mathematical fact: ridge shrinks each eigen-direction of G by λᵢ/(λᵢ+α) ≥ 0.99 here, so the
    # standardized coefficients are within 1% (in norm) of weighted least squares (numpy lstsq on
    # √w-scaled rows).
    assert np.linalg.norm(beta - ols_std) <= 1e-2 * np.linalg.norm(ols_std)
    assert np.linalg.norm(beta - ols_std) > 0
    # Lasso and elastic net grids ignore the eigenvalues.
    np.testing.assert_array_equal(alpha_grid(problem.c, 0.5, 10, 1e-3, evals=problem.evals),
                                  alpha_grid(problem.c, 0.5, 10, 1e-3))


def test_lasso_puts_an_exact_copy_on_one_column():
    # x4 is x1 in other units (an exact alias after standardizing): any split of their weight is
    # an optimum of the lasso; the engine keeps it on the first column.
    X, y, w = _data(n=400, p=4, seed=10)
    X = np.column_stack([X, 32.0 + 1.8 * X[:, 0]])
    Xs, m, sd, W = _standardize(X, y, w)
    problem = Problem.from_stats(gram_stats(X, y, w))
    alphas = alpha_grid(problem.c, 1.0, 40)
    beta = enet_beta(problem, alphas, 1.0)
    assert np.all(beta[:, 4] == 0.0) and np.any(beta[:, 0] != 0.0)
    for a, b in zip(alphas, beta):
        # Mathematical fact: the KKT conditions still hold after moving the weight.
        assert kkt_violation(problem, b, a, 1.0) <= 1e-6 * a + 1e-12
    est = Lasso(alpha=alphas[20], tol=1e-12, max_iter=200_000).fit(Xs, y, sample_weight=w * len(y) / W)
    # Source: scikit-learn Lasso on the standardized rows; the two copies together carry the same weight.
    assert beta[20, 0] == pytest.approx(est.coef_[0] + est.coef_[4], rel=1e-6)
    np.testing.assert_allclose(beta[20, 1:4], est.coef_[1:4], rtol=1e-6, atol=1e-8)
    # Elastic net's unique solution splits evenly between the copies (mathematical fact).
    b = enet_beta(problem, [alphas[20]], 0.5)[0]
    assert b[0] == pytest.approx(b[4], rel=1e-8) and b[0] != 0.0

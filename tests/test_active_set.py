"""The active-set lasso / elastic-net solver against scikit-learn and the optimality conditions."""

import numpy as np
import pytest
from sklearn.datasets import load_diabetes
from sklearn.linear_model import enet_path

from regbench.models.active_set import enet_path_gram
from regbench.models.gram import gram_stats
from regbench.models.penalized import Problem, alpha_grid, duality_gaps, kkt_violation


def _diabetes():
    d = load_diabetes()
    return d.data, d.target


@pytest.mark.parametrize("rho", [1.0, 0.5, 0.1])
def test_diabetes_path_matches_scikit_learn(rho):
    # Reference: scikit-learn enet_path on the columns standardized by mean and population SD (the
    # diabetes data ship with scikit-learn), same α grid, a very tight tolerance.
    X, y = _diabetes()
    pr = Problem.from_stats(gram_stats(X, y))
    grid = alpha_grid(pr.c, rho, 60, 1e-3)
    ours = enet_path_gram(pr.G, pr.c, grid, rho)
    assert ours is not None
    Z = (X - X.mean(0)) / X.std(0)
    _, ref, _ = enet_path(Z, y - y.mean(), l1_ratio=rho, alphas=grid, tol=1e-14, max_iter=1_000_000)
    assert np.max(np.abs(ours - ref.T)) <= 1e-6 * np.max(np.abs(ref))
    # Mathematical fact: the exact optimum meets every KKT condition and has a duality gap of round-off.
    for i in range(grid.size):
        assert kkt_violation(pr, ours[i], grid[i], rho) <= 1e-10 * np.max(np.abs(pr.c))
    assert np.max(duality_gaps(pr, ours, grid, rho)) <= 1e-12


def test_lasso_entry_order_on_diabetes():
    # Efron, Hastie, Johnstone & Tibshirani (2004), Least Angle Regression (from memory, reproduced with
    # scikit-learn's lars_path): on the standardized data the lasso brings columns in as
    # bmi, s5, bp, s3, sex, s6, s1, s4, s2, age.
    X, y = _diabetes()
    pr = Problem.from_stats(gram_stats(X, y))
    grid = alpha_grid(pr.c, 1.0, 400, 1e-4)
    path = enet_path_gram(pr.G, pr.c, grid, 1.0)
    names = list(load_diabetes().feature_names)
    first = {}
    for i in range(grid.size):
        for j in np.flatnonzero(path[i]):
            first.setdefault(names[j], i)
    order = sorted(first, key=lambda k: first[k])
    assert order[:4] == ["bmi", "s5", "bp", "s3"]
    assert set(order) == set(names)


def test_warm_start_and_order_of_alphas_do_not_matter():
    X, y = _diabetes()
    pr = Problem.from_stats(gram_stats(X, y))
    grid = alpha_grid(pr.c, 0.5, 30, 1e-3)
    down = enet_path_gram(pr.G, pr.c, grid, 0.5)
    shuffled = np.random.default_rng(0).permutation(grid.size)
    again = enet_path_gram(pr.G, pr.c, grid[shuffled], 0.5, init=down[-1])
    assert np.allclose(again, down[shuffled], rtol=0, atol=1e-10)


def test_copies_and_dead_columns():
    # An exact copy and a column with no spread: the lasso keeps the copy's weight where the optimality
    # conditions allow (any split is optimal); a dead column (G_jj = 0) stays at 0.
    rng = np.random.default_rng(3)
    X = rng.normal(size=(300, 4))
    X = np.column_stack([X, X[:, 0]])
    y = X[:, 0] - 0.5 * X[:, 1] + rng.normal(0, 0.5, 300)
    pr = Problem.from_stats(gram_stats(X, y))
    G = np.zeros((6, 6))
    G[:5, :5] = pr.G
    c = np.append(pr.c, 0.0)
    grid = alpha_grid(pr.c, 1.0, 20, 1e-3)
    path = enet_path_gram(G, c, grid, 1.0)
    if path is None:  # the caller falls back to coordinate descent: allowed, never a wrong answer
        return
    assert np.all(path[:, 5] == 0.0)
    for i in range(grid.size):
        assert kkt_violation(pr, path[i, :5], grid[i], 1.0) <= 1e-9

"""Statistics gathered block by block (streamed or distributed rows) against the rows at once.

Sources: NIST StRD certified values (Longley, Wampler1, Wampler2; from memory, as
/work/shared/REFERENCES.md records them), numpy two-pass sums on the rows, and the
in-memory route of this package (which the other test files check against statsmodels).
NIST StRD Filip is not checked: no registry package installed here ships its 82 rows
and they are not reproduced from memory.
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.data import design_from_arrays
from regbench.models.gram import FactorAccumulator, FoldAccumulator, GramStats, merge, per_fold
from regbench.models.ols import factor_rows, fit_ols

LONGLEY_COLS = ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR")


def rel_err(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return np.max(np.abs(a - b) / np.abs(b))


def _blocks(n, size):
    return [slice(a, min(a + size, n)) for a in range(0, n, size)]


def _factor_in_blocks(X, y, w, size):
    acc = FactorAccumulator(X.shape[1])
    for sl in _blocks(X.shape[0], size):
        acc.add(X[sl], y[sl], w[sl])
    return acc


def _longley():
    import statsmodels.api as sm

    data = sm.datasets.longley.load_pandas()
    assert tuple(data.exog.columns) == LONGLEY_COLS
    return data.exog.to_numpy(), data.endog.to_numpy()


@pytest.mark.parametrize("size", [3, 5, 16])
def test_longley_from_blocks_of_rows_matches_nist_to_9_digits(size):
    X, y = _longley()
    w = np.ones(len(y))
    acc = _factor_in_blocks(X, y, w, size)
    design = design_from_arrays(X, y, columns=LONGLEY_COLS)
    r = fit_ols(design, factor=factor_rows(acc.factor(), acc.W, acc.n))
    # NIST StRD Longley certified values (from memory, as in REFERENCES.md).
    b = [15.0618722713733, -0.0358191792925910, -2.02022980381683, -1.03322686717359,
         -0.0511041056535807, 1829.15146461355]
    se = [84.9149257747669, 0.0334910077722432, 0.488399681651699, 0.214274163161675,
          0.226073200069370, 455.478499142212]
    assert r.kept == LONGLEY_COLS
    assert rel_err(r.coef, b) < 1e-9
    assert rel_err(r.std_errors, se) < 1e-9
    assert rel_err(r.intercept, -3482258.63459582) < 1e-9
    assert rel_err(r.residual_sd, 304.854073561965) < 1e-9
    assert abs(r.r_squared - 0.995479004577296) < 1e-10


def test_longley_gram_in_blocks_of_3_gives_the_certified_fit_to_9_digits():
    # The Gram route (normal equations on the standardized co-moments) on Longley, blocks of 3.
    X, y = _longley()
    acc = FoldAccumulator(X.shape[1])
    for sl in _blocks(len(y), 3):
        acc.add(X[sl], y[sl], np.ones(sl.stop - sl.start))
    full, _ = acc.result()
    G, c, mean, sd = full.standardized()
    beta = np.linalg.solve(G, c) / sd
    b = [15.0618722713733, -0.0358191792925910, -2.02022980381683, -1.03322686717359,
         -0.0511041056535807, 1829.15146461355]
    # NIST StRD Longley certified values (from memory).
    assert rel_err(beta, b) < 1e-9
    assert rel_err(full.mean_y() - beta @ mean, -3482258.63459582) < 1e-9


@pytest.mark.parametrize("coefs", [
    (1, 1, 1, 1, 1, 1),  # NIST Wampler1 defining formula (from memory, REFERENCES.md)
    (1, 0.1, 0.01, 0.001, 1e-4, 1e-5),  # NIST Wampler2 defining formula (from memory, REFERENCES.md)
])
def test_wampler_from_blocks_of_3_rows(coefs):
    x = np.arange(21.0)
    X = np.column_stack([x ** k for k in range(1, 6)])
    y = sum(c * x ** k for k, c in enumerate(coefs))
    acc = _factor_in_blocks(X, y, np.ones(21), 3)
    design = design_from_arrays(X, y, columns=tuple(f"x^{k}" for k in range(1, 6)))
    r = fit_ols(design, factor=factor_rows(acc.factor(), acc.W, acc.n))
    # Certified: every column in the model, coefficients as in the formula, residual SD 0.
    assert r.set_aside == () and r.rank == 5
    assert rel_err(r.coef, coefs[1:]) < 1e-8
    assert abs(r.intercept - 1.0) < 1e-8


def _data(n=700, p=6, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * np.arange(1, p + 1) + rng.normal(0, 1e4, p)  # far from zero
    X[:, -1] = 0.5 * (X[:, 0] + X[:, 1])  # an exact alias
    y = X[:, :3] @ [1.0, -2.0, 0.5] + rng.normal(size=n)
    w = rng.uniform(0.0, 3.0, n)
    w[::17] = 0.0
    return X, y, w


def test_blocked_factor_gives_the_same_ols_as_the_rows():
    X, y, w = _data()
    cols = tuple(f"c{j}" for j in range(X.shape[1]))
    design = design_from_arrays(X, y, columns=cols, weights=w)
    direct = fit_ols(design)
    acc = _factor_in_blocks(X, y, w, 37)
    r = fit_ols(design, factor=factor_rows(acc.factor(), acc.W, acc.n))
    # Source: the in-memory route (rows factored at once and refined on residuals).
    assert r.kept == direct.kept and [s.column for s in r.set_aside] == [s.column for s in direct.set_aside]
    np.testing.assert_allclose(r.coef, direct.coef, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(r.std_errors[np.isfinite(direct.std_errors)],
                               direct.std_errors[np.isfinite(direct.std_errors)], rtol=1e-9)
    assert r.residual_sd == pytest.approx(direct.residual_sd, rel=1e-9)
    assert r.set_aside[0].residual == pytest.approx(direct.set_aside[0].residual, abs=1e-9 * X[:, -1].std())


def test_merged_fold_statistics_equal_the_one_pass_statistics():
    X, y, w = _data(seed=1)
    ids = np.random.default_rng(2).integers(0, 4, X.shape[0])
    full, folds = per_fold(X, y, w, ids, 4)
    acc = FoldAccumulator(X.shape[1], 4)
    for sl in _blocks(X.shape[0], 3):
        acc.add(X[sl], y[sl], w[sl], ids[sl])
    f2, folds2 = acc.result()
    # Source: per_fold, the in-memory one pass (checked against numpy in test_gram.py).
    np.testing.assert_allclose(f2.centered_xx(), full.centered_xx(), rtol=1e-10, atol=1e-6)
    for a, b in zip(folds, folds2):
        t1, t2 = full - a, f2 - b
        assert t2.n == t1.n
        np.testing.assert_allclose(t2.mean_x(), t1.mean_x(), rtol=1e-13)
        np.testing.assert_allclose(t2.centered_xx(), t1.centered_xx(), rtol=1e-10, atol=1e-6)
        np.testing.assert_allclose(t2.centered_xy(), t1.centered_xy(), rtol=1e-10, atol=1e-6)


def test_pairwise_update_keeps_digits_where_raw_sums_cancel():
    # Two blocks far from zero (mean 1e8, spread 1): raw Σx² would lose every digit of the
    # variance (1e16 against 1); the centred update keeps it.  Source: numpy two-pass variance.
    rng = np.random.default_rng(3)
    x = 1e8 + rng.normal(size=(400, 1))
    y = rng.normal(size=400)
    w = np.ones(400)
    acc = FoldAccumulator(1)
    for sl in _blocks(400, 3):
        acc.add(x[sl], y[sl], w[sl])
    full, _ = acc.result()
    direct = ((x - x.mean()) ** 2).sum()
    raw = (x * x).sum() - (x.sum()) ** 2 / 400
    # Each block mean carries round-off of an ulp of 1e8 (1.5e-8), which bounds the update's
    # accuracy near 1e-9 here; the raw sums are off by far more.
    assert full.centered_xx()[0, 0] == pytest.approx(direct, rel=1e-8)
    assert abs(raw - direct) > 1e3 * abs(full.centered_xx()[0, 0] - direct)
    a = FoldAccumulator(1)
    a.add(x[:150], y[:150], w[:150])
    b = FoldAccumulator(1)
    b.add(x[150:], y[150:], w[150:])
    merged, _ = a.combine(b).result()
    assert merged.centered_xx()[0, 0] == pytest.approx(direct, rel=1e-10)


def test_merge_of_differently_shifted_statistics():
    from regbench.models.gram import gram_stats

    X, y, w = _data(n=300, seed=4)
    a = gram_stats(X[:100], y[:100], w[:100])
    b = gram_stats(X[100:], y[100:], w[100:])
    assert isinstance(a + b, GramStats)
    whole = gram_stats(X, y, w)
    m = merge(a, b)
    # Source: the statistics of all rows at once.
    np.testing.assert_allclose(m.centered_xx(), whole.centered_xx(), rtol=1e-11, atol=1e-6)
    np.testing.assert_allclose(m.mean_x(), whole.mean_x(), rtol=1e-14)
    assert m.centered_yy() == pytest.approx(whole.centered_yy(), rel=1e-12)


@pytest.mark.parametrize("alias", [0.0, 1e-9])
def test_block_factor_matches_householder_qr(alias):
    # Source: LAPACK's Householder QR (scipy's geqrf) of the same block; R is unique up to row signs.
    from regbench.models.gram import block_factor
    from regbench.models.ols import r_factor

    rng = np.random.default_rng(3)
    Z = rng.normal(size=(900, 12)) * np.logspace(-3, 4, 12) + rng.normal(0, 1e3, 12)
    if alias:
        Z[:, 7] = Z[:, 3] + alias * rng.normal(size=900)  # nearly aliased: the Householder route
    Z -= Z.mean(axis=0)  # centred, as the accumulator factors its blocks
    want = r_factor(np.asfortranarray(Z))
    got = block_factor(np.asfortranarray(Z))
    norms = np.linalg.norm(Z, axis=0)
    # Backward error: RᵀR reproduces ZᵀZ to round-off relative to the columns' lengths.
    assert np.max(np.abs(got.T @ got - Z.T @ Z) / np.outer(norms, norms)) < 1e-14
    if not alias:
        # Well-conditioned (Cholesky QR route): the same R as Householder's, column by column.
        assert np.max(np.abs(np.abs(got) - np.abs(want)) / norms) < 1e-13

"""OLS whose factor comes from the engine's cross-products (well-conditioned columns).

Sources: NIST StRD certified values for Longley and Wampler1 (from memory, as
/work/shared/REFERENCES.md records them), statsmodels WLS on scikit-learn's diabetes data,
and the QR-of-the-rows route of this package (which tests/test_ols.py checks against
statsmodels).  The same statistics reach OLS in memory and from a streamed pass, so the two
routes take the same factor.
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.data import design_from_arrays
from regbench.errors import ModelError
from regbench.models.gram import FactorAccumulator, FoldAccumulator, gram_stats
from regbench.models.ols import factor_from_stats, factor_rows, fit_ols

LONGLEY_COLS = ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR")
# NIST StRD Longley certified values (from memory, as in REFERENCES.md).
LONGLEY_B = [15.0618722713733, -0.0358191792925910, -2.02022980381683, -1.03322686717359,
             -0.0511041056535807, 1829.15146461355]
LONGLEY_SE = [84.9149257747669, 0.0334910077722432, 0.488399681651699, 0.214274163161675,
              0.226073200069370, 455.478499142212]


def rel_err(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return np.max(np.abs(a - b) / np.abs(b))


def _longley():
    import statsmodels.api as sm

    data = sm.datasets.longley.load_pandas()
    assert tuple(data.exog.columns) == LONGLEY_COLS
    return data.exog.to_numpy(), data.endog.to_numpy()


def _stats_in_blocks(X, y, w, size):
    acc = FoldAccumulator(X.shape[1])
    rac = FactorAccumulator(X.shape[1])
    for a in range(0, len(y), size):
        sl = slice(a, a + size)
        acc.add(X[sl], y[sl], w[sl])
        rac.add(X[sl], y[sl], w[sl])
    return acc.result()[0], rac


def _assert_longley(r):
    assert r.kept == LONGLEY_COLS
    assert rel_err(r.coef, LONGLEY_B) < 1e-9
    assert rel_err(r.std_errors, LONGLEY_SE) < 1e-9
    assert rel_err(r.intercept, -3482258.63459582) < 1e-9
    assert rel_err(r.residual_sd, 304.854073561965) < 1e-9
    assert abs(r.r_squared - 0.995479004577296) < 1e-10


def test_longley_from_the_cross_products_matches_nist_to_9_digits():
    X, y = _longley()
    design = design_from_arrays(X, y, columns=LONGLEY_COLS)
    stats = gram_stats(X, y)
    # Longley's centred columns have a condition number of about 110: the Cholesky route is taken.
    assert factor_from_stats(stats, design) is not None
    _assert_longley(fit_ols(design, stats=stats))


@pytest.mark.parametrize("size", [3, 5])
def test_longley_streamed_in_blocks_takes_the_same_factor_and_matches_nist(size):
    X, y = _longley()
    design = design_from_arrays(X, y, columns=LONGLEY_COLS)
    full, rac = _stats_in_blocks(X, y, np.ones(len(y)), size)
    streamed = fit_ols(design, factor=factor_rows(rac.factor(), rac.W, rac.n), stats=full)
    _assert_longley(streamed)
    in_memory = fit_ols(design, stats=gram_stats(X, y))
    np.testing.assert_allclose(streamed.r_factor, in_memory.r_factor, rtol=1e-12, atol=1e-12 * np.abs(
        in_memory.r_factor).max())


def test_badly_conditioned_columns_keep_the_qr_of_the_rows():
    # NIST Wampler1 (y = 1 + x + … + x⁵ on x = 0…20, from memory): powers of x are far beyond
    # the condition number the cross-products may carry, so the rows are factored.
    x = np.arange(21.0)
    X = np.column_stack([x ** k for k in range(1, 6)])
    y = 1 + X.sum(axis=1)
    design = design_from_arrays(X, y, columns=tuple(f"x^{k}" for k in range(1, 6)))
    stats = gram_stats(X, y)
    assert factor_from_stats(stats, design) is None
    r = fit_ols(design, stats=stats)
    assert r.set_aside == () and r.rank == 5
    assert rel_err(r.coef, np.ones(5)) < 1e-8


def _weighted_diabetes():
    from sklearn.datasets import load_diabetes

    X, y = load_diabetes(return_X_y=True)
    w = np.random.default_rng(3).uniform(0.5, 2.0, len(y))
    return X, y, w


def test_weighted_fit_from_the_cross_products_equals_statsmodels_wls():
    import statsmodels.api as sm

    X, y, w = _weighted_diabetes()
    cols = tuple(f"c{j}" for j in range(X.shape[1]))
    design = design_from_arrays(X, y, weights=w, columns=cols)
    stats = gram_stats(X, y, w)
    assert factor_from_stats(stats, design) is not None
    r = fit_ols(design, stats=stats)
    ref = sm.WLS(y, sm.add_constant(X), weights=w).fit()  # statsmodels: the reference weighted fit
    np.testing.assert_allclose(r.coef, ref.params[1:], rtol=1e-10)
    np.testing.assert_allclose(r.intercept, ref.params[0], rtol=1e-10)
    np.testing.assert_allclose(r.std_errors, ref.bse[1:], rtol=1e-9)
    np.testing.assert_allclose(r.intercept_se, ref.bse[0], rtol=1e-9)
    np.testing.assert_allclose(r.r_squared, ref.rsquared, rtol=1e-12)


def test_the_cholesky_factor_gives_the_ols_of_the_qr_of_the_rows():
    X, y, w = _weighted_diabetes()
    cols = tuple(f"c{j}" for j in range(X.shape[1]))
    design = design_from_arrays(X, y, weights=w, columns=cols)
    a = fit_ols(design, stats=gram_stats(X, y, w))
    b = fit_ols(design)  # the blocked QR of the rows
    for field in ("coef", "std_errors", "p_values", "ci_low", "ci_high"):
        np.testing.assert_allclose(getattr(a, field), getattr(b, field), rtol=1e-9, err_msg=field)
    # The factors agree up to the signs of their rows.
    np.testing.assert_allclose(np.abs(a.r_factor), np.abs(b.r_factor), rtol=1e-9,
                               atol=1e-12 * np.abs(b.r_factor).max())


def test_aliased_or_constant_columns_and_a_bad_row_go_to_the_rows():
    X, y, w = _weighted_diabetes()
    cols = tuple(f"c{j}" for j in range(X.shape[1] + 1))
    aliased = np.column_stack([X, 0.5 * (X[:, 0] + X[:, 1])])
    design = design_from_arrays(aliased, y, weights=w, columns=cols)
    assert factor_from_stats(gram_stats(aliased, y, w), design) is None
    r = fit_ols(design, stats=gram_stats(aliased, y, w))
    assert [s.column for s in r.set_aside] == ["c10"]

    const = np.column_stack([X, np.full(len(y), 7.0)])
    design = design_from_arrays(const, y, weights=w, columns=cols)
    assert factor_from_stats(gram_stats(const, y, w), design) is None

    bad = X.copy()
    bad[4, 2] = np.inf
    design = design_from_arrays(bad, y, weights=w, columns=cols[:-1])
    with np.errstate(invalid="ignore"):
        stats = gram_stats(bad, y, w)
    with pytest.raises(ModelError, match="row 5: column 'c2' is not a finite number"):
        fit_ols(design, stats=stats)


@pytest.mark.parametrize("which", ["diabetes", "longley", "near_alias"])
def test_every_column_kept_read_from_the_triangle_is_the_walks_answer(which, monkeypatch):
    from regbench.models import ols

    if which == "longley":
        X, y = _longley()
        w = np.ones(len(y))
    else:
        X, y, w = _weighted_diabetes()
        if which == "near_alias":
            # A column the others reproduce up to a left-over near the rank tolerance: the
            # triangle cannot tell it clearly, so the walk decides.
            X = np.column_stack([X, X[:, 0] - X[:, 1] + 1e-13 * np.random.default_rng(1).normal(size=len(y))])
    cols = tuple(f"c{j}" for j in range(X.shape[1]))
    design = design_from_arrays(X, y, weights=w, columns=cols)
    answers = []
    reader = ols._every_column_kept
    monkeypatch.setattr(ols, "_every_column_kept", lambda *a: answers.append(reader(*a)) or answers[-1])
    read = fit_ols(design)
    assert answers == [which != "near_alias"]
    monkeypatch.setattr(ols, "_every_column_kept", lambda *a: False)
    walked = fit_ols(design)
    assert read.kept == walked.kept
    np.testing.assert_array_equal(read.coef, walked.coef)
    if which == "near_alias":
        assert [s.column for s in walked.set_aside] == [cols[-1]]


def test_a_design_without_columns_fits_the_weighted_mean_from_the_cross_products():
    y = np.arange(20.0)
    w = np.linspace(0.5, 2.0, 20)
    design = design_from_arrays(np.zeros((20, 0)), y, weights=w, columns=())
    r = fit_ols(design, stats=gram_stats(np.zeros((20, 0)), y, w))
    # Source: the weighted mean computed by numpy.
    assert r.rank == 0 and r.intercept == pytest.approx(np.average(y, weights=w), rel=1e-14)

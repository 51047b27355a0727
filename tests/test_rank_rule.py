"""The rank rule is offset- and scale-free; "exactly" means the rounding of the stored numbers.

Reference: exact least squares in rational arithmetic (Python's ``fractions``) on the float64
values the design stores, so the truth about each leftover is known without round-off.  Also
statsmodels OLS for the coefficients of the kept columns, and statsmodels
``cov_type="cluster"`` for the cluster-robust standard errors.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from regbench.data import design_from_arrays
from regbench.models.ols import fit_ols
from regbench.sentences import set_aside_sentence


def exact_leftover(X, y):
    """RMS of what least squares of ``y`` on ``[1, X]`` leaves, in exact rational arithmetic."""
    n, p = X.shape
    A = [[Fraction(1)] + [Fraction(float(v)) for v in row] for row in X]
    b = [Fraction(float(v)) for v in y]
    k = p + 1
    # Normal equations solved exactly (no round-off in rationals).
    M = [[sum(A[i][r] * A[i][c] for i in range(n)) for c in range(k)] for r in range(k)]
    v = [sum(A[i][r] * b[i] for i in range(n)) for r in range(k)]
    for col in range(k):
        piv = next(r for r in range(col, k) if M[r][col] != 0)
        M[col], M[piv] = M[piv], M[col]
        v[col], v[piv] = v[piv], v[col]
        for r in range(k):
            if r != col and M[r][col] != 0:
                f = M[r][col] / M[col][col]
                M[r] = [a - f * c for a, c in zip(M[r], M[col])]
                v[r] -= f * v[col]
    beta = [v[r] / M[r][r] for r in range(k)]
    res = [b[i] - sum(A[i][r] * beta[r] for r in range(k)) for i in range(n)]
    return float(sum(e * e for e in res) / n) ** 0.5, [float(x) for x in beta]


@pytest.fixture(scope="module")
def offset_case():
    rng = np.random.default_rng(4)
    n = 40
    x1 = rng.normal(size=n)
    z = rng.normal(size=n)
    near = 1e8 + x1 + 0.01 * z  # not a combination: 0.01·z is left over
    alias = 1e8 + x1  # a combination up to the rounding of the stored numbers
    y = 2.0 + x1 + 1.1 * near - 1.1e8 + rng.normal(0, 0.05, n)
    return x1, near, alias, y


def test_offset_column_with_real_leftover_is_kept(offset_case):
    x1, near, alias, y = offset_case
    d = design_from_arrays(np.column_stack([x1, near]), y, columns=("x1", "x2"))
    r = fit_ols(d)
    assert r.set_aside == () and r.kept == ("x1", "x2")
    left, _ = exact_leftover(x1[:, None], near)  # fractions: the true leftover of x2 given x1
    assert left > 1e-3  # far above the rounding of numbers near 1e8 (about 7e-9)
    # Coefficients agree with exact rational least squares on the stored values.
    _, beta = exact_leftover(np.column_stack([x1, near]), y)
    # Predictions in original units round at eps·1e8 per row; against a spread of 0.01 that
    # bounds the agreement near 1e-6 (x1 and x2 overlap, which amplifies it a little).
    np.testing.assert_allclose(r.coef, beta[1:], rtol=1e-5)


def test_exact_alias_with_offset_is_set_aside_and_called_exact(offset_case):
    x1, near, alias, y = offset_case
    d = design_from_arrays(np.column_stack([x1, alias]), y, columns=("x1", "x2"))
    r = fit_ols(d)
    (sa,) = r.set_aside
    left, _ = exact_leftover(x1[:, None], alias)
    # fractions: what is left is the rounding of the stored numbers (half an ulp of 1e8 at most).
    assert left <= 0.5 * np.spacing(1e8)
    assert sa.column == "x2" and sa.exact and sa.reason == "combination"
    assert sa.residual == pytest.approx(left, rel=0.05, abs=1e-9)
    assert "exactly" in set_aside_sentence(sa) and "100,000,000 + x1" in set_aside_sentence(sa)


def test_rank_decisions_do_not_depend_on_offset_or_units(offset_case):
    x1, near, alias, y = offset_case
    base = fit_ols(design_from_arrays(np.column_stack([x1, near - 1e8]), y, columns=("x1", "x2")))
    for shift, unit in ((0.0, 1.0), (1e6, 1.0), (0.0, 1e-6), (-3e7, 1e3)):
        X = np.column_stack([x1, (near - 1e8) * unit + shift])
        r = fit_ols(design_from_arrays(X, y, columns=("x1", "x2")))
        assert r.kept == base.kept
        assert r.coef[1] * unit == pytest.approx(base.coef[1], rel=1e-6)


def test_row_count_does_not_widen_the_tolerance_into_a_real_signal():
    # 20,000 rows, x2 = 1e8 + x1 + 0.01·z: statsmodels OLS finds x2's coefficient well determined.
    import statsmodels.api as sm

    rng = np.random.default_rng(11)
    n = 20_000
    x1, z = rng.normal(size=n), rng.normal(size=n)
    x2 = 1e8 + x1 + 0.01 * z
    y = x1 + 1.0 * (x2 - 1e8) + rng.normal(size=n)
    r = fit_ols(design_from_arrays(np.column_stack([x1, x2]), y, columns=("x1", "x2")))
    assert r.set_aside == ()
    ref = sm.OLS(y, sm.add_constant(np.column_stack([x1, x2 - 1e8]))).fit()
    assert r.coef[1] == pytest.approx(ref.params[2], rel=1e-5)
    assert abs(r.t_values[1]) == pytest.approx(abs(ref.tvalues[2]), rel=1e-5)


def test_nist_and_hald_still_keep_every_column():
    import statsmodels.api as sm

    # NIST StRD Longley (statsmodels ships the data): ill-conditioned but of full rank.
    data = sm.datasets.longley.load_pandas()
    r = fit_ols(design_from_arrays(data.exog.to_numpy(), data.endog.to_numpy(), columns=tuple(data.exog.columns)))
    assert r.set_aside == () and r.rank == 6


@pytest.mark.parametrize("weighted", [False, True])
def test_cluster_robust_errors_match_statsmodels(weighted):
    import statsmodels.api as sm

    from regbench.models.export import fit_summary_text  # noqa: F401  (the summary names them)

    rng = np.random.default_rng(5)
    n, G = 300, 12
    g = rng.integers(0, G, n)
    X = rng.normal(size=(n, 3)) + rng.normal(size=(G, 3))[g]
    y = X @ [1.0, -0.5, 0.2] + rng.normal(size=G)[g] + rng.normal(size=n)
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    r = fit_ols(design_from_arrays(X, y, weights=w, groups=g))
    model = sm.WLS(y, sm.add_constant(X), weights=w) if weighted else sm.OLS(y, sm.add_constant(X))
    # statsmodels' default small-sample correction for cov_type="cluster": G/(G-1)·(N-1)/(N-K).
    ref = model.fit(cov_type="cluster", cov_kwds={"groups": g})
    np.testing.assert_allclose(r.cluster_std_errors, ref.bse[1:], rtol=1e-9)
    assert r.cluster_intercept_se == pytest.approx(ref.bse[0], rel=1e-9)
    assert r.n_clusters == G
    classical = (sm.WLS(y, sm.add_constant(X), weights=w) if weighted else sm.OLS(y, sm.add_constant(X))).fit()
    np.testing.assert_allclose(r.std_errors, classical.bse[1:], rtol=1e-9)

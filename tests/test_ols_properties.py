"""Property tests: random designs with columns built from others.

Mathematical facts checked on every example: the number of set-aside columns
is p minus the rank (numpy's SVD of the weighted design with intercept);
every set-aside column is reproduced by its stated combination to round-off;
the predictions are the weighted least-squares fitted values (numpy lstsq).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings, strategies as st

from regbench.data import design_from_arrays
from regbench.models.ols import fit_ols

EPS = np.finfo(float).eps


def build(seed, n_extra, r, d, weighted, zero_rows):
    rng = np.random.default_rng(seed)
    n = r + d + 2 + n_extra
    base = rng.normal(size=(n, r)) * rng.uniform(0.01, 100, r) + rng.uniform(-1e3, 1e3, r)
    # Dependent columns: random combinations of some base columns plus a shift.
    dep = []
    for _ in range(d):
        pick = rng.choice(r, size=rng.integers(1, r + 1), replace=False)
        c = np.round(rng.normal(0, 3, pick.size), 2)
        c[c == 0] = 1.5
        dep.append(base[:, pick] @ c + rng.normal(0, 10))
    X = np.column_stack([base] + dep)
    order = rng.permutation(X.shape[1])
    X = X[:, order]
    y = rng.normal(size=n) * 5 + X @ rng.normal(size=X.shape[1]) * 0.01
    w = rng.uniform(0.1, 4.0, n) if weighted else np.ones(n)
    if zero_rows:
        w[rng.choice(n, size=min(zero_rows, n - (r + d + 2)), replace=False)] = 0.0
    return design_from_arrays(X, y, weights=w)


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    n_extra=st.integers(0, 40),
    r=st.integers(1, 6),
    d=st.integers(0, 3),
    weighted=st.booleans(),
    zero_rows=st.integers(0, 3),
)
def test_random_aliases(seed, n_extra, r, d, weighted, zero_rows):
    design = build(seed, n_extra, r, d, weighted, zero_rows)
    res = fit_ols(design)
    pos = design.weights > 0
    X, y, w = design.X[pos], design.y[pos], design.weights[pos]
    # numpy: rank of the sqrt(w)-scaled design with intercept, columns at unit length, with a
    # tolerance far above round-off (1e-9) and far below these columns' real spread; minus 1.
    B = np.sqrt(w)[:, None] * np.column_stack([np.ones(len(X)), X])
    B /= np.linalg.norm(B, axis=0)
    s = np.linalg.svd(B, compute_uv=False)
    rank = int(np.count_nonzero(s > 1e-9 * s[0])) - 1
    assert rank == r  # the construction: r free columns, d built from them
    assert len(res.set_aside) == design.p - rank == d
    assert res.rank == rank and len(res.kept) == rank
    for sa in res.set_aside:
        x = X[:, design.index(sa.column)]
        fit = sa.intercept + sum(c * X[:, design.index(k)] for k, c in sa.combination.items())
        # Round-off relative to the magnitudes involved in the sum.
        size = np.abs(sa.intercept) + sum(abs(c) * np.abs(X[:, design.index(k)]) for k, c in sa.combination.items())
        assert np.all(np.abs(x - fit) <= 1e4 * EPS * (np.max(size) + np.max(np.abs(x))))
        assert sa.exact and set(sa.alternatives) == set(sa.combination) <= set(res.kept)
        assert sa.alternatives, "a non-constant set-aside column names what could replace it"
    # numpy lstsq on the sqrt(w)-scaled rows with an intercept column: same fitted values.
    B = np.column_stack([np.ones(len(X)), X]) * np.sqrt(w)[:, None]
    sol, *_ = np.linalg.lstsq(B, y * np.sqrt(w), rcond=None)
    ref = np.column_stack([np.ones(design.n), design.X]) @ sol
    scale = np.max(np.abs(ref)) + np.std(y)
    assert np.max(np.abs(res.model.predict(design.X) - ref)) <= 1e-8 * scale
    assert np.all(res.coef[[design.index(sa.column) for sa in res.set_aside]] == 0.0)


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), r=st.integers(1, 5), d=st.integers(1, 3), weighted=st.booleans())
def test_pinning_a_set_aside_column_keeps_it_and_the_predictions(seed, r, d, weighted):
    design = build(seed, 10, r, d, weighted, 0)
    base = fit_ols(design)
    pin = base.set_aside[0].column
    pinned = fit_ols(design, pins=(pin,))
    # Facts: pinning swaps which columns span the same space; rank and fitted values are unchanged.
    assert pin in pinned.kept and pinned.rank == base.rank
    assert len(pinned.set_aside) == d
    ref = base.model.predict(design.X)
    scale = np.max(np.abs(ref)) + np.std(design.y)
    assert np.max(np.abs(pinned.model.predict(design.X) - ref)) <= 1e-8 * scale


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    p=st.integers(2, 7),
    log_tol=st.floats(-6.0, -0.5),
    n_pins=st.integers(0, 2),
)
def test_near_dependencies_under_a_larger_tolerance(seed, p, log_tol, n_pins):
    from hypothesis import assume
    from scipy import linalg

    from regbench.errors import ModelError

    rng = np.random.default_rng(seed)
    n = 30
    mix = rng.normal(size=(p, p)) * (rng.random((p, p)) < 0.5) + np.eye(p) * rng.uniform(0, 1, p)
    X = rng.normal(size=(n, p)) @ mix + rng.normal(size=(n, p)) * 10.0 ** rng.uniform(-8, -1)
    X += rng.uniform(-5, 5, p)
    design = design_from_arrays(X, rng.normal(size=n))
    tol = 10.0 ** log_tol
    pins = tuple(design.columns[i] for i in rng.choice(p, size=n_pins, replace=False))
    try:
        res = fit_ols(design, pins=pins, rank_tol=tol)
    except ModelError as err:
        assert "pinned column" in str(err)
        assume(False)
    # The stated rule, checked here with numpy least squares on the centered columns at
    # unit weighted SD (offset- and scale-free): walking pins then design order, a column is
    # kept when the columns kept before it leave more than the tolerance of it, and set aside
    # when they leave at most that (plus the round-off of its stored values).
    sdv = X.std(axis=0)
    size = np.sqrt(np.mean(X**2, axis=0))
    Z = (X - X.mean(axis=0)) / (np.sqrt(n) * sdv)
    order = [design.index(c) for c in pins] + [j for j in range(p) if design.columns[j] not in pins]
    kept_set = set(res.kept)
    before = []
    for j in order:
        if before:
            sol, *_ = np.linalg.lstsq(Z[:, before], Z[:, j], rcond=None)
            left = float(np.linalg.norm(Z[:, j] - Z[:, before] @ sol))
        else:
            left = float(np.linalg.norm(Z[:, j]))
        if design.columns[j] in kept_set:
            assert left > 0.999 * tol
            before.append(j)
        else:
            assert left <= 1.001 * tol + 1e-9 * size[j] / sdv[j]
    assert set(pins) <= set(res.kept)
    assert res.rank == len(res.kept) == design.p - len(res.set_aside)
    for sa in res.set_aside:
        j = design.index(sa.column)
        # Set aside only what the kept columns reproduce within the tolerance (times its SD).
        assert sa.residual <= 1.001 * tol * sdv[j] + 1e-9 * size[j]
        assert set(sa.combination) <= set(res.kept)
    # The fitted values are those of least squares on the kept columns (numpy lstsq).
    kept = [design.index(c) for c in res.kept]
    B = np.column_stack([np.ones(n), X[:, kept]])
    sol, *_ = np.linalg.lstsq(B, design.y, rcond=None)
    np.testing.assert_allclose(res.model.predict(X), B @ sol, rtol=1e-6, atol=1e-8)


@settings(max_examples=40, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    n_extra=st.integers(0, 40),
    r=st.integers(1, 6),
    d=st.integers(0, 3),
    weighted=st.booleans(),
    zero_rows=st.integers(0, 3),
    chunk=st.integers(1, 20),
)
def test_blocked_pass_gives_the_one_block_fit(seed, n_extra, r, d, weighted, zero_rows, chunk):
    design = build(seed, n_extra, r, d, weighted, zero_rows)
    one = fit_ols(design, chunk_rows=design.n)
    many = fit_ols(design, chunk_rows=chunk)
    # Fact: the blocked QR factors the same rows, so the same columns are kept and set aside
    # and the fit agrees to round-off (fitted values relative to their scale).
    assert many.kept == one.kept
    assert [sa.column for sa in many.set_aside] == [sa.column for sa in one.set_aside]
    assert all(sa.exact for sa in many.set_aside)
    ref = one.model.predict(design.X)
    scale = np.max(np.abs(ref)) + np.std(design.y)
    assert np.max(np.abs(many.model.predict(design.X) - ref)) <= 1e-10 * scale
    # Residuals are differences of numbers of size ``scale``: round-off relative to that too
    # (a near-exact fit with one residual degree of freedom has a tiny residual SD).
    assert abs(many.residual_sd - one.residual_sd) <= 1e-10 * one.residual_sd + 1e-11 * scale

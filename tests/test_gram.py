"""The one-pass Gram statistics, checked against direct numpy computations on the rows."""

from __future__ import annotations

import numpy as np
import pytest

from regbench.errors import ModelError
from regbench.models.gram import GramStats, gram_stats, per_fold


def _data(n=400, p=5, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * np.arange(1, p + 1) + rng.normal(0, 50, p)
    y = X @ rng.normal(size=p) + rng.normal(size=n)
    w = rng.uniform(0.2, 3.0, n)
    return X, y, w


def _direct(X, y, w):
    """Weighted means, centred cross-products and SDs computed two-pass on the rows (numpy)."""
    W = w.sum()
    m = w @ X / W
    my = w @ y / W
    Xc = X - m
    yc = y - my
    return W, m, my, Xc.T @ (w[:, None] * Xc), Xc.T @ (w * yc), w @ yc**2, np.sqrt(w @ Xc**2 / W)


def test_gram_matches_direct_weighted_cross_products():
    X, y, w = _data()
    st = gram_stats(X, y, w)
    W, m, my, cxx, cxy, cyy, sd = _direct(X, y, w)
    # Source: numpy two-pass computation on the rows.
    assert st.W == pytest.approx(W, rel=1e-14)
    np.testing.assert_allclose(st.mean_x(), m, rtol=1e-13)
    assert st.mean_y() == pytest.approx(my, rel=1e-13)
    np.testing.assert_allclose(st.centered_xx(), cxx, rtol=1e-11, atol=1e-9)
    np.testing.assert_allclose(st.centered_xy(), cxy, rtol=1e-11, atol=1e-9)
    assert st.centered_yy() == pytest.approx(cyy, rel=1e-11)
    np.testing.assert_allclose(st.sd_x(), sd, rtol=1e-12)


def test_standardized_gram_is_weighted_correlation_scale():
    X, y, w = _data(seed=1)
    G, c, mean, sd = gram_stats(X, y, w).standardized()
    W, m, my, *_ = _direct(X, y, w)
    Xs = (X - m) / np.sqrt(w @ (X - m) ** 2 / W)
    # Source: the definition G = X̃ᵀWX̃/W, c = X̃ᵀWỹ/W computed on the rows.
    np.testing.assert_allclose(G, Xs.T @ (w[:, None] * Xs) / W, rtol=1e-11, atol=1e-13)
    np.testing.assert_allclose(c, Xs.T @ (w * (y - my)) / W, rtol=1e-11, atol=1e-12)
    # Mathematical fact: a standardized Gram has unit diagonal.
    np.testing.assert_allclose(np.diag(G), 1.0, rtol=1e-12)


def test_chunk_size_does_not_change_the_result():
    X, y, w = _data(n=1000)
    a = gram_stats(X, y, w)
    b = gram_stats(X, y, w, chunk=7)
    np.testing.assert_allclose(a.xx, b.xx, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(a.xy, b.xy, rtol=1e-12, atol=1e-9)
    assert a.yy == pytest.approx(b.yy, rel=1e-12)
    assert a.n == b.n == 1000


@pytest.mark.parametrize("n, p, chunk, order", [
    (600, 5, 50, "C"),  # the gather of each fold's rows, in blocks of 50
    (600, 5, None, "C"),  # the pass over consecutive blocks, split by fold
    (3000, 300, None, "F"),  # several blocks of column-ordered rows
])
def test_fold_gram_by_subtraction_equals_direct_gram_of_training_rows(n, p, chunk, order):
    X, y, w = _data(n=n, p=p, seed=2)
    X = np.asarray(X, order=order)
    ids = np.random.default_rng(3).integers(0, 4, n)
    full, folds = per_fold(X, y, w, ids, 4, chunk=chunk)
    direct_full = gram_stats(X, y, w)
    np.testing.assert_allclose(full.centered_xx(), direct_full.centered_xx(), rtol=1e-11, atol=1e-8)
    for k in range(4):
        assert folds[k].n == (ids == k).sum()
        train = full - folds[k]
        rows = ids != k
        W, m, my, cxx, cxy, cyy, sd = _direct(X[rows], y[rows], w[rows])
        # Source: direct two-pass numpy statistics of the training rows.
        assert train.n == rows.sum()
        assert train.W == pytest.approx(W, rel=1e-13)
        np.testing.assert_allclose(train.mean_x(), m, rtol=1e-12)
        np.testing.assert_allclose(train.centered_xx(), cxx, rtol=1e-10, atol=1e-8)
        np.testing.assert_allclose(train.centered_xy(), cxy, rtol=1e-10, atol=1e-8)
        assert train.centered_yy() == pytest.approx(cyy, rel=1e-10)
        G1, c1, _, _ = train.standardized()
        G2, c2, _, _ = gram_stats(X[rows], y[rows], w[rows]).standardized()
        np.testing.assert_allclose(G1, G2, rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(c1, c2, rtol=1e-10, atol=1e-12)


def test_large_means_keep_precision_after_subtraction():
    # A column of mean 1e7 and SD 1e-2: without the shift, W·mean² ≈ 1e14·W swamps the
    # variance and the centred Gram of a training fold would keep no correct digit.
    rng = np.random.default_rng(4)
    n = 5000
    x = 1e7 + rng.normal(0, 1e-2, n)
    X = np.column_stack([x, rng.normal(size=n)])
    y = 3 * (x - 1e7) + rng.normal(size=n)
    w = np.ones(n)
    ids = np.arange(n) % 5
    full, folds = per_fold(X, y, w, ids, 5)
    rows = ids != 0
    train = full - folds[0]
    _, _, _, cxx, cxy, _, sd = _direct(X[rows], y[rows], w[rows])
    # Source: two-pass numpy statistics on the training rows.
    np.testing.assert_allclose(train.sd_x(), sd, rtol=1e-7)
    np.testing.assert_allclose(train.centered_xy(), cxy, rtol=1e-7)


def test_constant_column_gets_zero_sd_and_zero_gram_entries():
    X, y, w = _data(seed=5)
    X[:, 2] = 4.25
    G, c, mean, sd = gram_stats(X, y, w).standardized()
    assert sd[2] == 0.0
    assert np.all(G[2] == 0.0) and np.all(G[:, 2] == 0.0) and c[2] == 0.0
    assert mean[2] == pytest.approx(4.25)


def test_statistics_with_different_shifts_cannot_be_combined():
    X, y, w = _data()
    a = gram_stats(X, y, w)
    b = gram_stats(X[:100], y[:100], w[:100])
    with pytest.raises(ValueError):
        a - b
    c = gram_stats(X[:100], y[:100], w[:100], shift=(a.shift_x, a.shift_y))
    assert (a - c).n == X.shape[0] - 100


def test_zero_total_weight_is_refused_with_a_clear_error():
    X, y, _ = _data(n=20)
    with pytest.raises(ModelError, match="total weight 0"):
        gram_stats(X, y, np.zeros(20))
    st = gram_stats(X, y)
    empty = st - st
    assert isinstance(empty, GramStats)
    with pytest.raises(ModelError, match="total weight 0"):
        empty.standardized()


def test_column_constant_on_training_rows_is_constant_after_subtraction():
    # The column varies only in fold 0, so the training rows of fold 0 see it constant; the
    # subtraction leaves round-off, which must count as zero variance, not as a tiny SD.
    rng = np.random.default_rng(6)
    n = 300
    ids = np.arange(n) % 3
    X = rng.normal(size=(n, 3)) * 1e3
    X[:, 1] = np.where(ids == 0, rng.normal(0, 1e3, n), 0.0)
    y = rng.normal(size=n)
    full, folds = per_fold(X, y, np.ones(n), ids, 3)
    G, c, mean, sd = (full - folds[0]).standardized()
    assert sd[1] == 0.0 and c[1] == 0.0 and np.all(G[1] == 0.0)
    assert np.all(sd[[0, 2]] > 0)


@pytest.mark.parametrize("negative", [False, True])
def test_per_group_stack_equals_each_groups_rows(negative):
    from regbench.models.gram import GroupStack, per_group

    X, y, w = _data(n=300, p=6, seed=5)
    if negative:
        w[3] = -0.5  # the general product's route (refused before a fit, but the sums must hold)
    groups = np.random.default_rng(6).integers(0, 7, 300)
    stack = per_group(X, y, w, groups, 7)
    W = w.sum()
    sx, sy = w @ X / W, w @ y / W
    iu = np.triu_indices(6)
    for g in range(7):
        r = groups == g
        Z, t = X[r] - sx, y[r] - sy
        # Source: numpy sums over the group's rows about the whole table's weighted means.
        xx = Z.T @ (w[r][:, None] * Z)
        np.testing.assert_allclose(stack.xx[g], xx[iu], rtol=1e-12, atol=1e-9)
        np.testing.assert_allclose(stack.unpack(stack.xx[g]), xx, rtol=1e-12, atol=1e-9)
        np.testing.assert_allclose(stack.sx[g], w[r] @ Z, rtol=1e-12, atol=1e-9)
        np.testing.assert_allclose(stack.xy[g], Z.T @ (w[r] * t), rtol=1e-12, atol=1e-9)
        assert stack.W[g] == pytest.approx(w[r].sum(), rel=1e-13) and stack.n[g] == r.sum()
        assert stack.yy[g] == pytest.approx(w[r] @ t ** 2, rel=1e-12)
    # The stack of GramStats (a table read in batches keeps its groups' statistics so) packs alike.
    _, parts = per_fold(X, y, w, groups, 7)
    again = GroupStack.of(parts)
    np.testing.assert_allclose(again.xx, stack.xx, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(again.scale, stack.scale, rtol=1e-12, atol=1e-9)

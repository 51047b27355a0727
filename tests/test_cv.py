"""Folds, held-out error from fold cross-products, and the CV choice of α."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.linear_model import ElasticNet, Lasso, Ridge
from sklearn.model_selection import GroupKFold, KFold

from regbench.data import design_from_arrays
from regbench.errors import ModelError
from regbench.models import cv as cvmod
from regbench.models.engine import fit_all
from regbench.models.gram import gram_stats, per_fold
from regbench.models.results import FitSettings


def _groups(n=500, g=23, seed=0):
    rng = np.random.default_rng(seed)
    return rng.integers(0, g, n)


def test_grouped_folds_never_split_a_group_and_use_every_fold():
    groups = _groups()
    ids = cvmod.fold_ids(len(groups), 5, seed=3, groups=groups)
    for g in np.unique(groups):
        assert np.unique(ids[groups == g]).size == 1
    assert set(ids) == set(range(5))


def test_grouped_folds_share_the_group_property_and_balance_of_sklearn_groupkfold():
    groups = _groups(n=700, g=31, seed=1)
    ids = cvmod.fold_ids(len(groups), 5, seed=0, groups=groups)
    ref_sizes = []
    for _, test in GroupKFold(n_splits=5).split(np.zeros((len(groups), 1)), groups=groups):
        # Source: scikit-learn GroupKFold: each group lies in exactly one test fold.
        assert np.intersect1d(groups[test], groups[np.setdiff1d(np.arange(len(groups)), test)]).size == 0
        ref_sizes.append(len(test))
    # Both place groups largest first into the lightest fold, so with equal weights the fold
    # sizes agree with GroupKFold's (ties among equal-sized groups are broken by our seed).
    assert sorted(np.bincount(ids, minlength=5)) == sorted(ref_sizes)


def test_grouped_folds_are_seeded():
    groups = _groups()
    a = cvmod.fold_ids(len(groups), 4, seed=11, groups=groups)
    b = cvmod.fold_ids(len(groups), 4, seed=11, groups=groups)
    c = cvmod.fold_ids(len(groups), 4, seed=12, groups=groups)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_grouped_folds_balance_by_weight():
    groups = np.repeat(np.arange(10), 10)
    w = np.ones(100)
    w[groups == 0] = 20.0  # one heavy group
    ids = cvmod.fold_ids(100, 3, seed=0, groups=groups, weights=w)
    load = np.bincount(ids, weights=w, minlength=3)
    # The heavy group (200) gets a fold of its own; the other nine share the rest.
    assert load.max() == 200.0
    assert sorted(load)[:2] == [40.0, 50.0]


def test_plain_kfold_sizes_match_sklearn_kfold():
    ids = cvmod.fold_ids(103, 5, seed=2)
    ref = sorted(len(t) for _, t in KFold(5).split(np.zeros((103, 1))))
    # Source: scikit-learn KFold fold sizes (differ by at most one row).
    assert sorted(np.bincount(ids)) == ref


def test_too_few_groups_names_the_column():
    with pytest.raises(ModelError, match="'site' has only 3 groups for 5 folds"):
        cvmod.fold_ids(30, 5, groups=np.arange(30) % 3, groups_column="site")
    with pytest.raises(ModelError, match="at least 2 folds"):
        cvmod.fold_ids(30, 1)


def test_heldout_mse_from_cross_products_equals_direct_score():
    rng = np.random.default_rng(5)
    X = rng.normal(size=(200, 4)) * 7 + 40
    y = X @ [1.0, -2.0, 0.5, 0.0] + rng.normal(size=200)
    w = rng.uniform(0.1, 2.0, 200)
    ids = np.arange(200) % 4
    _, folds = per_fold(X, y, w, ids, 4)
    B = rng.normal(size=(6, 4))
    b0 = rng.normal(size=6) * 10
    for k in range(4):
        r = ids == k
        direct = [np.average((y[r] - b0[i] - X[r] @ B[i]) ** 2, weights=w[r]) for i in range(6)]
        # Source: the weighted mean squared error computed on the held-out rows (numpy).
        np.testing.assert_allclose(cvmod.heldout_mse(folds[k], B, b0), direct, rtol=1e-9)
    assert cvmod.heldout_mse(folds[0], B[0], b0[0]) == pytest.approx(
        np.average((y[ids == 0] - b0[0] - X[ids == 0] @ B[0]) ** 2, weights=w[ids == 0]), rel=1e-9)


def test_summarize_min_and_one_se_rule():
    alphas = np.array([8.0, 4.0, 2.0, 1.0, 0.5])
    errors = np.array([[10.0, 6.0, 5.0, 4.0, 4.2],
                       [12.0, 7.0, 5.5, 5.0, 5.1],
                       [11.0, 6.5, 6.0, 6.0, 6.3]])
    cv = cvmod.summarize(alphas, errors, grouped=False)
    np.testing.assert_allclose(cv.mean, errors.mean(axis=0))
    np.testing.assert_allclose(cv.se, errors.std(axis=0, ddof=1) / np.sqrt(3))
    assert cv.alpha_min == 1.0
    # One-SE rule (common practice, Hastie, Tibshirani & Friedman): largest α with mean ≤ min + SE(min).
    limit = cv.mean[3] + cv.se[3]
    assert cv.mean[2] <= limit < cv.mean[1]
    assert cv.alpha_1se == 2.0


def _weighted_standardize(X, w):
    W = w.sum()
    m = w @ X / W
    return m, np.sqrt(w @ (X - m) ** 2 / W)


@pytest.mark.parametrize("family", ["ridge", "lasso", "elastic_net"])
def test_cv_mean_equals_refit_and_score_on_each_fold(family):
    rng = np.random.default_rng(9)
    n, p = 400, 5
    X = rng.normal(size=(n, p)) * [1, 3, 5, 2, 8] + [10, -3, 100, 0, 7]
    X[:, 1] = X[:, 0] * 3 + rng.normal(0, 0.5, n)
    y = 2 + X @ [0.5, 0.3, -0.1, 0.0, 0.05] + rng.normal(size=n)
    w = rng.uniform(0.5, 2.0, n)
    groups = rng.integers(0, 12, n)
    design = design_from_arrays(X, y, weights=w, groups=groups)
    res = fit_all(design, FitSettings(folds=4, n_penalties=30))
    pf = res.penalized[family]
    K = 4
    for i in (0, 12, 25):
        alpha = pf.cv.alphas[i]
        scores = []
        for k in range(K):
            tr, te = res.fold_ids != k, res.fold_ids == k
            m, sd = _weighted_standardize(X[tr], w[tr])
            Xs = (X[tr] - m) / sd
            s = w[tr] * tr.sum() / w[tr].sum()
            if family == "ridge":
                est = Ridge(alpha=w[tr].sum() * alpha).fit(Xs, y[tr], sample_weight=w[tr])
            elif family == "lasso":
                est = Lasso(alpha=alpha, tol=1e-12, max_iter=100_000).fit(Xs, y[tr], sample_weight=s)
            else:
                est = ElasticNet(alpha=alpha, l1_ratio=0.5, tol=1e-12, max_iter=100_000).fit(Xs, y[tr], sample_weight=s)
            pred = est.predict((X[te] - m) / sd)
            scores.append(np.average((y[te] - pred) ** 2, weights=w[te]))
        # Source: scikit-learn refit on each training fold (standardized on its own rows), scored on
        # the held-out rows with numpy; mapping of α as in tests/test_penalized.py.
        assert pf.cv.mean[i] == pytest.approx(np.mean(scores), rel=1e-6)
        assert pf.cv.se[i] == pytest.approx(np.std(scores, ddof=1) / np.sqrt(K), rel=1e-4, abs=1e-9)
    assert pf.cv.grouped and pf.cv.n_folds == 4

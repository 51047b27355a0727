"""Cross-validation folds and held-out error from fold cross-products.

Folds are seeded.  With groups, every row of a group lands in the same fold, so
a model is always judged on groups it never saw.  The held-out error of any
linear model on a fold comes from that fold's own cross-products (see
:mod:`regbench.models.gram`), without a second pass over its rows::

    Σ w (y − b₀ − xᵀb)² = yᵀWy − 2bᵀXᵀWy + bᵀXᵀWXb − 2a(Σwy − bᵀΣwx) + a²W

in the fold's shifted coordinates, with ``a = b₀ + shiftᵀb − shift_y``.

Per α the CV curve is the plain mean of the K folds' weighted mean squared
errors, and its standard error is their sample SD (ddof 1) over √K.
``alpha_min`` minimises the mean; ``alpha_1se`` is the largest α whose mean is
within one standard error (the SE at the minimum) of the minimum.  ``at_edge``
flags a minimum at the grid's smallest α (the error may fall further below it).
"""

from __future__ import annotations

from typing import Optional

import numpy as np

from regbench.errors import ModelError
from regbench.models.gram import GramStats
from regbench.models.results import CVResult


def fold_ids(n: int, K: int, seed: int = 0, groups: Optional[np.ndarray] = None,
             weights: Optional[np.ndarray] = None, groups_column: Optional[str] = None) -> np.ndarray:
    """Fold (0..K-1) of each row.

    Parameters
    ----------
    n : int
        Number of rows.
    K : int
        Number of folds (at least 2).
    seed : int
        Seed of the shuffle.
    groups : ndarray (n,) of int, optional
        Group code per row; a group is never split across folds.  Groups are
        shuffled with the seed, then placed largest first (by total weight,
        then by rows) into the fold that holds the least weight so far.
    weights : ndarray (n,), optional
        Row weights used to balance grouped folds (ones by default).
    groups_column : str, optional
        Name of the group column, for the error message.

    Raises
    ------
    ModelError
        Fewer rows (or groups) than folds.
    """
    if K < 2:
        raise ModelError(f"{K} folds are too few; cross-validation needs at least 2 folds")
    rng = np.random.default_rng(seed)
    if groups is None:
        if n < K:
            if n < 2:
                raise ModelError(f"only {n} row, too few for cross-validation; add rows")
            raise ModelError(f"only {n} rows for {K} folds; choose at most {n} folds")
        ids = np.empty(n, dtype=np.int64)
        ids[rng.permutation(n)] = np.arange(n) % K
        return ids
    groups = np.asarray(groups)
    labels, code = np.unique(groups, return_inverse=True)
    g = labels.size
    if g < 2:
        name = f"'{groups_column}'" if groups_column else "the group column"
        raise ModelError(f"{name} has only one group among the rows used, so no group can be held out; choose a "
                         "group column with at least 2 groups, or none")
    if g < K:
        name = f"'{groups_column}'" if groups_column else "the group column"
        raise ModelError(f"{name} has only {g} groups for {K} folds; choose at most {g} folds "
                         "(every group must stay inside one fold)")
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    gw = np.bincount(code, weights=w, minlength=g)
    gn = np.bincount(code, minlength=g).astype(float)
    perm = rng.permutation(g)
    # Stable sort after the shuffle: equal-sized groups keep their random order.
    order = perm[np.lexsort((-gn[perm], -gw[perm]))]
    load_w = np.zeros(K)
    load_n = np.zeros(K)
    fold_of_group = np.empty(g, dtype=np.int64)
    for grp in order:
        k = int(np.lexsort((load_n, load_w))[0])
        fold_of_group[grp] = k
        load_w[k] += gw[grp]
        load_n[k] += gn[grp]
    return fold_of_group[code]


def heldout_mse(fold: GramStats, coef: np.ndarray, intercept) -> np.ndarray:
    """Weighted mean squared error on the rows behind ``fold`` for each model.

    Parameters
    ----------
    fold : GramStats
        Held-out rows.
    coef : ndarray (m, p) or (p,)
        Original-unit coefficients.
    intercept : ndarray (m,) or float

    Returns
    -------
    ndarray (m,) (or a float for one model); NaN when the fold has weight 0.
    """
    B = np.atleast_2d(np.asarray(coef, dtype=float))
    b0 = np.atleast_1d(np.asarray(intercept, dtype=float))
    if not fold.W > 0:
        out = np.full(B.shape[0], np.nan)
    else:
        a = b0 + B @ fold.shift_x - fold.shift_y
        quad = np.sum((B @ fold.xx) * B, axis=1)
        sse = fold.yy - 2.0 * B @ fold.xy + quad - 2.0 * a * (fold.sy - B @ fold.sx) + a * a * fold.W
        out = np.clip(sse, 0.0, None) / fold.W
    return out if np.ndim(coef) == 2 else float(out[0])


def summarize(alphas: np.ndarray, errors: np.ndarray, grouped: bool) -> CVResult:
    """CV curve from per-fold errors ``errors`` of shape (K, len(alphas))."""
    errors = np.asarray(errors, dtype=float)
    K = errors.shape[0]
    ok = np.isfinite(errors)
    k_ok = ok.sum(axis=0)
    if not np.all(k_ok >= 1):
        raise ModelError("every held-out fold has total weight 0; cross-validation cannot score the models")
    mean = np.nanmean(errors, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.nanstd(errors, axis=0, ddof=1) if K > 1 else np.zeros_like(mean)
        se = np.where(k_ok > 1, sd / np.sqrt(k_ok), 0.0)
    i_min = int(np.argmin(mean))
    limit = mean[i_min] + se[i_min]
    within = np.flatnonzero(mean <= limit)
    alphas = np.asarray(alphas, dtype=float)
    i_1se = int(within[np.argmax(alphas[within])])
    # The minimum at the smallest α of the grid: the error may go on falling below it.
    at_edge = bool(alphas.size > 1 and alphas[i_min] == alphas.min())
    return CVResult(alphas=alphas.copy(), mean=mean, se=se, alpha_min=float(alphas[i_min]),
                    alpha_1se=float(alphas[i_1se]), n_folds=int(K), grouped=bool(grouped), at_edge=at_edge)

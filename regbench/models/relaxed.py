"""Relaxed lasso and relaxed elastic net: a refit on the columns the penalized fit selected.

From the penalized fit β_pen at α (lasso or elastic net), the unpenalized
refit β_refit solves weighted least squares on the selected columns only
(those with β_pen ≠ 0; columns with penalty factor 0 are always among them),
and the relaxation γ ∈ [0, 1] blends the two::

    β(γ) = (1 − γ)·β_pen + γ·β_refit

γ = 0 is the penalized fit itself, γ = 1 the unpenalized refit on the selected
columns.  Published method: Meinshausen (2007), "Relaxed lasso", CSDA 52(1);
the blend form follows Hastie, Tibshirani & Tibshirani (2020), Statistical
Science 35(4).  Everything here is p×p work on the standardized Gram: the
refit is ``G_SS β_S = c_S`` (minimum-norm when the selected columns are
exactly collinear), so cross-validation refits come from the fold Grams.

γ is chosen by the same cross-validation as α, on the same folds, over
``RELAXATION_GRID`` (or fixed by the settings):

* ``cv_min``: the (α, γ) pair with the lowest mean held-out error;
* ``cv_1se``: the largest α at which some γ is within one standard error of
  that minimum, and at that α the γ with the lowest mean error.
"""

from __future__ import annotations

import numpy as np

#: Relaxations tried by cross-validation when none is fixed.
RELAXATION_GRID = (0.0, 0.25, 0.5, 0.75, 1.0)
#: Eigenvalues of the selected columns' Gram below this share of the largest are null directions.
REFIT_RTOL = 1e-12

#: Relaxed family -> the penalized family it relaxes.
BASES = {"relaxed_lasso": "lasso", "relaxed_elastic_net": "elastic_net"}


def base_of(name: str):
    """The penalized family a relaxed family relaxes, or None for any other name."""
    return BASES.get(name)


def refit_selected(problem, beta: np.ndarray) -> np.ndarray:
    """Standardized unpenalized refits on each fit's selected columns.

    Parameters
    ----------
    problem : regbench.models.penalized.Problem
    beta : ndarray (m, p) or (p,)
        Penalized standardized coefficients.

    Returns
    -------
    ndarray of the shape of ``beta``: weighted least squares of ỹ on the
    columns where the row of ``beta`` is non-zero, 0 elsewhere.  Fits that
    select the same columns share one solve.
    """
    B = np.atleast_2d(np.asarray(beta, dtype=float))
    out = np.zeros_like(B)
    done = {}
    for i, row in enumerate(B):
        sel = np.flatnonzero(row != 0.0)
        if sel.size == 0:
            continue
        key = sel.tobytes()
        if key not in done:
            lam, V = np.linalg.eigh(problem.G[np.ix_(sel, sel)])
            keep = lam > REFIT_RTOL * max(float(lam[-1]), np.finfo(float).tiny)
            done[key] = V[:, keep] @ ((V[:, keep].T @ problem.c[sel]) / lam[keep])
        out[i, sel] = done[key]
    return out if np.ndim(beta) == 2 else out[0]


def blend(beta_pen: np.ndarray, beta_refit: np.ndarray, gamma: float) -> np.ndarray:
    """β(γ) = (1 − γ)·β_pen + γ·β_refit (γ = 0 and γ = 1 exactly as given)."""
    gamma = float(gamma)
    if gamma == 0.0:
        return np.array(beta_pen, dtype=float, copy=True)
    if gamma == 1.0:
        return np.array(beta_refit, dtype=float, copy=True)
    return (1.0 - gamma) * beta_pen + gamma * beta_refit


def choose(alphas: np.ndarray, gammas, mean: np.ndarray, se: np.ndarray, rule: str):
    """(α index, γ index) by ``rule`` from CV means and SEs of shape (len(gammas), len(alphas))."""
    g_min, a_min = np.unravel_index(int(np.nanargmin(mean)), mean.shape)
    if rule != "cv_1se":
        return int(a_min), int(g_min)
    limit = mean[g_min, a_min] + se[g_min, a_min]
    ok = mean <= limit
    cols = np.flatnonzero(ok.any(axis=0))
    a = int(cols[np.argmax(np.asarray(alphas)[cols])])
    g = int(np.nanargmin(np.where(ok[:, a], mean[:, a], np.inf)))
    return a, g

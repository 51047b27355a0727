"""Lasso and elastic net on a Gram by an active-set (feature-sign) method.

Solves, at each α of a descending grid::

    minimise  ½βᵀGβ − cᵀβ + λ₁‖β‖₁ + λ₂/2·‖β‖²,   λ₁ = αρ,  λ₂ = α(1−ρ)

(the standardized problem of :mod:`regbench.models.penalized`).  Given the
columns in use and their signs θ, the optimum on them is one linear solve,
``(G_AA + λ₂I)β_A = c_A − λ₁θ_A``; the feature-sign search of Lee, Battle,
Raina & Ng (2007), "Efficient sparse coding algorithms", NIPS 19, moves to it,
stopping where a coefficient would change sign (a line search over those
points lowers the objective at every step), and adds the column that breaks
its optimality condition ``|c_j − (Gβ)_j| ≤ λ₁`` the most.  Warm-started along
the grid, an α usually costs one solve on the columns already in use, so a
path is a few hundred small solves and no compiled coordinate descent (nor
scikit-learn's import) is needed; the answer is the exact optimum up to
round-off rather than a coordinate-descent iterate stopped at a tolerance.

When a solve is not positive definite (exact copies in use with no ridge part),
the steps run out, or the final optimality check fails, :func:`enet_path_gram`
returns None and the caller falls back to coordinate descent.
"""

from __future__ import annotations

import functools

import numpy as np

#: A column enters when its optimality condition is broken by more than this share of
#: max(λ₁, max|c|): round-off in c − Gβ is far below it, and an entry smaller than it
#: would move the objective by its square.
ENTER_RTOL = 1e-11
#: The optimum found must satisfy every optimality condition to this share of max(λ₁, max|c|),
#: or the caller solves again by coordinate descent.
CHECK_RTOL = 1e-8


def enet_path_gram(G: np.ndarray, c: np.ndarray, alphas, l1_ratio: float, init=None):
    """Coefficients (len(alphas), p) along ``alphas``, or None when the method gives up.

    Parameters
    ----------
    G : ndarray (p, p)
        Symmetric positive semi-definite Gram; a column with ``G_jj = 0`` stays at 0.
    c : ndarray (p,)
    alphas : array of float
        Solved from the largest down, each warm-started from the previous.
    l1_ratio : float
        ρ in (0, 1].
    init : ndarray (p,), optional
        Start of the first α.
    """
    G = np.asarray(G, dtype=float)
    c = np.asarray(c, dtype=float)
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    p = c.shape[0]
    out = np.zeros((alphas.size, p))
    if p == 0:
        return out
    usable = np.diag(G) > 0
    beta = np.zeros(p) if init is None else np.where(usable, np.asarray(init, dtype=float), 0.0)
    top = float(np.max(np.abs(c), initial=0.0))
    for i in np.argsort(-alphas, kind="stable"):
        l1 = float(alphas[i]) * l1_ratio
        l2 = float(alphas[i]) * (1.0 - l1_ratio)
        beta = _solve(G, c, l1, l2, beta, usable, max(l1, top, np.finfo(float).tiny))
        if beta is None:
            return None
        out[i] = beta
    return out


def _solve(G, c, l1, l2, beta, usable, size):
    """The optimum at one (λ₁, λ₂) from ``beta``, or None (see the module docstring)."""
    beta = beta.copy()
    p = c.shape[0]
    enter_tol = ENTER_RTOL * size
    dead = ~usable
    settled = False  # the columns in use are at their optimum for their signs
    for _ in range(50 + 4 * p):
        act = beta.nonzero()[0]
        if settled:
            # Rows of the symmetric G, not its columns: a row gather copies contiguous memory
            # (a third of the time of the column gather at 1,000 columns).
            g = c - beta[act] @ G[act]
            excess = np.abs(g) - l1
            excess[act] = -np.inf
            excess[dead] = -np.inf
            j = int(np.argmax(excess))
            if not excess[j] > enter_tol:
                return beta if _optimal(G, c, l1, l2, beta, size) else None
            theta = np.sign(beta)
            theta[j] = np.sign(g[j])
            act = np.sort(np.append(act, j))
        else:
            theta = np.sign(beta)
            if act.size == 0:
                settled = True
                continue
        M = G[act][:, act]  # the rows, then their columns: one small gather each
        if l2:
            M = M + l2 * np.eye(act.size)
        th = theta[act]
        b = c[act] - l1 * th
        new = _spd_solve(M, b)
        if new is None:
            return None
        old = beta[act]
        wrong = np.sign(new) != th
        flips = ((old != 0.0) & wrong).nonzero()[0]
        if flips.size == 0 and not wrong.any():
            beta[act] = new
            settled = True
            continue
        # Line search over the points where a coefficient reaches 0 on the way, and the end:
        # every candidate's objective ½xᵀ(G + λ₂I)x − cᵀx + λ₁‖x‖₁ (up to its constant) in one product.
        bl = c[act]
        d = new - old
        t = old[flips] / (old[flips] - new[flips])
        cand = old[None, :] + t[:, None] * d[None, :]
        cand[np.arange(flips.size), flips] = 0.0
        cand = np.vstack([cand, new[None, :]])
        f = 0.5 * np.einsum("ij,ij->i", cand @ M, cand) - cand @ bl + l1 * np.sum(np.abs(cand), axis=1)
        i = int(np.argmin(f[:-1])) if flips.size else -1
        best = new if i < 0 or not f[i] <= f[-1] else cand[i]
        beta[act] = best
        settled = False
    return None


def _spd_solve(M, b):
    """``M⁻¹b`` by Cholesky (LAPACK ``posv``), or None when ``M`` is not numerically positive definite."""
    _, x, info = _posv()(M, b, lower=0, overwrite_a=0, overwrite_b=0)
    if info != 0 or not np.all(np.isfinite(x)):
        return None
    return x


@functools.cache
def _posv():
    """LAPACK's ``dposv``, looked up once (SciPy loads on first use, not when this module is imported)."""
    from scipy.linalg import lapack

    return lapack.dposv


def _optimal(G, c, l1, l2, beta, size) -> bool:
    """Every optimality condition holds at ``beta`` to :data:`CHECK_RTOL`."""
    g = c - G @ beta - l2 * beta
    nz = beta != 0.0
    v_zero = np.max(np.abs(g[~nz]) - l1, initial=0.0)
    v_nz = np.max(np.abs(g[nz] - l1 * np.sign(beta[nz])), initial=0.0)
    return bool(max(v_zero, v_nz) <= CHECK_RTOL * size)

"""Ridge, lasso and elastic-net paths solved from the standardized Gram.

Objective (the one parametrization of every penalized model)::

    minimise  1/(2W) · Σ wᵢ (yᵢ − b₀ − x̃ᵢβ)²  +  α · (ρ‖β‖₁ + (1−ρ)/2 · ‖β‖²)

with x̃ the predictors standardized by the weighted mean and weighted
population SD of the rows being fitted and W = Σwᵢ; ρ = 0 is ridge, ρ = 1
lasso, in between elastic net.  Coefficients are reported on the standardized
scale (β) and in original units (coef = β / sd, intercept = ȳ_w − Σ coef·mean).

In terms of the standardized Gram ``G = X̃ᵀWX̃/W`` and ``c = X̃ᵀWỹ/W`` the loss
is ``½βᵀGβ − cᵀβ`` plus a constant, so every solve here costs p×p work.

* Ridge: one eigen-decomposition ``G = V diag(λ) Vᵀ`` gives every α in closed
  form, ``β = V diag(1/(λ+α)) Vᵀ c``.
* Lasso and elastic net: factor ``G = LᵀL`` with ``L = diag(√λ) Vᵀ`` over the
  k directions with λ > 0 and solve ``Lᵀz = c``.  scikit-learn's ``enet_path``
  minimises ``1/(2k)‖√k z − √k L β‖² + α(ρ‖β‖₁ + (1−ρ)/2‖β‖²)``, which is the
  objective above up to a constant, so it returns the same β at the same α.
  Its coordinate descent runs on the precomputed Gram ``(k·G, k·c)`` of that
  pair, with warm starts along the path and a tight duality-gap tolerance
  (its default of 1e-4 stops early).
* On a wide table (far fewer non-null directions than columns) each α is solved
  on the columns the sequential strong rules keep, and the rest are checked
  against their optimality conditions (:func:`screened_path`).

α grid: ``α_max = max_j |c_j| / max(ρ, 1e-3)`` is the smallest α that keeps
every coefficient at 0 for ρ > 0 (the KKT condition ``|c_j| ≤ αρ`` at β = 0).
Ridge never zeroes a coefficient, so it uses the same top as an elastic net
with ρ = 1e-3, a convention that puts the ridge path's start at strong
shrinkage.  ``n_penalties`` values are spaced evenly on the log scale down to
``penalty_ratio · α_max``; the ridge path goes on down to 1/100 of the
smallest non-null eigenvalue of G when that is lower (see :func:`alpha_grid`).
One grid per family, from the whole design, is shared by every CV fold.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from regbench.models.active_set import enet_path_gram
from regbench.models.gram import GramStats
from regbench.models.results import LinearModel, PathResult

#: Smallest ρ used for the top of the α grid (ridge uses this convention too).
MIN_GRID_RATIO = 1e-3
#: Duality-gap tolerance handed to scikit-learn's coordinate descent (relative to ‖y‖²/n).
CD_TOL = 1e-10
CD_MAX_ITER = 100_000
#: A fit is certified converged when its duality gap is at most this share of the
#: weighted variance of y on the rows fitted (the objective at β = 0 is half of it).
GAP_TOL = 1e-8
#: On a wide table (far fewer rows than columns) each α is solved on the columns the strong
#: rules keep, to a duality gap of this share of the weighted variance of y (a tenth of the
#: certificate's, so round-off in the full problem's gap leaves it certified).
SCREEN_TOL = 0.1 * GAP_TOL
#: Eigenvalues below this share of the largest count as null directions of G.
EIG_RTOL = 1e-12


#: Above this many columns, a Gram of fewer rows than columns (rank at most the rows) is
#: factored by pivoted Cholesky and an SVD of its k×p factor instead of a p×p eigen-decomposition.
WIDE_MIN_COLUMNS = 200


def _wide_eigen(Gl: np.ndarray):
    """The non-null eigenpairs of a p×p Gram of rank k < p, in O(p²k) work.

    Pivoted Cholesky (LAPACK ``pstrf``) stops at the rank: ``G[piv][:, piv] = UᵀU`` with U
    k×p; an SVD of that k×p factor gives ``G = V diag(s²) Vᵀ`` over its k directions.  The
    null directions (λ = 0) are left out: ridge, the α grid and the L1 solver need only the
    others (c lies in the span of G).
    """
    from scipy.linalg import lapack

    p = Gl.shape[0]
    top = float(np.max(np.diag(Gl), initial=0.0))
    if not top > 0:
        return np.zeros(0), np.zeros((p, 0))
    U, piv, rank, info = lapack.dpstrf(np.array(Gl, order="F"), lower=0, tol=EIG_RTOL * top)
    if info < 0:
        raise ValueError(f"pivoted Cholesky failed (LAPACK info {info})")
    k = int(rank)
    F = np.zeros((k, p))
    F[:, piv - 1] = np.triu(U[:k, :])
    _, sv, Vt = np.linalg.svd(F, full_matrices=False)
    order = np.argsort(sv)
    return sv[order] ** 2, np.ascontiguousarray(Vt[order].T)


@dataclass(frozen=True)
class Problem:
    """The standardized problem of one set of rows, ready to solve for any α.

    The eigen-decomposition of the live columns' Gram (``evals``, ``evecs``) is computed on
    first use only: the ridge path, the α grid, the floor on α and coordinate descent need it,
    while a refit at one α does not (ridge by a Cholesky factor of ``G + αI``, lasso and elastic
    net by the active-set method), and on 1,000 columns it costs ten Cholesky factors.
    """

    G: np.ndarray
    c: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    mean_y: float
    live: np.ndarray  # columns with sd > 0
    var_y: float = 1.0  # ỹᵀWỹ/W, twice the objective at β = 0 (for the duality gap)
    #: Penalty factor vⱼ ≥ 0 of each column; None when every factor is 1.
    factors: Optional[np.ndarray] = None
    #: Rows behind the Gram when known: fewer rows than columns make its eigenpairs cheaper (:func:`_wide_eigen`).
    n_rows: Optional[int] = None
    #: Reduced problems with the factors, built once per problem (see :func:`_reduce`).
    _reduced: dict = field(default_factory=dict, compare=False, repr=False)
    #: The eigenpairs once computed (see :meth:`eigen`).
    _eig: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def _wide_shape(self) -> bool:
        k = int(np.count_nonzero(self.live))
        return self.n_rows is not None and k > WIDE_MIN_COLUMNS and int(self.n_rows) < k

    @property
    def wide(self) -> bool:
        """Far fewer non-null directions than columns (the L1 solver sweeps the k×p factor).

        Only a Gram of fewer rows than columns can be wide: any other keeps every eigenpair,
        so the answer needs no eigen-decomposition there.
        """
        if not self._wide_shape:
            return False
        return 3 * self.evals.size < int(np.count_nonzero(self.live))

    def eigen(self):
        """(λ ascending, V) of ``G[live][:, live]``; a wide Gram's null directions are left out."""
        if "pairs" not in self._eig:
            Gl = self.live_gram()
            if self._wide_shape:
                self._eig["pairs"] = _wide_eigen(Gl)
            else:
                self._eig["pairs"] = np.linalg.eigh(Gl) if Gl.size else (np.zeros(0), np.zeros((0, 0)))
        return self._eig["pairs"]

    def live_gram(self) -> np.ndarray:
        """``G[live][:, live]``: G itself when every column is live (read it, never write to it)."""
        if self.live.all():
            return self.G
        if "gram" not in self._eig:
            self._eig["gram"] = self.G[np.ix_(self.live, self.live)]
        return self._eig["gram"]

    @property
    def evals(self) -> np.ndarray:
        """Eigenvalues of ``G[live][:, live]``, ascending (computed on first use)."""
        return self.eigen()[0]

    @property
    def evecs(self) -> np.ndarray:
        """Eigenvectors matching :attr:`evals` (computed on first use)."""
        return self.eigen()[1]

    @classmethod
    def from_stats(cls, stats: GramStats, factors=None) -> "Problem":
        """The standardized problem of ``stats``; ``factors`` (p,) are the columns' penalty factors."""
        if factors is not None:
            factors = np.asarray(factors, dtype=float)
            if np.all(factors == 1.0):
                factors = None
        G, c, mean, sd = stats.standardized()
        live = sd > 0
        var_y = max(stats.centered_yy() / stats.W, 0.0)
        return cls(G=G, c=c, mean=mean, sd=sd, mean_y=stats.mean_y(), live=live, var_y=var_y, factors=factors,
                   n_rows=int(stats.n))

    def to_original(self, beta: np.ndarray):
        """Standardized coefficients (…, p) → original-unit coefficients and intercepts."""
        inv = np.where(self.sd > 0, 1.0 / np.where(self.sd > 0, self.sd, 1.0), 0.0)
        coef = beta * inv
        intercept = self.mean_y - coef @ self.mean
        return coef, intercept


def alpha_max(c: np.ndarray, l1_ratio: float) -> float:
    """Smallest α at which every coefficient is 0 (ρ > 0); the grid top for ridge."""
    top = float(np.max(np.abs(c))) if c.size else 0.0
    return top / max(l1_ratio, MIN_GRID_RATIO)


def alpha_grid(c: np.ndarray, l1_ratio: float, n_penalties: int = 100, penalty_ratio: float = 1e-3,
               evals=None) -> np.ndarray:
    """``n_penalties`` α values, descending, evenly spaced on the log scale.

    Lasso and elastic net: from ``alpha_max`` down to ``penalty_ratio·alpha_max``.
    Ridge (``l1_ratio == 0``): from the same top (the ρ = 1e-3 convention) down
    to ``penalty_ratio·top`` or, when the eigenvalues ``evals`` of G are given
    and it is lower, to 1/100 of the smallest non-null eigenvalue, so that the
    path always reaches the point where every direction of the data keeps at
    least 99% of its least-squares size (ridge shrinks direction i by
    λᵢ/(λᵢ+α)); the span is capped at 12 decades.  Without this the ridge
    path of a long table stops at strong shrinkage and CV picks its last α.
    """
    top = alpha_max(c, l1_ratio)
    if not top > 0:
        # y is uncorrelated with every column: any positive grid gives β = 0.
        top = 1.0
    bottom = top * penalty_ratio
    if l1_ratio == 0.0 and evals is not None:
        lam = np.asarray(evals, dtype=float)
        lam = lam[lam > EIG_RTOL * max(float(lam.max(initial=0.0)), np.finfo(float).tiny)]
        if lam.size:
            bottom = max(min(bottom, 1e-2 * float(lam.min())), top * 1e-12)
    return np.geomspace(top, bottom, n_penalties)


#: Ridge at this many α or fewer is solved by a Cholesky factor of ``G + αI`` per α (p³/3 work
#: each) rather than from the eigen-decomposition of G (about ten times that, shared by every α).
RIDGE_FACTOR_MAX_ALPHAS = 3
#: ... when ``(‖G‖₁ + α)/α``, an upper bound on the condition number of ``G + αI`` (‖G‖₁ ≥ λmax),
#: is at most this.  Both routes then agree to about this times ε (2e-10 relative at worst), the
#: round-off along null directions of G that the eigen route zeroes included: divided by
#: ``λ + α ≥ α``, it stays below that share of the coefficients.
RIDGE_FACTOR_MAX_COND = 1e6


def ridge_beta(problem: Problem, alphas) -> np.ndarray:
    """Standardized ridge coefficients (len(alphas), p) in closed form."""
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    p = problem.c.shape[0]
    out = np.zeros((alphas.size, p))
    if not problem.live.any():
        return out
    if alphas.size <= RIDGE_FACTOR_MAX_ALPHAS and _ridge_by_factor(problem, alphas, out):
        return out
    V, lam = problem.evecs, problem.evals
    if V.size:
        proj = V.T @ problem.c[problem.live]  # (k,)
        lam = np.clip(lam, 0.0, None)
        # c lies in the range of G, so along a null direction its component is round-off only,
        # which 1/(λ + α) would magnify at small α: it is exactly 0.
        proj = np.where(lam > EIG_RTOL * max(float(lam.max(initial=0.0)), np.finfo(float).tiny), proj, 0.0)
        out[:, problem.live] = (proj[None, :] / (lam[None, :] + alphas[:, None])) @ V.T
    return out


def _ridge_by_factor(problem: Problem, alphas: np.ndarray, out: np.ndarray) -> bool:
    """Ridge at each α by a Cholesky factor of ``G + αI`` into ``out``; False (``out`` untouched) when
    some α is too small beside ‖G‖₁ for that route (:data:`RIDGE_FACTOR_MAX_COND`)."""
    from scipy.linalg import lapack

    live = problem.live
    Gl = problem.live_gram()
    top = float(np.max(np.sum(np.abs(Gl), axis=0), initial=0.0))
    if not np.all((alphas > 0) & (top + alphas <= RIDGE_FACTOR_MAX_COND * alphas)):
        return False
    cl = problem.c[live]
    rows = []
    diag = np.diag_indices(Gl.shape[0])
    for a in alphas:
        M = np.array(Gl, order="F")  # one copy, in the order LAPACK factors in place
        M[diag] += float(a)
        U, info = lapack.dpotrf(M, lower=0, clean=0, overwrite_a=1)
        if info != 0:
            return False
        x, info = lapack.dpotrs(U, cl, lower=0)
        if info != 0 or not np.all(np.isfinite(x)):
            return False
        rows.append(x)
    out[:, live] = np.asarray(rows)
    return True


def _factor(problem: Problem):
    """(√k·L, √k·z) with G = LᵀL over the non-null directions and Lᵀz = c."""
    lam, V = problem.evals, problem.evecs
    keep = lam > EIG_RTOL * max(float(lam[-1]) if lam.size else 0.0, np.finfo(float).tiny)
    lam_k, V_k = lam[keep], V[:, keep]
    k = int(keep.sum())
    root = np.sqrt(lam_k)
    L = root[:, None] * V_k.T  # (k, p_live)
    z = (V_k.T @ problem.c[problem.live]) / root
    s = np.sqrt(k)
    return np.asfortranarray(s * L), s * z


def enet_beta(problem: Problem, alphas, l1_ratio: float, coef_init=None, tol=None) -> np.ndarray:
    """Standardized lasso / elastic-net coefficients (len(alphas), p), warm-started along ``alphas``.

    ``alphas`` should be descending for the warm starts to help.  Solved by the active-set
    method (:mod:`regbench.models.active_set`, exact up to round-off); coordinate descent
    takes over where it gives up.
    """
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    p = problem.c.shape[0]
    out = np.zeros((alphas.size, p))
    if not problem.live.any():
        return out
    if problem.wide and l1_ratio > 0.0:
        # Far fewer rows than columns: most coefficients are 0 along the path, so each α is
        # solved on the columns the strong rules keep, with a check of the rest (see below).
        init = None if coef_init is None else np.asarray(coef_init, dtype=float)[problem.live]
        out[:, problem.live] = screened_path(problem.live_gram(), problem.c[problem.live],
                                             float(problem.var_y), alphas, l1_ratio, init,
                                             SCREEN_TOL if tol is None else min(tol, SCREEN_TOL))
        if l1_ratio == 1.0:
            _merge_copies(problem, out)
        return out
    # A live column has a standardized variance of 1, so G has a non-null direction: the
    # active-set method needs nothing more, and the factor of G only coordinate descent.
    Gl = problem.live_gram()
    init = None if coef_init is None else np.asarray(coef_init, dtype=float)[problem.live]
    exact = enet_path_gram(Gl, problem.c[problem.live], alphas, l1_ratio, init)
    if exact is not None:
        out[:, problem.live] = exact
        if l1_ratio == 1.0:
            _merge_copies(problem, out)
        return out
    A, b = _factor(problem)
    if A.shape[0] == 0:
        return out
    return _enet_cd(problem, A, b, Gl, alphas, l1_ratio, coef_init, tol, out)


def _enet_cd(problem, A, b, Gl, alphas, l1_ratio, coef_init, tol, out) -> np.ndarray:
    """The path by scikit-learn's coordinate descent, where the active-set method gave up."""
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.linear_model import enet_path

    k = A.shape[0]
    # Coordinate descent on the precomputed Gram (k·G, k·c) costs p² per sweep and
    # measured about three times faster here than sweeping the k×p factor itself.
    Q = np.ascontiguousarray(k * Gl)
    q = np.ascontiguousarray(k * problem.c[problem.live])
    init = None
    if coef_init is not None:
        init = np.asfortranarray(np.asarray(coef_init, dtype=float)[problem.live])
    with warnings.catch_warnings():
        # Convergence is checked by the caller through the KKT conditions; a
        # near-flat direction can leave a gap a hair above the tight tolerance.
        warnings.simplefilter("ignore", ConvergenceWarning)
        _, coefs, _ = enet_path(
            A, b, l1_ratio=l1_ratio, alphas=alphas, precompute=Q, Xy=q, copy_X=False, coef_init=init,
            check_input=False, tol=CD_TOL if tol is None else tol, max_iter=CD_MAX_ITER,
        )
    # enet_path sorts a grid of several α descending; keep the caller's order.
    if alphas.size > 1:
        order = np.argsort(-alphas, kind="stable")
        back = np.empty_like(order)
        back[order] = np.arange(order.size)
        coefs = coefs[:, back]
    out[:, problem.live] = coefs.T
    if l1_ratio == 1.0:
        _merge_copies(problem, out)
    return out


def screened_path(G: np.ndarray, c: np.ndarray, var_y: float, alphas, l1_ratio: float, init=None,
                  tol: float = SCREEN_TOL) -> np.ndarray:
    """Lasso / elastic net along ``alphas`` with sequential strong rules and a KKT check.

    Minimises ``½βᵀGβ − cᵀβ + α(ρ‖β‖₁ + (1−ρ)/2‖β‖²)`` at each α (descending order is
    best: each fit warm-starts the next).  Sequential strong rule (Tibshirani, Bien, Friedman,
    Hastie, Simon, Taylor & Tibshirani 2012, JRSS-B 74(2), §3 and §5 for the elastic net): at
    α, column j is left out when ``|u_j| < ρ(2α − α_prev)``, where ``u = c − Gβ`` is the
    gradient of the loss at the fit at the previous α.  The rule can be wrong, so after
    solving on the columns kept, every left-out column is checked against its optimality
    condition ``|u_j| ≤ αρ`` (with β_j = 0); any that breaks it joins the kept columns and
    the α is solved again.  When no left-out column breaks it, the fit on the kept columns
    is the fit on all of them, and its duality gap (``tol`` × ``var_y`` at most) is the full
    problem's: a left-out column adds nothing to the dual of either the lasso or the elastic
    net while ``|u_j| ≤ αρ``.  Each solve is coordinate descent on the kept columns' Gram
    (s×s work per sweep, s the columns kept), warm-started.

    Returns
    -------
    ndarray (len(alphas), p)
    """
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    p = c.shape[0]
    out = np.zeros((alphas.size, p))
    if p == 0:
        return out
    beta = np.zeros(p) if init is None else np.array(init, dtype=float, copy=True)
    nz = np.flatnonzero(beta)
    grad = c - G[:, nz] @ beta[nz] if nz.size else c.copy()
    # Before the first α: the fit it warm-starts from (α_prev = α, so only the columns that
    # break their conditions now are added) or, from β = 0, the top of the path.
    l1_prev = None if nz.size else float(np.max(np.abs(c)))
    diag = np.diag(G)
    for i in np.argsort(-alphas, kind="stable"):
        l1 = float(alphas[i]) * l1_ratio
        l2 = float(alphas[i]) * (1.0 - l1_ratio)
        thr = l1 if l1_prev is None else 2.0 * l1 - l1_prev
        keep = (beta != 0.0) | ((np.abs(grad) >= thr) & (diag > 0))
        while True:
            idx = np.flatnonzero(keep)
            if idx.size:
                w = _cd_gram(np.ascontiguousarray(G[np.ix_(idx, idx)]), np.ascontiguousarray(c[idx]),
                             beta[idx], l1, l2, var_y, tol)
                beta[:] = 0.0
                beta[idx] = w
                used = idx[w != 0.0]
                grad = c - G[:, used] @ beta[used]
            else:
                grad = c.copy()
            broken = ~keep & (np.abs(grad) > l1) & (diag > 0)
            if not broken.any():
                break
            keep |= broken
        out[i] = beta
        l1_prev = l1
    return out


def _cd_gram(Q: np.ndarray, q: np.ndarray, w0: np.ndarray, l1: float, l2: float, var_y: float,
             tol: float) -> np.ndarray:
    """argmin ``½wᵀQw − qᵀw + l1‖w‖₁ + l2/2‖w‖²`` by coordinate descent, to a duality gap of ``tol·var_y``.

    scikit-learn's compiled Gram routine solves exactly this; ``var_y`` stands in for ``yᵀy``,
    which makes its duality gap the one of :func:`duality_gaps` (the objective's constant is
    ½·var_y).  ``enet_path`` would validate its inputs on every call, which costs more than a
    solve on a small Gram; it serves where the compiled routine is not importable.
    """
    from sklearn.exceptions import ConvergenceWarning

    y = np.array([np.sqrt(max(var_y, np.finfo(float).tiny))])
    w = np.array(w0, dtype=float, copy=True)
    with warnings.catch_warnings():
        # The caller's certificate judges convergence; a near-flat direction can stop a hair short.
        warnings.simplefilter("ignore", ConvergenceWarning)
        routine = _compiled_cd()
        if routine is not None:
            return np.asarray(routine(w, l1, l2, Q, q, y, CD_MAX_ITER, tol, _CD_RNG, 0, 0)[0], dtype=float)
        from sklearn.linear_model import enet_path

        alpha = l1 + l2
        rho = l1 / alpha if alpha > 0 else 1.0
        X1 = np.zeros((1, q.shape[0]), order="F")
        _, coefs, _ = enet_path(X1, y, l1_ratio=rho, alphas=[alpha], precompute=Q, Xy=q, copy_X=False,
                                coef_init=np.asfortranarray(w), check_input=False, tol=tol, max_iter=CD_MAX_ITER)
        return coefs[:, 0]


_CD_RNG = np.random.RandomState(0)


@functools.lru_cache(maxsize=1)
def _compiled_cd():
    """scikit-learn's compiled coordinate descent on a Gram (a private module), or None when absent.

    Imported on first use: scikit-learn is a heavy import (DEVELOPERS.md).
    """
    try:
        from sklearn.linear_model._cd_fast import enet_coordinate_descent_gram
    except ImportError:  # pragma: no cover - depends on the installed scikit-learn
        return None
    return enet_coordinate_descent_gram


#: Standardized columns whose |correlation| is within this of 1 are copies of each other.
COPY_TOL = 1e-10


def _merge_copies(problem: Problem, beta: np.ndarray) -> None:
    """Put the lasso weight of columns that are exact copies (after standardizing) on the first.

    For copies x̃_k = s·x̃_j the loss depends only on β_j + s·β_k, and at an optimum
    both carry the same effective sign, so moving all of it to column j keeps the
    objective and the optimality conditions; it only makes the choice among equally
    good solutions deterministic: the lasso then uses one column of an exact
    alias (the first in design order), not a share of each.  Elastic net and
    ridge have a unique solution that splits weight evenly and are left alone.
    """
    live = np.flatnonzero(problem.live)
    if live.size < 2:
        return
    G = problem.live_gram()
    d = np.sqrt(np.clip(np.diag(G), 0.0, None))
    # Only weight can move, so when no column a fit uses has a copy nothing changes: the
    # correlations of those columns decide it (|used| × p work rather than p²).
    used = np.flatnonzero(np.any(beta[:, live] != 0.0, axis=0))
    if used.size == 0:
        return
    with np.errstate(invalid="ignore", divide="ignore"):
        Ru = np.abs(G[used] / (d[used][:, None] * d[None, :])) >= 1.0 - COPY_TOL
    Ru[np.arange(used.size), used] = False
    if not Ru.any():
        return
    with np.errstate(invalid="ignore", divide="ignore"):
        R = G / np.outer(d, d)
    close = np.abs(R) >= 1.0 - COPY_TOL
    np.fill_diagonal(close, False)
    if not close.any():
        return  # no copies: nothing to move (the usual case, decided in one comparison)
    taken = np.zeros(live.size, dtype=bool)
    for a in range(live.size):
        if taken[a]:
            continue
        copies = np.flatnonzero(~taken & (np.abs(R[a]) >= 1.0 - COPY_TOL))
        copies = copies[copies > a]
        if copies.size == 0:
            continue
        taken[copies] = True
        j = live[a]
        for b in copies:
            k = live[b]
            beta[:, j] += np.sign(R[a, b]) * beta[:, k] * (d[b] / d[a])
            beta[:, k] = 0.0


def solve_beta(problem: Problem, alphas, l1_ratio: float, coef_init=None, tol=None) -> np.ndarray:
    """Standardized coefficients of the family with L1 ratio ``l1_ratio`` at each α."""
    if problem.factors is not None:
        return factor_beta(problem, alphas, l1_ratio, coef_init=coef_init)
    if l1_ratio == 0.0:
        return ridge_beta(problem, alphas)
    return enet_beta(problem, alphas, l1_ratio, coef_init=coef_init, tol=tol)


def fit_path(stats: GramStats, name: str, l1_ratio: float, alphas, columns, problem: Problem = None) -> PathResult:
    """The path of one family over ``alphas`` (descending) on the rows behind ``stats``.

    Returns
    -------
    PathResult
        Coefficients in original units and standardized, and the intercepts.
    """
    problem = problem or Problem.from_stats(stats)
    alphas = np.asarray(alphas, dtype=float)
    beta = solve_beta(problem, alphas, l1_ratio)
    coef, intercepts = problem.to_original(beta)
    return PathResult(name=name, l1_ratio=float(l1_ratio), alphas=alphas.copy(), coef=coef, coef_std=beta,
                      intercepts=np.asarray(intercepts, dtype=float), columns=tuple(columns))


def model_from_problem(problem: Problem, name: str, l1_ratio: float, alpha: float, columns,
                       coef_init=None, relaxation=None) -> LinearModel:
    """The exact fit of one family at one α.

    With ``relaxation`` γ (relaxed families) the penalized fit at α is blended
    with the unpenalized refit on the columns it selected
    (:mod:`regbench.models.relaxed`); the duality gap is the penalized fit's.
    """
    beta = solve_beta(problem, [alpha], l1_ratio, coef_init=coef_init, tol=CD_TOL)[0]
    gap = float(duality_gaps(problem, beta, [alpha], l1_ratio)[0])
    if relaxation is not None:
        from regbench.models.relaxed import blend, refit_selected

        beta = blend(beta, refit_selected(problem, beta), relaxation)
        relaxation = float(relaxation)
    coef, intercept = problem.to_original(beta)
    return LinearModel(name=name, columns=tuple(columns), intercept=float(intercept), coef=coef, coef_std=beta,
                       alpha=float(alpha), l1_ratio=float(l1_ratio), gap=gap, converged=bool(gap <= GAP_TOL),
                       relaxation=relaxation)


def kkt_violation(problem: Problem, beta: np.ndarray, alpha: float, l1_ratio: float) -> float:
    """Largest breach of the optimality conditions of the standardized problem at ``beta``.

    With ``g = c − Gβ − α(1−ρ)β``: ``|g_j| ≤ αρ`` where β_j = 0 and
    ``g_j = αρ·sign(β_j)`` where β_j ≠ 0.
    """
    g = problem.c - problem.G @ beta - alpha * (1.0 - l1_ratio) * beta
    bound = alpha * l1_ratio
    zero = beta == 0
    v_zero = np.max(np.abs(g[zero]) - bound, initial=0.0)
    v_nz = np.max(np.abs(g[~zero] - bound * np.sign(beta[~zero])), initial=0.0)
    return float(max(v_zero, v_nz))


def duality_gaps(problem: Problem, beta, alphas, l1_ratio: float) -> np.ndarray:
    """Duality gap of each fit, as a share of the weighted variance of y.

    Parameters
    ----------
    problem : Problem
    beta : ndarray (m, p)
        Standardized coefficients, one fit per row.
    alphas : ndarray (m,)
    l1_ratio : float

    Returns
    -------
    ndarray (m,)
        ``(P(β) − D(θ)) / var_y``: P is the objective of the module docstring
        (β's primal value), D the Fenchel dual at the point θ built from β's
        residual, so the true optimum lies within the gap of P(β).  With
        λ₁ = αρ and λ₂ = α(1−ρ), and R the weighted residual (all in the
        Gram's terms, ‖R‖² = var_y − 2cᵀβ + βᵀGβ, ⟨y, R⟩ = var_y − cᵀβ,
        u = X̃ᵀR = c − Gβ)::

            P = ½‖R‖² + λ₁‖β‖₁ + λ₂/2·‖β‖²
            ρ < 1:  θ = R,   D = ⟨y, R⟩ − ½‖R‖² − Σ (|u_j| − λ₁)₊² / (2λ₂)
            ρ = 1:  θ = sR,  s = min(1, λ₁/‖u‖∞),  D = s⟨y, R⟩ − ½s²‖R‖²

        (the lasso's dual point is scaled into its feasible set ‖X̃ᵀθ‖∞ ≤ λ₁).
    """
    B = np.atleast_2d(np.asarray(beta, dtype=float))
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    scale = max(float(problem.var_y), np.finfo(float).tiny)
    if problem.factors is not None:
        # Unpenalized columns are partialled out (their coefficients are exact given
        # the others), and λ₁, λ₂ carry each column's factor.
        red = _reduce(problem)
        if red.pen.size == 0:
            return np.zeros(B.shape[0])
        return _gaps(red.sub.G, red.sub.c, red.sub.var_y, B[:, red.pen], alphas, l1_ratio, red.v) / scale
    return _gaps(problem.G, problem.c, float(problem.var_y), B, alphas, l1_ratio, None) / scale


def _gaps(G, c, vy, B, alphas, l1_ratio, v):
    nz = np.flatnonzero(np.any(B != 0.0, axis=0))
    Gb = B[:, nz] @ G[nz, :]  # (m, p): only columns some fit uses enter
    cb = B @ c
    RR = np.clip(vy - 2.0 * cb + np.einsum("ij,ij->i", Gb, B), 0.0, None)
    yR = vy - cb
    U = c[None, :] - Gb
    v = np.ones(B.shape[1]) if v is None else v
    l1 = (alphas * l1_ratio)[:, None] * v[None, :]  # (m, p)
    l2 = (alphas * (1.0 - l1_ratio))[:, None] * v[None, :]
    primal = 0.5 * RR + np.sum(l1 * np.abs(B), axis=1) + 0.5 * np.sum(l2 * B * B, axis=1)
    if l1_ratio < 1.0:
        excess = np.clip(np.abs(U) - l1, 0.0, None)
        dual = yR - 0.5 * RR - np.sum(excess * excess / (2.0 * l2), axis=1)
    else:
        # Scale θ = sR into the feasible set |uⱼ|·s ≤ λ₁ⱼ of every column.
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(np.abs(U) > l1, l1 / np.abs(U), 1.0)
        s = np.min(ratio, axis=1, initial=1.0)
        dual = s * yR - 0.5 * s * s * RR
    return np.clip(primal - dual, 0.0, None)


# -- penalty factors ---------------------------------------------------------------------------
#
# With factors the penalty is α·Σⱼ vⱼ(ρ|βⱼ| + (1−ρ)/2·βⱼ²).  Columns with vⱼ = 0 are
# unpenalized: for fixed penalized coefficients β_P their best coefficients are
# β_U = G_UU⁺(c_U − G_UP β_P), so they are partialled out first and the penalized
# columns solve the reduced problem (G_PP − G_PU G_UU⁺ G_UP, c_P − G_PU G_UU⁺ c_U).
# On that reduced problem an exact rescaling turns the factors into a plain penalty
# where one exists:
#   * every factor 1: the plain solver as is;
#   * ridge: γ = √v·β turns Σ vⱼβⱼ² into ‖γ‖² (closed form by eigen-decomposition);
#   * lasso: γ = v·β turns Σ vⱼ|βⱼ| into ‖γ‖₁ (the plain lasso path with warm starts);
#   * elastic net: no one rescaling serves both parts, so each α folds its weighted
#     ridge part into the Gram, H = G + α(1−ρ)·diag(v), and solves the lasso γ = v·β
#     on (S H S, S c), S = diag(1/v), warm-started from the previous α
#     (coordinate descent with covariance updates, Friedman, Hastie & Tibshirani 2010).

#: A reduced column whose variance left after partialling out the unpenalized
#: columns is below this (of the standardized 1) is taken as explained by them.
REDUCED_RTOL = 1e-10


@dataclass(frozen=True)
class _Reduced:
    free: np.ndarray  # indices of unpenalized live columns
    pen: np.ndarray  # indices of penalized live columns
    M: np.ndarray  # G_UU⁺ G_UP
    b0: np.ndarray  # G_UU⁺ c_U
    sub: Problem  # the reduced problem over ``pen``
    v: np.ndarray  # factors of ``pen``


def _sub_problem(G: np.ndarray, c: np.ndarray, var_y: float, live=None) -> Problem:
    k = c.shape[0]
    if live is None:
        live = np.diag(G) > REDUCED_RTOL if k else np.zeros(0, dtype=bool)
    return Problem(G=G, c=c, mean=np.zeros(k), sd=np.ones(k), mean_y=0.0, live=live, var_y=var_y)


def _reduce(problem: Problem, kind: str = "plain") -> _Reduced:
    """The problem with its unpenalized columns partialled out, built once per ``kind``.

    ``kind`` rescales the penalized columns (γ = β/scale): 'plain' not at all,
    'ridge' by 1/√v, 'lasso' by 1/v.
    """
    v = problem.factors
    if kind != "plain" and np.all(v[v > 0] == 1.0):
        kind = "plain"  # factors of 0 and 1 only: no rescaling, one reduction serves every family
    if kind not in problem._reduced:
        safe = np.where(v > 0, v, 1.0)
        scale = {"plain": None, "ridge": 1.0 / np.sqrt(safe), "lasso": 1.0 / safe}[kind]
        problem._reduced[kind] = _build_reduced(problem, scale)
    return problem._reduced[kind]


def _build_reduced(problem: Problem, scale) -> _Reduced:
    v = problem.factors
    free = np.flatnonzero(problem.live & (v == 0.0))
    pen = np.flatnonzero(problem.live & (v > 0.0))
    G, c = problem.G, problem.c
    Gpp, cp = G[np.ix_(pen, pen)], c[pen]
    var_y = float(problem.var_y)
    if free.size:
        lam, V = np.linalg.eigh(G[np.ix_(free, free)])
        keep = lam > EIG_RTOL * max(float(lam[-1]), np.finfo(float).tiny)
        pinv = (V[:, keep] / lam[keep]) @ V[:, keep].T
        Gup = G[np.ix_(free, pen)]
        M = pinv @ Gup
        b0 = pinv @ c[free]
        Gpp = Gpp - Gup.T @ M
        cp = cp - Gup.T @ b0
        var_y = max(var_y - float(c[free] @ b0), 0.0)
    else:
        M, b0 = np.zeros((0, pen.size)), np.zeros(0)
    # A column is left to the penalty when its variance after partialling out is above
    # round-off; judged before rescaling, so a large factor does not hide a column.
    live = np.diag(Gpp) > REDUCED_RTOL if pen.size else np.zeros(0, dtype=bool)
    if scale is not None:
        s = scale[pen]
        Gpp, cp = Gpp * np.outer(s, s), cp * s
    sub = _sub_problem(0.5 * (Gpp + Gpp.T), cp, var_y, live)
    return _Reduced(free=free, pen=pen, M=M, b0=b0, sub=sub, v=v[pen])


def factor_scores(problem: Problem) -> np.ndarray:
    """|cⱼ|/vⱼ of the penalized columns after partialling out the unpenalized ones.

    The largest is ``ρ·α_max``: above it every penalized coefficient is 0
    (the KKT condition |c_j| ≤ αρvⱼ at β_P = 0).
    """
    if problem.factors is None:
        return np.abs(problem.c)
    r = _reduce(problem)
    return np.abs(r.sub.c) / r.v if r.v.size else np.zeros(0)


def factor_evals(problem: Problem) -> np.ndarray:
    """Eigenvalues of the ridge problem the factors turn into (for the bottom of the ridge grid)."""
    if problem.factors is None:
        return problem.evals
    return _reduce(problem, "ridge").sub.evals


def factor_beta(problem: Problem, alphas, l1_ratio: float, coef_init=None) -> np.ndarray:
    """Standardized coefficients (len(alphas), p) with the problem's penalty factors."""
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    p = problem.c.shape[0]
    out = np.zeros((alphas.size, p))
    v = problem.factors
    if l1_ratio == 0.0:
        kind = "ridge"
    elif l1_ratio == 1.0:
        kind = "lasso"
    else:
        kind = "plain"
    red = _reduce(problem, kind)
    # The elastic net needs its own route only when the penalized columns' factors differ from 1.
    uniform = kind != "plain" or bool(np.all(red.v == 1.0))
    v_scale = {"ridge": lambda x: 1.0 / np.sqrt(x), "lasso": lambda x: 1.0 / x, "plain": lambda x: np.ones_like(x)}
    init = None
    if coef_init is not None and red.pen.size:
        init = np.asarray(coef_init, dtype=float)[red.pen]
    if red.pen.size:
        if uniform:
            s = v_scale[kind](red.v)
            g0 = None if init is None else init / s
            beta_p = solve_beta(red.sub, alphas, l1_ratio, coef_init=g0) * s
        else:
            beta_p = _weighted_enet(red.sub, red.v, alphas, l1_ratio, init)
        out[:, red.pen] = beta_p
    if red.free.size:
        out[:, red.free] = red.b0[None, :] - beta_p @ red.M.T if red.pen.size else red.b0[None, :]
    return out


def _weighted_enet(sub: Problem, v: np.ndarray, alphas: np.ndarray, l1_ratio: float, init) -> np.ndarray:
    """Elastic net with factors ``v`` on a reduced problem: one lasso solve per α, warm-started
    (active set; coordinate descent where it gives up)."""
    out = np.zeros((alphas.size, sub.c.shape[0]))
    live = np.flatnonzero(sub.live)
    if live.size == 0:
        return out
    Gl, cl, vl = sub.G[np.ix_(live, live)], sub.c[live], v[live]
    s = 1.0 / vl
    ss = np.outer(s, s)
    q = np.ascontiguousarray(cl * s)
    # enet_path needs rows only for their shape and ‖y‖²: one row of norm² var_y
    # keeps its objective equal to ours (its n_samples scaling is then 1).
    X1 = np.zeros((1, live.size), order="F")
    y1 = np.array([np.sqrt(max(sub.var_y, 0.0))])
    gamma = np.zeros(live.size) if init is None else np.asarray(init, dtype=float)[live] / s
    for i in np.argsort(-alphas, kind="stable"):
        a = float(alphas[i])
        Q = np.ascontiguousarray((Gl + np.diag(a * (1.0 - l1_ratio) * vl)) * ss)
        exact = enet_path_gram(Q, q, [a * l1_ratio], 1.0, gamma)
        if exact is not None:
            gamma = exact[0]
            out[i, live] = gamma * s
            continue
        from sklearn.exceptions import ConvergenceWarning
        from sklearn.linear_model import enet_path

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            _, coefs, _ = enet_path(X1, y1, l1_ratio=1.0, alphas=[a * l1_ratio], precompute=Q, Xy=q, copy_X=False,
                                    coef_init=np.asfortranarray(gamma), check_input=False, tol=CD_TOL,
                                    max_iter=CD_MAX_ITER)
        gamma = coefs[:, 0]
        out[i, live] = gamma * s
    return out

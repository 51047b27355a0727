"""Logistic regression for a yes/no outcome: unpenalized with inference, and penalized paths with CV.

Every logistic model here minimises one objective on predictors standardized
by the weighted mean and weighted population SD of the rows being fitted
(x̃), with row weights wᵢ and W = Σwᵢ::

    (1/W) · Σᵢ wᵢ ℓ(yᵢ, pᵢ)  +  α · ( ρ‖β‖₁ + (1−ρ)/2 · ‖β‖² ),    pᵢ = 1 / (1 + exp(−b₀ − x̃ᵢβ))

with ℓ(y, p) = −y·log p − (1−y)·log(1−p) the log-loss; the intercept is not
penalized.  α = 0 is the unpenalized model.  In scikit-learn's terms
(``LogisticRegression``, which minimises ``C·Σ wᵢℓᵢ + penalty``) this is
``C = 1 / (α·W)`` with ``l1_ratio = ρ`` on the same standardized columns.

Solver: proximal Newton (the route of glmnet).  Each outer step makes one
pass over the rows to form the weighted Gram of the quadratic approximation
of the log-loss at the current fit (weights wᵢpᵢ(1−pᵢ)/W, intercept
eliminated by centring); the penalized least-squares problem on that p×p Gram
is solved by :mod:`regbench.models.penalized` (closed form for ridge,
coordinate descent on the Gram for lasso and elastic net), and a backtracking
line search on the objective keeps every step downhill.  Along a path each α
starts from the previous solution.

``y`` may be a share between 0 and 1 (a row of yes/no counts); with the row's
total count as its weight, estimates and standard errors are those of the
expanded table of single yes/no rows.

Which columns the unpenalized model keeps, and why it sets the others aside,
is decided exactly as for OLS: an exact dependency among the predictors is the
same problem whatever the outcome, so the OLS machinery (``models.ols``)
decides and explains it.  Complete or quasi-complete separation (a column or
combination that predicts the outcome perfectly) leaves the likelihood without
a maximum; it is detected by a linear program and explained, and no
coefficient is reported for the unpenalized model then.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from regbench.formatting import plain_number
from regbench.errors import ModelError
from regbench.models import cv as cvmod
from regbench.models.coding import LevelCoding
from regbench.models.penalized import MIN_GRID_RATIO, Problem, alpha_grid, solve_beta
from regbench.models.results import (
    CVResult, FitResults, FitSettings, LinearModel, LogisticResult, PathResult, PenalizedFit, Separation,
)
from regbench.progress import check, report

#: Outer steps stop when no standardized coefficient (nor the intercept) moves more than this.
TOL = 1e-9
#: Looser stop for the points of a path and the CV folds: Newton converges quadratically, so
#: after a step this small the error left is of its square (the error curve needs far less).
PATH_TOL = 1e-4
MAX_OUTER = 100
#: A standardized coefficient this small against the largest is round-off (see _drop_dust).
DUST = 1e-9
#: Coordinate-descent sweeps per inner solve (each outer step starts from the last solution).
INNER_SWEEPS = 2000
#: Signs of separation after the unpenalized fit, which alone pay for the check (a linear
#: programme over every row): no convergence, a standardized coefficient this large (an odds
#: ratio above e³⁰ per SD is never an estimate), or a fitted probability at 0 or 1 in double
#: precision on its observed side.
SEPARATION_BETA = 30.0
SEPARATION_P = 1e-15
#: A path step reuses the last Hessian while each step shrinks to at most this share of the one
#: before (linear convergence at least this fast); otherwise the Hessian is computed afresh.
LAG_CONTRACTION = 0.25


def log_loss_terms(eta: np.ndarray, y: np.ndarray) -> np.ndarray:
    """ℓ(y, p) for p = expit(η), stable for large |η| (shares of "yes" allowed)."""
    return np.logaddexp(0.0, eta) - y * eta


def _standardize(X, w):
    W = float(w.sum())
    mean = (w @ X) / W
    var = (w @ (X * X)) / W - mean * mean
    # A second, centred pass for accuracy when the mean is large against the spread.
    var = (w @ ((X - mean) ** 2)) / W
    sd = np.sqrt(np.clip(var, 0.0, None))
    live = sd > 1e-12 * (np.abs(mean) + 1.0)
    sd = np.where(live, sd, 0.0)
    return mean, sd, live


class _Rows:
    """The standardized live columns of the rows being fitted."""

    def __init__(self, X, y, w):
        self.y = np.asarray(y, dtype=float)
        self.w = np.asarray(w, dtype=float)
        self.W = float(self.w.sum())
        if not self.W > 0:
            raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
        self.wn = self.w / self.W
        self.mean, self.sd, self.live = _standardize(X, self.w)
        idx = np.flatnonzero(self.live)
        self.idx = idx
        self.Xs = np.ascontiguousarray((X[:, idx] - self.mean[idx]) / self.sd[idx])
        # The Hessian pass (the n·p² part of each step) runs in single precision: it only shapes
        # the Newton direction; gradients, objective and convergence stay in double precision.
        self.Xs32 = self.Xs.astype(np.float32)
        self.ybar = float(self.wn @ self.y)
        self.p = X.shape[1]

    def to_original(self, beta_live, b0):
        coef = np.zeros(self.p)
        coef[self.idx] = beta_live / self.sd[self.idx]
        icpt = float(b0 - coef[self.idx] @ self.mean[self.idx])
        beta = np.zeros(self.p)
        beta[self.idx] = beta_live
        return coef, icpt, beta

    def objective(self, eta, beta, alpha, rho) -> float:
        loss = float(self.wn @ log_loss_terms(eta, self.y))
        return loss + alpha * (rho * np.abs(beta).sum() + 0.5 * (1.0 - rho) * beta @ beta)

    def null_gradient(self) -> np.ndarray:
        """x̃ᵀ(w(y − ȳ))/W: the gradient at the intercept-only fit (its KKT quantity)."""
        return self.Xs.T @ (self.wn * (self.y - self.ybar))

    def null_hessian_evals(self) -> np.ndarray:
        G = self.Xs.T @ (self.Xs * self.wn[:, None])
        return np.linalg.eigvalsh(self.ybar * (1.0 - self.ybar) * G)


def _logit(p: float) -> float:
    p = min(max(p, 1e-12), 1 - 1e-12)
    return float(np.log(p / (1.0 - p)))


def _inner(H, c, alpha, rho, init):
    """argmin ½βᵀHβ − cᵀβ + α(ρ‖β‖₁ + (1−ρ)/2‖β‖²) on a p×p problem."""
    k = c.shape[0]
    if k == 0:
        return np.zeros(0)
    if rho == 0.0:
        A = H + alpha * np.eye(k)
        try:
            return np.linalg.solve(A, c)
        except np.linalg.LinAlgError:
            return np.linalg.lstsq(A, c, rcond=None)[0]
    fast = _cd_gram(H, c, alpha, rho, init)
    if fast is not None:
        return fast
    live = np.diag(H) > 0
    prob = Problem(G=H, c=c, mean=np.zeros(k), sd=np.ones(k), mean_y=0.0, live=live)
    return solve_beta(prob, [alpha], rho, coef_init=init)[0]


def _cd_gram(H, c, alpha, rho, init):
    """Coordinate descent on the p×p problem through scikit-learn's Gram routine, or None.

    ``enet_path`` validates its inputs on every call, which costs more than the
    solve on a small Gram; its compiled routine solves exactly
    ``½βᵀHβ − cᵀβ + a‖β‖₁ + b/2‖β‖²`` and needs a target only for the size of its
    duality gap, so a vector of norm² ``cᵀH⁺c`` (the least-squares constant) stands in.
    Falls back (returns None) when the routine is not there in this scikit-learn.
    """
    try:
        from sklearn.linear_model._cd_fast import enet_coordinate_descent_gram
    except ImportError:  # pragma: no cover - depends on the installed scikit-learn
        return None
    k = c.shape[0]
    beta = np.zeros(k) if init is None else np.array(init, dtype=float, copy=True)
    ynorm2 = float(c @ np.linalg.lstsq(H, c, rcond=1e-12)[0]) if k else 0.0
    y = np.array([np.sqrt(max(ynorm2, 1e-300))])
    import warnings

    from sklearn.exceptions import ConvergenceWarning

    try:
        with warnings.catch_warnings():
            # An inexact inner solve only costs an extra outer step; the outer loop decides
            # convergence (and the tests check the optimality conditions).  Exact aliases
            # among the columns make coordinate descent crawl, so its sweeps are capped.
            warnings.simplefilter("ignore", ConvergenceWarning)
            out = enet_coordinate_descent_gram(
                beta, float(alpha * rho), float(alpha * (1.0 - rho)), np.ascontiguousarray(H),
                np.ascontiguousarray(c), y, INNER_SWEEPS, 1e-12 * max(ynorm2, 1e-300), _RNG, 0, 0)
    except TypeError:  # pragma: no cover - a changed private signature
        return None
    return np.asarray(out[0], dtype=float)


_RNG = np.random.RandomState(0)


def _hessian(rows: _Rows, v, sv, mx):
    """The log-loss Hessian of the standardized coefficients with the intercept eliminated (the
    n·p² part of a step; single precision, as it only shapes the direction)."""
    A = rows.Xs32 * np.sqrt(v / sv).astype(np.float32)[:, None]
    H = sv * (A.T @ A).astype(np.float64) - sv * np.outer(mx, mx)
    return 0.5 * (H + H.T)


def _newton(rows: _Rows, alpha, rho, beta, b0, tol, max_outer=MAX_OUTER, lag=None):
    """Proximal Newton from (beta, b0) at one α; returns (beta, b0, iterations, converged).

    ``lag`` (a one-item list holding a Hessian or None) lets a path reuse the last Hessian
    from one α to the next: it is computed afresh only when a step does not shrink fast
    enough (``LAG_CONTRACTION``) or needed a shorter step, so most path steps cost a gradient
    pass instead of an n·p² pass.  Gradients, objective and convergence are exact either way.
    """
    Xs, y, wn = rows.Xs, rows.y, rows.wn
    eta = b0 + Xs @ beta
    f = rows.objective(eta, beta, alpha, rho)
    H = None if lag is None else lag[0]
    fresh = H is None
    last = None
    for it in range(1, max_outer + 1):
        p = 0.5 * (1.0 + np.tanh(0.5 * eta))  # expit, without overflow warnings
        v = wn * p * (1.0 - p)
        r = wn * (y - p)
        sv = float(v.sum())
        if not sv > 0:
            return beta, b0, it, False
        # One pass over the rows for both products (each pass reads the whole matrix).
        vr = Xs.T @ np.column_stack([v, r])
        vx = vr[:, 0]
        mx = vx / sv
        if H is None or lag is None:
            H, fresh = _hessian(rows, v, sv, mx), True
        g = vr[:, 1] - mx * float(r.sum())
        new = _inner(H, g + H @ beta, alpha, rho, beta)
        d = new - beta
        d0 = (float(r.sum()) - vx @ d) / sv
        deta = d0 + Xs @ d
        t = 1.0
        while True:
            cand_beta = beta + t * d
            cand_eta = eta + t * deta
            fc = rows.objective(cand_eta, cand_beta, alpha, rho)
            if fc <= f + 1e-13 * max(abs(f), 1.0) or t < 1e-6:
                break
            t *= 0.5
        step = max(abs(t * d0), float(np.max(np.abs(t * d), initial=0.0)))
        beta, b0, eta, f = cand_beta, b0 + t * d0, cand_eta, fc
        if lag is not None:
            slow = t < 1.0 or (last is not None and step > LAG_CONTRACTION * last)
            if slow and not fresh:
                H = None  # stale: the next step computes it afresh
            else:
                fresh = False
            lag[0] = H
            last = step
        if step < tol:
            beta, eta, f = _drop_dust(rows, beta, eta, f, alpha, rho)
            return beta, b0, it, True
    return beta, b0, max_outer, False


def _drop_dust(rows: _Rows, beta, eta, f, alpha, rho):
    """Set to exactly 0 the coefficients a lasso-type step left at round-off size, if no worse.

    A damped step (t < 1) mixes the inner solve's exact zeros with the previous point, and
    coordinate descent on two columns that standardize alike (an exact alias) leaves the
    second one at ±1e-13 instead of 0.  Read as "used by the model", such dust is the very
    misreading this product exists to prevent, so the sparser point is taken whenever its
    objective is not larger (to the same 1e-13 the line search accepts).
    """
    if rho <= 0.0 or beta.size == 0:
        return beta, eta, f
    dust = (beta != 0.0) & (np.abs(beta) <= DUST * max(1.0, float(np.max(np.abs(beta)))))
    if not dust.any():
        return beta, eta, f
    cand = beta.copy()
    cand[dust] = 0.0
    cand_eta = eta - rows.Xs[:, dust] @ beta[dust]
    fc = rows.objective(cand_eta, cand, alpha, rho)
    if fc <= f + 1e-13 * max(abs(f), 1.0):
        return cand, cand_eta, fc
    return beta, eta, f


def path_on_rows(X, y, w, alphas, rho, tol=PATH_TOL, cancel=None, rows=None):
    """Standardized and original-unit coefficients along ``alphas`` (descending), warm-started.

    ``rows`` (the :class:`_Rows` of ``X, y, w``) may be given to reuse its standardized copy.

    Returns
    -------
    coef : ndarray (k, p)
    intercepts : ndarray (k,)
    beta : ndarray (k, p)
        Standardized coefficients.
    rows : _Rows
    """
    rows = _Rows(X, y, w) if rows is None else rows
    alphas = np.asarray(alphas, dtype=float)
    k = alphas.size
    coef = np.zeros((k, rows.p))
    beta_all = np.zeros((k, rows.p))
    icpt = np.zeros(k)
    beta = np.zeros(rows.idx.size)
    b0 = _logit(rows.ybar)
    lag = [None]
    for i, a in enumerate(alphas):
        check(cancel)
        beta, b0, _, _ = _newton(rows, float(a), rho, beta, b0, tol, lag=lag)
        coef[i], icpt[i], beta_all[i] = rows.to_original(beta, b0)
    return coef, icpt, beta_all, rows


def logistic_grid(rows: _Rows, rho: float, n_penalties: int, penalty_ratio: float) -> np.ndarray:
    """α grid of one family: from the smallest α that zeroes every coefficient (ρ > 0;
    ridge takes the top of ρ = 1e-3) down to ``penalty_ratio`` of it; the ridge path goes
    further down, to 1/100 of the smallest eigenvalue of the log-loss Hessian at the
    intercept-only fit, as for numeric targets."""
    c = rows.null_gradient()
    evals = rows.null_hessian_evals() if rho == 0.0 else None
    return alpha_grid(c, rho, n_penalties, penalty_ratio, evals=evals)


def heldout_log_loss(X, y, w, coef, intercepts) -> np.ndarray:
    """Weighted mean log-loss on rows for each model (coef (m, p), intercepts (m,))."""
    W = float(np.sum(w))
    if not W > 0:
        return np.full(np.atleast_2d(coef).shape[0], np.nan)
    eta = X @ np.atleast_2d(coef).T + np.atleast_1d(intercepts)[None, :]
    return (w @ log_loss_terms(eta, y[:, None])) / W


# --- unpenalized ------------------------------------------------------------------------

def fit_logistic(design, ols=None, pins=(), rank_tol=None) -> LogisticResult:
    """Unpenalized weighted logistic regression with inference, on the columns OLS keeps.

    Parameters
    ----------
    design : Design
        ``y`` 1 for "yes", 0 for "no" (or a share of "yes" with the row's count as weight).
    ols : OLSResult, optional
        Supplies the kept columns and the set-aside explanations; fitted here when None.
    pins, rank_tol
        As for :func:`regbench.models.ols.fit_ols`.

    Returns
    -------
    LogisticResult
        Standard errors from the inverse Fisher information ``(X₁ᵀ diag(wp(1−p)) X₁)⁻¹``
        (weights as counts: the expanded table's), z-tests and 95% Wald intervals.
        When a column or combination separates the outcome, ``separation`` explains
        it and every estimate is NaN.
    """
    from scipy.special import ndtr, ndtri  # not scipy.stats: its import costs seconds

    if ols is None:
        from regbench.models.ols import fit_ols

        ols = fit_ols(design, pins, rank_tol)
    columns = tuple(design.columns)
    p = len(columns)
    kept_idx = np.array([columns.index(c) for c in ols.kept], dtype=int)
    on = design.weights > 0
    X = design.X[on][:, kept_idx]
    y, w = design.y[on], design.weights[on]
    rows = _Rows(X, y, w)
    beta, b0, its, ok = _newton(rows, 0.0, 0.0, np.zeros(rows.idx.size), _logit(rows.ybar), TOL)
    eta = b0 + rows.Xs @ beta
    ll = -float(w @ log_loss_terms(eta, y))
    ll0 = -float(w @ log_loss_terms(np.full_like(y, _logit(rows.ybar)), y))
    n = int(on.sum())
    W = float(w.sum())
    levels = getattr(design, "levels", ()) or ("0", "1")
    sep = None
    pfit = 0.5 * (1.0 + np.tanh(0.5 * eta))
    near = ((y > 0) & (pfit > 1 - SEPARATION_P)) | ((y < 1) & (pfit < SEPARATION_P))
    if not ok or np.any(near) or float(np.max(np.abs(beta), initial=0.0)) > SEPARATION_BETA:
        sep = find_separation(design.X[on][:, kept_idx], y, w, tuple(columns[j] for j in kept_idx), levels)
    nan = np.full(p, np.nan)
    if sep is not None:
        return LogisticResult(
            columns=columns, kept=tuple(ols.kept), set_aside=tuple(ols.set_aside), intercept=float("nan"),
            intercept_se=float("nan"), coef=nan.copy(), std_errors=nan.copy(), z_values=nan.copy(),
            p_values=nan.copy(), ci_low=nan.copy(), ci_high=nan.copy(), log_likelihood=float("nan"),
            null_log_likelihood=ll0, pseudo_r_squared=float("nan"), n_obs=n, weight_total=W, iterations=its,
            converged=False, positive_level=str(levels[1]), model=None, separation=sep)
    coef_live, icpt, _ = rows.to_original(beta, b0)
    # Fisher information on the standardized live columns with intercept, unnormalized (counts).
    v = w * pfit * (1.0 - pfit)
    Z = np.column_stack([np.ones(n), rows.Xs])
    info = Z.T @ (Z * v[:, None])
    cov_s = np.linalg.inv(info)
    # Back to original units: b0 = b0s − Σ β̃ m/s, coef = β̃/s.
    k = rows.idx.size
    T = np.zeros((k + 1, k + 1))
    T[0, 0] = 1.0
    T[0, 1:] = -rows.mean[rows.idx] / rows.sd[rows.idx]
    T[1:, 1:] = np.diag(1.0 / rows.sd[rows.idx])
    cov = T @ cov_s @ T.T
    se_k = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    coef = np.zeros(p)
    se = np.full(p, np.nan)
    coef[kept_idx] = coef_live
    se_kept = np.full(kept_idx.size, np.nan)
    se_kept[rows.idx] = se_k[1:]
    se[kept_idx] = se_kept
    with np.errstate(divide="ignore", invalid="ignore"):
        z = coef / se
    aside = np.setdiff1d(np.arange(p), kept_idx)
    z[aside] = np.nan
    pval = 2.0 * ndtr(-np.abs(z))
    q = float(ndtri(0.975))
    sd_all = np.sqrt(np.clip(design.weights @ (design.X - (design.weights @ design.X) / design.weights.sum()) ** 2
                             / design.weights.sum(), 0.0, None))
    model = LinearModel(name="logistic", columns=columns, intercept=float(icpt), coef=coef.copy(),
                        coef_std=coef * sd_all, outcome="binary")
    return LogisticResult(
        columns=columns, kept=tuple(ols.kept), set_aside=tuple(ols.set_aside), intercept=float(icpt),
        intercept_se=float(se_k[0]), coef=coef, std_errors=se, z_values=z, p_values=pval,
        ci_low=coef - q * se, ci_high=coef + q * se, log_likelihood=ll, null_log_likelihood=ll0,
        pseudo_r_squared=float(1.0 - ll / ll0) if ll0 < 0 else float("nan"), n_obs=n, weight_total=W,
        iterations=int(its), converged=bool(ok), positive_level=str(levels[1]), model=model, separation=None)


def find_separation(X, y, w, columns, levels=("0", "1")):
    """A combination of columns that splits "yes" from "no" rows, or None.

    Solves the linear program of Konis (2007): find d (with intercept) on the
    standardized columns, each entry in [−1, 1], that maximizes Σ sᵢ·scoreᵢ
    subject to sᵢ·scoreᵢ ≥ 0 for every row part (sᵢ = +1 for "yes", −1 for "no";
    a row of counts with both contributes both, which forces its score to 0).
    A positive optimum means some rows are predicted perfectly: the likelihood
    then grows without limit along d.
    """
    from scipy.optimize import linprog

    w = np.asarray(w, dtype=float)
    mean, sd, live = _standardize(X, w)
    idx = np.flatnonzero(live)
    Xs = (X[:, idx] - mean[idx]) / sd[idx]
    Z = np.column_stack([np.ones(X.shape[0]), Xs])
    yes = (w * y) > 0
    no = (w * (1.0 - y)) > 0
    A = np.vstack([Z[yes], -Z[no]])  # s·score ≥ 0  ⇔  −A d ≤ 0
    k = Z.shape[1]
    res = linprog(c=-A.sum(axis=0), A_ub=-A, b_ub=np.zeros(A.shape[0]), bounds=[(-1.0, 1.0)] * k,
                  method="highs")
    if res.status != 0 or -res.fun <= 1e-7 * A.shape[0]:
        return None
    d = _sparse_direction(A, complete=True)
    kind = "complete"
    if d is None:
        kind = "quasi-complete"
        d = _sparse_direction(A, complete=False)
        if d is None:
            d = res.x
    margin = A @ d
    scale = float(np.max(np.abs(d[1:]), initial=0.0))
    if not scale > 1e-9:
        return None
    exact = int(np.count_nonzero(margin > 1e-9 * max(1.0, scale)))
    if exact == 0:
        return None
    comb_std = d[1:] / scale
    coef = comb_std / sd[idx]
    icpt = (d[0] / scale) - coef @ mean[idx]
    keep = np.abs(comb_std) > 1e-6
    combination = {columns[j]: float(coef[i]) for i, j in enumerate(idx) if keep[i]}
    if exact == A.shape[0]:
        kind = "complete"
    return Separation(kind=kind, combination=combination, intercept=float(icpt), rows_exact=exact,
                      rows=int(A.shape[0]), sentence=separation_sentence(kind, combination, icpt, exact,
                                                                          int(A.shape[0]), levels))


def _sparse_direction(A, complete: bool):
    """The separating direction with the smallest L1 size over the columns (fewest columns to name).

    complete: every row part strictly on its side (A d ≥ 1); otherwise A d ≥ 0 with Σ A d ≥ 1.
    Returns None when infeasible.
    """
    from scipy.optimize import linprog

    m, k = A.shape
    # Variables: intercept (free), then d⁺ and d⁻ of the columns (≥ 0).
    Ap = np.hstack([A[:, :1], A[:, 1:], -A[:, 1:]])
    cost = np.r_[0.0, np.ones(2 * (k - 1))]
    bounds = [(None, None)] + [(0.0, None)] * (2 * (k - 1))
    if complete:
        res = linprog(cost, A_ub=-Ap, b_ub=-np.ones(m), bounds=bounds, method="highs")
    else:
        A_ub = np.vstack([-Ap, -Ap.sum(axis=0, keepdims=True)])
        b_ub = np.r_[np.zeros(m), -1.0]
        res = linprog(cost, A_ub=A_ub, b_ub=b_ub, bounds=bounds, method="highs")
    if res.status != 0:
        return None
    x = res.x
    return np.r_[x[0], x[1:k] - x[k:]]


def separation_sentence(kind, combination, intercept, exact, rows, levels) -> str:
    """One sentence saying which columns split the outcome and what that does to the fit."""
    no, yes = str(levels[0]), str(levels[1])
    if len(combination) == 1:
        (col, c), = combination.items()
        cut = plain_number(-intercept / c)
        side = "above" if c > 0 else "below"
        other = "below" if c > 0 else "above"
        where = f"every '{yes}' row has {col} at or {side} {cut} and every '{no}' row at or {other} it"
    else:
        terms = " ".join(("+ " if v >= 0 and i else ("− " if v < 0 and i else ("−" if v < 0 else "")))
                         + f"{plain_number(abs(v))} × {c}" for i, (c, v) in enumerate(combination.items()))
        where = (f"the score {terms} is at or above {plain_number(-intercept)} on every '{yes}' row and at or "
                 "below it on every 'no' row".replace("'no'", f"'{no}'"))
    tie = "" if kind == "complete" else f" ({rows - exact} of {rows} rows sit on the boundary)"
    return (f"The outcome is separated ({kind}): {where}{tie}, so the unpenalized logistic fit has no finite "
            "estimate and its coefficients are not shown; the penalized models (ridge, lasso, elastic net) "
            "stay finite.")


# --- penalized families -------------------------------------------------------------------

class FoldRows:
    """The standardized rows of the whole design and of each fold's training rows (on the design
    with one indicator per category level), built once and shared by every family: each costs a
    copy of the rows."""

    def __init__(self, X, y, w, ids):
        self.X, self.y, self.w, self.ids = X, y, w, ids
        self._cache = {}

    def full(self) -> _Rows:
        return self.get(None)

    def get(self, k) -> _Rows:
        if k not in self._cache:
            if k is None:
                self._cache[k] = _Rows(self.X, self.y, self.w)
            else:
                tr = self.ids != k
                self._cache[k] = _Rows(self.X[tr], self.y[tr], self.w[tr])
        return self._cache[k]

    @classmethod
    def of(cls, design, ids) -> "FoldRows":
        return cls(LevelCoding.of(design).expand(design.X), design.y, design.weights, ids)


def family_fit(design, settings: FitSettings, ids, name, rho, grouped, cancel=None, fold_rows=None) -> PenalizedFit:
    """One penalized logistic family: path on every row, (grouped) CV on held-out log-loss, the chosen α.

    Like the least-squares families, it fits one indicator per level of each category
    (:mod:`regbench.models.coding`), so no level is privileged by its name.  ``fold_rows``
    (:meth:`FoldRows.of` the same design and folds) shares the standardized rows between families.
    """
    coding = LevelCoding.of(design)
    fold_rows = FoldRows.of(design, ids) if fold_rows is None else fold_rows
    X, y, w = fold_rows.X, design.y, design.weights
    rows = fold_rows.full()
    grid = logistic_grid(rows, rho, int(settings.n_penalties), float(settings.penalty_ratio))
    coef, icpt, beta, _ = path_on_rows(X, y, w, grid, rho, cancel=cancel, rows=rows)
    path = coding.path(PathResult(name=name, l1_ratio=float(rho), alphas=grid.copy(), coef=coef, coef_std=beta,
                                  intercepts=icpt, columns=coding.names))
    K = int(ids.max()) + 1
    errors = np.empty((K, grid.size))
    for k in range(K):
        check(cancel)
        tr, te = ids != k, ids == k
        if not design.weights[tr].sum() > 0:
            raise ModelError(f"fold {k + 1}: the rows outside it have total weight 0; use fewer folds")
        c_k, i_k, _, _ = path_on_rows(None, None, None, grid, rho, cancel=cancel, rows=fold_rows.get(k))
        errors[k] = heldout_log_loss(X[te], y[te], w[te], c_k, i_k)
    cvres = replace(cvmod.summarize(grid, errors, grouped), measure="log_loss")
    if settings.alpha is not None:
        alpha, rule = float(settings.alpha), "fixed"
    else:
        rule = settings.alpha_rule
        alpha = cvres.alpha_min if rule == "cv_min" else cvres.alpha_1se
    hit = np.flatnonzero(grid == alpha)
    if hit.size:
        i = int(hit[0])
        model = coding.label(LinearModel(name=name, columns=coding.names, intercept=float(icpt[i]),
                                         coef=coef[i].copy(), coef_std=beta[i].copy(), alpha=float(alpha),
                                         l1_ratio=float(rho), outcome="binary"))
    else:
        model = model_at_alpha(design, name, rho, alpha)
    return PenalizedFit(name=name, l1_ratio=float(rho), path=path, cv=cvres, alpha=float(alpha), alpha_rule=rule,
                        model=model)


def model_at_alpha(design, name, rho, alpha, rows_mask=None, init=None) -> LinearModel:
    """The exact penalized logistic fit at one α (on ``rows_mask`` of the design when given), on every level."""
    coding = LevelCoding.of(design)
    X, y, w = coding.expand(design.X), design.y, design.weights
    if rows_mask is not None:
        X, y, w = X[rows_mask], y[rows_mask], w[rows_mask]
    rows = _Rows(X, y, w)
    # Warm start from a path down to α: a direct Newton start far from the solution can
    # need many line-search halvings; a short path keeps every step inside the good region.
    top = float(logistic_grid(rows, rho, 2, 0.5)[0])
    alphas = np.geomspace(max(top, alpha), alpha, 8) if top > alpha else np.array([alpha])
    beta = np.zeros(rows.idx.size)
    b0 = _logit(rows.ybar)
    for a in alphas[:-1]:
        beta, b0, _, _ = _newton(rows, float(a), rho, beta, b0, PATH_TOL)
    beta, b0, _, _ = _newton(rows, float(alpha), rho, beta, b0, TOL)
    coef, icpt, beta_full = rows.to_original(beta, b0)
    return coding.label(LinearModel(name=name, columns=coding.names, intercept=icpt, coef=coef, coef_std=beta_full,
                                    alpha=float(alpha), l1_ratio=float(rho), outcome="binary"))


def kkt_violation(X, y, w, model: LinearModel) -> float:
    """Largest breach of the optimality conditions of the standardized objective at ``model``.

    With ``g = x̃ᵀ(w(y − p))/W − α(1−ρ)β``: ``|g_j| ≤ αρ`` where β_j = 0, ``g_j = αρ·sign(β_j)``
    where β_j ≠ 0, and ``Σ w(y − p) = 0`` for the free intercept.
    """
    X = model.expand(X)  # a fit on every level of a category reads its reference levels off the design
    rows = _Rows(X, y, w)
    p = model.predict(X)
    r = rows.wn * (y - p)
    beta = np.asarray(model.coef_std)[rows.idx]
    g = rows.Xs.T @ r - float(model.alpha) * (1.0 - float(model.l1_ratio)) * beta
    bound = float(model.alpha) * float(model.l1_ratio)
    zero = beta == 0
    v = max(np.max(np.abs(g[zero]) - bound, initial=0.0),
            np.max(np.abs(g[~zero] - bound * np.sign(beta[~zero])), initial=0.0),
            abs(float(r.sum())))
    return float(v)


def fit_all_binary(design, settings: FitSettings, progress=None, cancel=None) -> FitResults:
    """Logistic regression and its ridge, lasso and elastic-net families on a yes/no design."""
    from regbench.models.ols import one_blas_thread

    # Many short BLAS calls: on shared cores one thread each is faster (see models.ols).
    with one_blas_thread():
        return _fit_all_binary(design, settings, progress, cancel)


def _fit_all_binary(design, settings: FitSettings, progress=None, cancel=None) -> FitResults:
    from regbench.models.diagnostics import diagnose
    from regbench.models.engine import families
    from regbench.models.gram import gram_stats
    from regbench.models.ols import fit_ols

    # Relaxed refits and penalty factors are least-squares options; the yes/no families are the plain ones.
    fams = [f for f in families(settings) if not f[0].startswith("relaxed_")]
    total = 3 + len(fams)
    report(progress, 0, total, "setting folds")
    ids = cvmod.fold_ids(design.n, int(settings.folds), settings.seed, design.groups, design.weights,
                         design.groups_column)
    check(cancel)
    report(progress, 1, total, "finding exact dependencies and fitting logistic regression")
    ols = fit_ols(design, settings.pins, settings.rank_tol)
    logit = fit_logistic(design, ols)
    check(cancel)
    report(progress, 2, total, "measuring collinearity")
    diag = diagnose(design, ols)
    check(cancel)
    grouped = design.groups is not None
    penalized = {}
    fold_rows = FoldRows.of(design, ids)
    for s, (name, rho) in enumerate(fams):
        report(progress, 3 + s, total, f"{name.replace('_', ' ')} (logistic): path and cross-validation")
        penalized[name] = family_fit(design, settings, ids, name, rho, grouped, cancel, fold_rows)
        check(cancel)
    report(progress, total, total, "done")
    return FitResults(columns=tuple(design.columns), settings=settings, ols=ols, diagnostics=diag,
                      penalized=penalized, fold_ids=ids, n_obs=int(design.n),
                      gram=gram_stats(design.X, design.y, design.weights), outcome="binary", logistic=logit)


def refit_unpenalized(design, kept, rows_mask) -> LinearModel:
    """The unpenalized logistic model on the kept columns of some rows (held-out and stability refits)."""
    columns = tuple(design.columns)
    idx = np.array([columns.index(c) for c in kept], dtype=int)
    X, y, w = design.X[rows_mask][:, idx], design.y[rows_mask], design.weights[rows_mask]
    rows = _Rows(X, y, w)
    beta, b0, _, _ = _newton(rows, 0.0, 0.0, np.zeros(rows.idx.size), _logit(rows.ybar), TOL, max_outer=50)
    coef_k, icpt, _ = rows.to_original(beta, b0)
    coef = np.zeros(len(columns))
    coef[idx] = coef_k
    return LinearModel(name="logistic", columns=columns, intercept=icpt, coef=coef,
                       coef_std=coef * _Rows(design.X[rows_mask], y, w).sd, outcome="binary")


__all__ = ["fit_logistic", "fit_all_binary", "family_fit", "model_at_alpha", "kkt_violation", "find_separation",
           "heldout_log_loss", "path_on_rows", "logistic_grid", "refit_unpenalized", "MIN_GRID_RATIO",
           "CVResult"]

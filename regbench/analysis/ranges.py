"""Ranges over every near-best linear model: what the data settle and what they do not.

The set
-------
For least squares with a free intercept, the weighted training mean squared
error of a coefficient vector β (intercept at its best value for β) is exactly::

    MSE(β) = MSE* + (β − β̂)ᵀ G (β − β̂)

with β̂ the OLS fit, MSE* its weighted mean squared error per unit weight
(Σ wᵢeᵢ² / Σ wᵢ) and G the weighted, centred cross-product matrix of the design
per unit weight.  Every model within a relative tolerance τ of the best,
``MSE(β) ≤ (1 + τ)·MSE*``, therefore lies in the ellipsoid
``(β − β̂)ᵀ G (β − β̂) ≤ τ·MSE*`` (the "Rashomon set" of Semenova, Rudin & Parr
2022; Breiman 2001), and every range below is exact, from p×p work after the
one pass over the rows:

* coefficient j: ``β̂ⱼ ± sqrt(τ·MSE*·(G⁺)ⱼⱼ)`` when eⱼ lies in the range of G;
  unbounded when an exact dependency (a column OLS set aside) moves it;
* prediction at a row x: ``x̂ ± sqrt(τ·MSE*·(1 + (x − x̄)ᵀ G⁺ (x − x̄)))`` (viable
  prediction ranges, Watson-Daniels, Parkes & Ustun 2023).  The intercept is
  free to move within the set: with c its shift from the best intercept for β,
  ``MSE = MSE* + c² + (β − β̂)ᵀG(β − β̂)`` (the weighted residuals of the
  best intercept sum to 0), so a model may spend part of the budget on c, and
  the "1 +" is that share.  Every row of the table lies in the range of G, so
  its range is finite;
* importance of column j for a model (b₀, β): how much its error grows when
  column j is replaced by an independent copy of itself (model reliance; its
  range over the set is the "model class reliance" of Fisher, Rudin & Dominici
  2019, JMLR 20(177)).  Over every pair of rows (i, k) of the table, weighted,
  the model's error with xₖⱼ in place of xᵢⱼ exceeds its own error by
  ``2·Var(xⱼ)·βⱼ² + 2·βⱼ·Cov(e, xⱼ)``, and ``Cov(e, xⱼ) = −(Gδ)ⱼ``.  With
  ρⱼ = 1/(G⁻¹)ⱼⱼ the part of Var(xⱼ) the other columns do not explain and
  mⱼ = Var(xⱼ) − ρⱼ the part they do, the move δ reduces to two numbers, the
  coefficient u = βⱼ and a move t orthogonal to it in G's metric:
  ``growth = 2mⱼu² + 2ρⱼβ̂ⱼu − 2√mⱼ·u·t`` over ``ρⱼ(u − β̂ⱼ)² + t² ≤ τ·MSE*``.
  For each u the extreme t is at the boundary, so the smallest and largest
  growth are a one-dimensional search over the coefficient's own range,
  solved to round-off.  At OLS the growth is ``2·β̂ⱼ²·Var(xⱼ)``.  A column in
  an exact dependency has no upper bound, and its lower bound is −τ·MSE*/2 (a
  model can lean on it the wrong way: swapping it for noise then lowers the
  error).  For a yes/no outcome importance is the mean squared change of the
  log-odds under the same swap, ``2·βⱼ²·Var(xⱼ)``, its range from the
  coefficient's.

The rank decision is the one OLS made (same tolerance): the kept columns span
the model, and each set-aside column is the combination of kept columns OLS
reported.  So G = Tᵀ G_K T with T = [I | C] mapping a full β to the kept
columns' effective weights, and a linear function aᵀβ is bounded exactly when
a = Tᵀu, with half-width ``sqrt(τ·MSE*·uᵀG_K⁻¹u)``.  G_K is used through a
triangular factor (from OLS's own factor of the rows, or from the cross-products
of :class:`~regbench.models.gram.GramStats`), never inverted.

Tolerance
---------
Either the user's τ (``--range-tolerance 0.01``: within 1 % of the best training
error), or the held-out variant: models within one standard error of the lowest
cross-validated error, taken as the relative size of that standard error,
``τ = SE / CV error`` at the minimum of the family whose minimum is lowest.

Yes/no outcomes: the quadratic approximation
---------------------------------------------
For logistic regression the set ``{(b₀, β) : L ≤ (1 + τ)·L̂}`` of the weighted
mean log-loss L has no closed form.  Around the unpenalized fit (b̂₀, β̂),
``L ≈ L̂ + ½ θᵀHθ`` with θ the move from the fit and H the weighted Fisher
information per unit weight, ``Σ vᵢ zᵢzᵢᵀ`` with zᵢ = (1, xᵢ) and
``vᵢ = wᵢpᵢ(1 − pᵢ)/W``.  With the intercept's move c measured from its best
value for β, ``½θᵀHθ = a₀c² + δᵀAδ`` with ``a₀ = ½Σvᵢ`` and
``A = ½ Σ vᵢ (xᵢ − x̄ᵥ)(xᵢ − x̄ᵥ)ᵀ`` (x̄ᵥ the v-weighted mean), so the
approximate set is the same kind of ellipsoid with A in place of G, a₀ in place
of 1 and L̂ in place of MSE*, and every range above follows from the same
algebra.  Predictions are ranged on the log-odds scale and mapped to
probabilities (the map is monotone, so that step is exact).  The result says
it is an approximation (``approximation = 'quadratic'``); the tests measure
how close it is to the exact set.  When a column or combination separates the
outcome there is no finite fit to centre on, and no ranges
(:func:`ranges_unavailable` says why).  :func:`ranges_from_curvature` takes
any curvature matrix and centre.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Optional

import numpy as np

from regbench.formatting import join_words, number_text
from regbench.models.results import MODEL_NAMES, Result, model_label
from regbench.sentences import combination_text

#: ``tolerance_kind`` of a tolerance the user set, and of the held-out variant.
KIND_SET = "set"
KIND_HELDOUT = "heldout_1se"
TOLERANCE_KINDS = (KIND_SET, KIND_HELDOUT)
#: Used when the held-out variant is asked for but no cross-validation exists.
FALLBACK_TOLERANCE = 0.01
#: Rows listed as "where equally good models disagree most".
WIDEST_ROWS = 5
#: Columns named beside a listed row (its most unusual values).
ROW_COLUMNS = 3


@dataclass(frozen=True, eq=False)
class ModelPlace(Result):
    """Where one fitted model sits in the set.

    Attributes
    ----------
    name : str
    excess : float
        Its training error above the best, relative: MSE/MSE* − 1.
    inside : bool
        ``excess <= tolerance`` (up to round-off).
    position : ndarray (p,)
        Per column, (β − low)/(high − low): 0 at the low end, 1 at the high end,
        outside [0, 1] beyond the range; NaN where the range is unbounded.
    """

    name: str
    excess: float
    inside: bool
    position: np.ndarray


@dataclass(frozen=True, eq=False)
class Ranges(Result):
    """Ranges of coefficients, importances and predictions over every near-best model.

    Arrays of length p follow ``columns``; NaN marks an unbounded end.
    """

    columns: tuple
    target: str
    tolerance: float
    tolerance_kind: str
    tolerance_note: str
    approximation: str  # 'exact' (least squares) or 'quadratic' (the log-loss's curvature at the logistic fit)
    best_error: float
    centre: np.ndarray
    sd: np.ndarray
    bounded: np.ndarray
    low: np.ndarray
    high: np.ndarray
    low_std: np.ndarray
    high_std: np.ndarray
    sign_settled: np.ndarray
    importance_low: np.ndarray
    importance_high: np.ndarray
    trades: tuple  # of dict(columns=tuple, sentence=str)
    models: dict = field(default_factory=dict)  # name -> ModelPlace
    row_numbers: Optional[np.ndarray] = None  # (n,) 1-based table rows
    row_centre: Optional[np.ndarray] = None  # (n,) prediction of the centre model
    row_half: Optional[np.ndarray] = None  # (n,) half-width of the prediction range
    widest: tuple = ()  # of dict(row, centre, low, high, width, unusual)
    sentences: tuple = ()
    #: Rows the per-row ranges cover when they are a seeded sample of a table read in batches; 0: every row.
    rows_of: int = 0
    #: 'numeric' (errors are mean squared errors, predictions in the target's units) or 'binary'
    #: (errors are mean log-losses, predictions on the log-odds scale; see :meth:`probabilities`).
    outcome: str = "numeric"

    def probabilities(self):
        """(centre, low, high) of each row's predicted probability of "yes" (yes/no outcomes only).

        The map from log-odds to probability is monotone, so the ends map exactly.
        """
        if self.row_centre is None:
            return None
        return (_expit(self.row_centre), _expit(self.row_centre - self.row_half),
                _expit(self.row_centre + self.row_half))

    @property
    def budget(self) -> float:
        """τ·MSE*: how much error a model in the set may add."""
        return float(self.tolerance * self.best_error)

    def to_dict(self) -> dict:
        """Strict-JSON data: the ``ranges`` key of the fit JSON."""
        return ranges_to_json(self)


# -- the algebra ----------------------------------------------------------------------------

def _expit(eta):
    return 0.5 * (1.0 + np.tanh(0.5 * np.asarray(eta, float)))


class _Ellipsoid:
    """``a₀c² + δᵀ Tᵀ R_KᵀR_K T δ ≤ budget``, with T = [I | C] over kept / set-aside columns.

    c is the intercept's move from its best value for β (a₀ its curvature: 1 for
    the mean squared error).
    """

    def __init__(self, p, kept, aside, RK, links, budget, quad, intercept_curvature=1.0):
        self.p = p
        self.kept = np.asarray(kept, dtype=int)
        self.aside = np.asarray(aside, dtype=int)
        self.RK = np.asfortranarray(RK)  # k×k upper triangular, G_K = RKᵀ RK (as LAPACK reads it)
        self.links = links  # k×a: column a of set-aside = Σ links[:, a] · kept columns (+ const)
        self.budget = float(budget)
        self.quad = quad  # δ -> δᵀ G δ on the full columns (exact excess error)
        self.a0 = float(intercept_curvature)

    def half_widths(self, U: np.ndarray) -> np.ndarray:
        """``sqrt(budget · uᵀ G_K⁻¹ u)`` for each row u of U (k columns)."""
        if self.kept.size == 0:
            return np.zeros(U.shape[0])
        Z = _solve_upper_transposed(self.RK, np.asarray(U, float).T)
        return np.sqrt(self.budget * np.einsum("ij,ij->j", Z, Z))

    def row_half_widths(self, U: np.ndarray) -> np.ndarray:
        """Half-width of the prediction at rows whose centred kept columns are U: the intercept moves too.

        ``max c + uᵀδ`` over ``a₀c² + δᵀG_Kδ ≤ budget`` is ``sqrt(budget·(1/a₀ + uᵀG_K⁻¹u))``.
        """
        h = self.half_widths(U) if self.kept.size else np.zeros(U.shape[0])
        return np.sqrt(h * h + self.budget / self.a0)

    def column_bounded(self) -> np.ndarray:
        """A column's coefficient is bounded when no exact dependency moves it."""
        free = np.zeros(self.p, dtype=bool)
        free[self.aside] = True
        if self.aside.size and self.kept.size:
            moved = np.any(np.abs(self.links) > 0, axis=1)
            free[self.kept[moved]] = True
        return ~free


def _ordered_kept(F: np.ndarray, tol: float) -> list:
    """Columns of F kept in order when each adds more than ``tol`` of its own length (OLS's walk)."""
    basis, kept = [], []
    for j in range(F.shape[1]):
        v = F[:, j]
        size = float(np.linalg.norm(v))
        if size == 0:
            continue
        r = v.copy()
        if basis:
            B = np.column_stack(basis)
            r = r - B @ (B.T @ r)
            r = r - B @ (B.T @ r)
        nr = float(np.linalg.norm(r))
        if nr > tol * size:
            basis.append(r / nr)
            kept.append(j)
    return kept


#: Multiply-adds per triangular solve: SciPy's wrapper holds the interpreter lock for its whole
#: call, and one solve of a 1,000-column factor against 20,000 rows kept the window's thread
#: waiting 224 ms; blocks of about 5e7 keep each hold near 10 ms (measured, 2 shared cores).
SOLVE_BLOCK = 50_000_000


def _solve_upper_transposed(R: np.ndarray, B: np.ndarray) -> np.ndarray:
    """``R⁻ᵀ B`` for an upper-triangular R, solved a block of B's columns at a time."""
    from scipy import linalg

    k = R.shape[0]
    if k == 0 or B.shape[1] == 0:
        return np.zeros((k, B.shape[1]))
    Rf = np.asfortranarray(R)  # once, so the wrapper does not copy R for every block
    step = max(16, SOLVE_BLOCK // (k * k))
    if B.shape[1] <= step:
        return linalg.solve_triangular(Rf, B, trans="T", check_finite=False)
    out = np.empty((k, B.shape[1]))
    for s in range(0, B.shape[1], step):
        out[:, s:s + step] = linalg.solve_triangular(Rf, B[:, s:s + step], trans="T", check_finite=False)
    return out


def _row_half_widths(ell, X, mean):
    """:meth:`_Ellipsoid.row_half_widths` of every row of ``X`` about ``mean``, a block of rows at a time
    (the centred kept columns of 100,000 rows, then their solve, were two copies of the design)."""
    k = ell.kept.size
    n = X.shape[0]
    if k == 0:
        return ell.row_half_widths(np.zeros((n, 0)))
    step = max(16, SOLVE_BLOCK // (k * k))
    out = np.empty(n)
    mk = mean[ell.kept]
    for s in range(0, n, step):
        out[s:s + step] = ell.row_half_widths(X[s:s + step, ell.kept] - mk)
    return out


def _triangular(M: np.ndarray) -> np.ndarray:
    from scipy import linalg

    if M.shape[1] == 0:
        return np.zeros((0, 0))
    R = linalg.qr(M, mode="r", check_finite=False)[0][: M.shape[1]]
    return np.triu(R)


def _factor_of_psd(A: np.ndarray) -> np.ndarray:
    """A square F with FᵀF = A for a symmetric positive semi-definite A (eigenvalues clipped at 0)."""
    lam, V = np.linalg.eigh(0.5 * (A + A.T))
    lam = np.clip(lam, 0.0, None)
    return (V * np.sqrt(lam)).T


def _rank_decision(fit):
    """Kept and set-aside column indices and the links (k×a) of an OLS or logistic result's set-aside columns."""
    columns = tuple(fit.columns)
    p = len(columns)
    idx = {c: j for j, c in enumerate(columns)}
    kept = [idx[c] for c in fit.kept]
    aside = [j for j in range(p) if columns[j] not in set(fit.kept)]
    links = np.zeros((len(kept), len(aside)))
    pos = {j: i for i, j in enumerate(kept)}
    for sa in fit.set_aside:
        if sa.column not in idx:
            continue
        a = aside.index(idx[sa.column])
        for c, v in sa.combination.items():
            if c in idx and idx[c] in pos:
                links[pos[idx[c]], a] = float(v)
    return columns, p, kept, aside, links


def _ellipsoid_from_ols(ols, stats, budget_fn):
    """The ellipsoid of least squares, from OLS's factor (or the cross-products) and its rank decision.

    ``stats`` is a GramStats, None, or a function returning one, called only when OLS carries no
    factor (a project opened from its file gathers its cross-products only when first needed).
    """
    columns, p, kept, aside, links = _rank_decision(ols)
    R = getattr(ols, "r_factor", None)
    if R is None or np.asarray(R).shape != (p + 2, p + 2):
        stats = stats() if callable(stats) else stats
    if R is not None and np.asarray(R).shape == (p + 2, p + 2):
        Rc = np.asarray(R, dtype=float)[1:, 1:]  # factor of sqrt(w/W)·[x − m, y − ȳ]
        S = _triangular(np.column_stack([Rc[:, kept], Rc[:, p]]))
        Rx = Rc[:, :p]

        def quad(d):
            v = Rx @ d
            return float(v @ v)
        sd = np.sqrt(np.einsum("ij,ij->j", Rx, Rx))
    elif stats is not None:
        W = float(stats.W)
        G = stats.centered_xx() / W
        c = stats.centered_xy() / W
        yy = stats.centered_yy() / W
        M = np.zeros((len(kept) + 1, len(kept) + 1))
        M[:-1, :-1] = G[np.ix_(kept, kept)]
        M[:-1, -1] = M[-1, :-1] = c[kept]
        M[-1, -1] = yy
        # Scale to unit diagonal so the factor's accuracy does not depend on units.
        d = np.sqrt(np.clip(np.diag(M), 0, None))
        d = np.where(d > 0, d, 1.0)
        S = _triangular(_factor_of_psd(M / np.outer(d, d))) * d

        def quad(dv):
            return float(max(dv @ G @ dv, 0.0))
        sd = np.sqrt(np.clip(np.diag(G), 0, None))
    else:
        raise ValueError("ranges need OLS's factor of the rows or the design's cross-products")
    k = len(kept)
    RK = S[:k, :k]
    best = float(S[k, k] ** 2)
    return _Ellipsoid(p, kept, aside, RK, links, budget_fn(best), quad), best, sd


# -- public entry points ----------------------------------------------------------------------

def _is_binary(results) -> bool:
    return getattr(results, "outcome", "numeric") == "binary"


def _error_word(binary: bool) -> str:
    return "log-loss" if binary else "error"


def heldout_tolerance(results) -> tuple:
    """The held-out tolerance: one standard error of the lowest CV error, relative to that error.

    For a yes/no outcome the cross-validated error is the mean log-loss.

    Returns
    -------
    (tau, note) : (float, str)
        ``tau`` is None when no family has a cross-validation curve.
    """
    best = None
    for name, pf in getattr(results, "penalized", {}).items():
        cv = pf.cv
        if cv is None or cv.mean.size == 0:
            continue
        i = int(np.nanargmin(cv.mean))
        m, se = float(cv.mean[i]), float(cv.se[i])
        if not (np.isfinite(m) and m > 0 and np.isfinite(se)):
            continue
        if best is None or m < best[1]:
            best = (name, m, se, float(cv.alphas[i]))
    if best is None:
        return None, ""
    name, m, se, a = best
    tau = se / m
    word = _error_word(_is_binary(results))
    note = (f"one standard error of the lowest cross-validated {word} ({model_label(name).lower()} at "
            f"α {number_text(a, 3, unicode_minus=True)}: SE {number_text(se, 3)} on {number_text(m, 4)}), "
            f"as a share of that {word}: {_percent(tau)}")
    return tau, note


def resolve_tolerance(tolerance: Optional[float], results=None) -> tuple:
    """(τ, kind, note) in force: the user's τ, else the held-out variant, else 1 %."""
    word = _error_word(_is_binary(results))
    if tolerance is not None:
        tau = float(tolerance)
        if not (np.isfinite(tau) and tau > 0):
            raise ValueError(f"range tolerance {tolerance!r} must be a positive number, e.g. 0.01 for 1 %")
        return tau, KIND_SET, f"set by the user: within {_percent(tau)} of the best training {word}"
    tau, note = heldout_tolerance(results) if results is not None else (None, "")
    if tau is not None and tau > 0:
        return tau, KIND_HELDOUT, note
    return (FALLBACK_TOLERANCE, KIND_SET,
            f"no cross-validation curve to take one standard error from; {_percent(FALLBACK_TOLERANCE)} used")


def ranges_unavailable(results) -> Optional[str]:
    """Why a fit has no ranges over near-best models (one sentence), or None when it has them.

    Only a yes/no outcome whose classes a column or combination separates lacks
    them: its log-loss has no minimum, so there is no best model to measure from.
    """
    if not _is_binary(results):
        return None
    lr = getattr(results, "logistic", None)
    if lr is None:
        return "Ranges over near-best models need the unpenalized logistic fit, which this result does not hold."
    if lr.separation is not None or lr.model is None or not np.isfinite(lr.intercept):
        return ("No ranges over near-best models: the outcome is separated (see why above), so the log-loss has "
                "no minimum and no best model to measure \u201cnear\u201d from; every model can still improve it by "
                "growing its coefficients.")
    return None


def compute_ranges(design, results, tolerance: Optional[float] = None, models: Optional[dict] = None) -> Ranges:
    """Ranges over every linear model whose training error is within a tolerance of the best.

    Parameters
    ----------
    design : Design
        Supplies the rows for the per-row prediction ranges and the target's name.
    results : FitResults
        OLS (its rank decision and factor), the cross-products and the CV curves;
        for a yes/no outcome the unpenalized logistic fit (ranges through the
        quadratic approximation of the mean log-loss, labelled so).
    tolerance : float, optional
        τ: models with ``MSE ≤ (1 + τ)·MSE*`` (0.01 = within 1 %; for a yes/no
        outcome the mean log-loss).  None: the held-out variant (one standard
        error of the lowest CV error, relative).
    models : dict of name -> LinearModel, optional
        Models to place in the set (default: ``results.models()``).

    Returns
    -------
    Ranges

    Raises
    ------
    ValueError
        When the fit has no ranges (:func:`ranges_unavailable` says why) or lacks
        the statistics they need.
    """
    tau, kind, note = resolve_tolerance(tolerance, results)
    models = models if models is not None else results.models()
    if _is_binary(results):
        return _binary_ranges(design, results, tau, kind, note, models)
    ell, best, sd = _ellipsoid_from_ols(results.ols, lambda: _stats_of(results), lambda b: tau * b)
    centre = np.where(np.isfinite(results.ols.coef), results.ols.coef, 0.0).astype(float)
    mean = _means(design, results)
    best_safe = best if best > 0 else 0.0

    def excess(m):
        coef = np.where(np.isfinite(m.coef), m.coef, 0.0)
        if best_safe > 0:
            return ell.quad(coef - centre) / best_safe
        return 0.0 if np.allclose(coef, centre) else np.inf

    out = _assemble(ell, tuple(results.columns), design.target, centre, best, sd, tau, kind, note, "exact",
                    results.ols.set_aside, models, excess, design.X, mean, design.row_numbers,
                    float(results.ols.intercept))
    fitted = int(getattr(results.ols, "n_obs", 0) or 0)
    in_design = int(np.count_nonzero(np.asarray(design.weights) > 0))
    if fitted > in_design:  # a streamed table: the design holds a seeded sample of the rows
        out = replace(out, rows_of=fitted)
        out = replace(out, sentences=tuple(ranges_sentences(out)))
    return out


def _binary_ranges(design, results, tau, kind, note, models) -> Ranges:
    """The quadratic approximation of the near-best set of logistic models (module docstring)."""
    from regbench.models.logistic import log_loss_terms

    why = ranges_unavailable(results)
    if why is not None:
        raise ValueError(why)
    lr = results.logistic
    columns, p, kept, aside, links = _rank_decision(lr)
    on = np.asarray(design.weights) > 0
    if int(getattr(lr, "n_obs", 0) or 0) > int(on.sum()):
        # The curvature needs every fitted row; a design holding a row sample would give another set.
        raise ValueError("Ranges over near-best logistic models need every fitted row; this design holds a sample.")
    X, y, w = np.asarray(design.X, float)[on], np.asarray(design.y, float)[on], np.asarray(design.weights, float)[on]
    W = float(w.sum())
    centre = np.where(np.isfinite(lr.coef), lr.coef, 0.0).astype(float)
    eta = lr.intercept + X @ centre
    best = float(w @ log_loss_terms(eta, y)) / W
    pr = _expit(eta)
    v = w * pr * (1.0 - pr) / W
    a0 = 0.5 * float(v.sum())
    if not (best > 0 and a0 > 0):
        raise ValueError("No ranges over near-best models: the logistic fit predicts every row with certainty.")
    xv = (v @ X) / (2.0 * a0)
    # Half the Fisher information in the slopes, intercept profiled out, as a triangular factor of the rows.
    Uv = np.sqrt(0.5 * v)[:, None] * (X[:, kept] - xv[kept])
    RK = _triangular(Uv)
    Ux = np.sqrt(0.5 * v)[:, None] * (X - xv)

    def quad(d):
        z = Ux @ d
        return float(z @ z)

    ell = _Ellipsoid(p, kept, aside, RK, links, tau * best, quad, intercept_curvature=a0)
    wn = w / W
    mx = wn @ X
    sd = np.sqrt(np.clip(wn @ ((X - mx) ** 2), 0.0, None))

    def excess(m):
        coef = np.where(np.isfinite(m.coef), m.coef, 0.0)
        # Each fit's own log-loss on the rows: exact, not through the approximation.
        return float(wn @ log_loss_terms(m.intercept + X @ coef, y)) / best - 1.0

    return _assemble(ell, columns, design.target, centre, best, sd, tau, kind, note, "quadratic", lr.set_aside,
                     models, excess, design.X, xv, design.row_numbers, float(lr.intercept), outcome="binary")


def _stats_of(results):
    """The fit's cross-products of the whole design, gathered now if a project opened without them."""
    whole = getattr(results, "whole_stats", None)
    return whole() if whole is not None else getattr(results, "gram", None)


def _means(design, results) -> np.ndarray:
    """Weighted column means, from OLS's factor or the cross-products when at hand."""
    p = len(results.columns)
    R = getattr(results.ols, "r_factor", None)
    if R is not None and np.asarray(R).shape == (p + 2, p + 2):
        return np.asarray(R, float)[0, 1:p + 1].copy()
    stats = _stats_of(results)
    if stats is not None:
        return stats.mean_x()
    w = np.asarray(design.weights, float)
    return np.asarray(design.X, float).T @ w / w.sum()


def ranges_from_curvature(columns, curvature, centre, best_error, tolerance, *, sd=None, rank_tol=1e-8,
                          tolerance_kind=KIND_SET, tolerance_note="", target="", models=None,
                          X=None, mean=None, row_numbers=None, intercept=0.0, intercept_curvature=1.0,
                          outcome="numeric") -> Ranges:
    """Ranges over ``{β : best_error + (β − centre)ᵀ A (β − centre) ≤ (1 + τ)·best_error}``.

    For least squares A is the centred cross-product matrix per unit weight and
    the set is exact; for another error (the mean log-loss of a yes/no outcome)
    pass its curvature at the fit — half its Hessian in the slopes, with the
    intercept profiled out (the Schur complement) — and the result is the
    quadratic approximation, labelled ``approximation='quadratic'``.

    Parameters
    ----------
    columns : sequence of str
    curvature : ndarray (p, p)
        Symmetric positive semi-definite A.
    centre : ndarray (p,)
        The best model's coefficients.
    best_error : float
    tolerance : float
        τ > 0.
    sd : ndarray (p,), optional
        Weighted SD of each column (standardized units, importance); default sqrt(diag A).
    rank_tol : float
        A column whose part not explained by the columns before it (in A's metric)
        is at most ``rank_tol`` of its length moves without changing the error.
    X, mean, row_numbers, intercept : optional
        Rows (original units) for prediction ranges on the linear-predictor scale;
        ``mean`` is the point the curvature is centred on.
    intercept_curvature : float
        a₀, the error's curvature in the intercept's move c (the set is
        ``a₀c² + δᵀAδ ≤ τ·best``): 1 for the mean squared error.
    outcome : str
        'binary' when the linear predictor is a log-odds.
    """
    columns = tuple(columns)
    A = np.asarray(curvature, dtype=float)
    p = len(columns)
    F = _factor_of_psd(A)
    kept = _ordered_kept(F, rank_tol)
    aside = [j for j in range(p) if j not in set(kept)]
    RK = _triangular(F[:, kept])
    links = np.zeros((len(kept), len(aside)))
    if kept and aside:
        links = np.linalg.lstsq(F[:, kept], F[:, aside], rcond=None)[0]
        links[np.abs(links) <= 1e-12 * max(np.abs(links).max(), 1e-300)] = 0.0
    tau = float(tolerance)
    best = float(best_error)
    ell = _Ellipsoid(p, kept, aside, RK, links, tau * best, lambda d: float(max(d @ A @ d, 0.0)),
                     intercept_curvature=intercept_curvature)
    sd = np.sqrt(np.clip(np.diag(A), 0, None)) if sd is None else np.asarray(sd, float)
    centre = np.asarray(centre, float)

    def excess(m):
        coef = np.where(np.isfinite(m.coef), m.coef, 0.0)
        return ell.quad(coef - centre) / best if best > 0 else (0.0 if np.allclose(coef, centre) else np.inf)

    return _assemble(ell, columns, target, centre, best, sd, tau, tolerance_kind, tolerance_note, "quadratic", (),
                     models or {}, excess, X, mean, row_numbers, float(intercept), outcome=outcome)


def _assemble(ell, columns, target, centre, best, sd, tau, kind, note, approximation, set_aside, models, excess_fn,
              X, mean, row_numbers, intercept, outcome="numeric") -> Ranges:
    p = len(columns)
    bounded = ell.column_bounded()
    half = np.full(p, np.nan)
    if ell.kept.size:
        h = ell.half_widths(np.eye(ell.kept.size))
        half[ell.kept] = h
    half[~bounded] = np.nan
    low = np.where(bounded, centre - half, np.nan)
    high = np.where(bounded, centre + half, np.nan)
    low_std, high_std = low * sd, high * sd
    settled = bounded & ((low > 0) | (high < 0))
    if approximation == "exact":
        imp_low, imp_high = _reliance_ranges(ell, centre, sd, bounded)
    else:
        imp_low, imp_high = _log_odds_importance(low, high, sd, bounded)
    places = {}
    for name, m in models.items():
        m = m.on_design(sd)  # a fit on every level of a category, as the same predictor on the design's columns
        coef = np.where(np.isfinite(m.coef), m.coef, 0.0)
        excess = excess_fn(m)
        with np.errstate(divide="ignore", invalid="ignore"):
            pos = np.where(bounded & (high > low), (coef - low) / (high - low), np.where(bounded, 0.5, np.nan))
        places[name] = ModelPlace(name=name, excess=float(excess), inside=bool(excess <= tau * (1 + 1e-9) + 1e-12),
                                  position=pos)
    row_c = row_h = rn = None
    widest = ()
    if X is not None and mean is not None:
        X = np.asarray(X, float)
        row_h = _row_half_widths(ell, X, np.asarray(mean, float))
        row_c = intercept + X @ centre
        rn = np.asarray(row_numbers if row_numbers is not None else np.arange(1, X.shape[0] + 1), dtype=np.int64)
        widest = _widest(X, mean, sd, columns, rn, row_c, row_h, outcome == "binary")
    trades = _trades(columns, ell, set_aside)
    r = Ranges(columns=columns, target=target, tolerance=tau, tolerance_kind=kind, tolerance_note=note,
               approximation=approximation, best_error=best, centre=centre, sd=sd, bounded=bounded, low=low,
               high=high, low_std=low_std, high_std=high_std, sign_settled=settled, importance_low=imp_low,
               importance_high=imp_high, trades=trades, models=places, row_numbers=rn, row_centre=row_c,
               row_half=row_h, widest=widest, outcome=outcome)
    return replace(r, sentences=tuple(ranges_sentences(r)))


def _log_odds_importance(low, high, sd, bounded):
    """Range of 2·βⱼ²·Var(xⱼ), the mean squared change of the linear predictor when column j is swapped."""
    var = sd * sd
    crosses = bounded & (low <= 0) & (high >= 0)
    imp_low = np.where(crosses, 0.0, 2.0 * var * np.minimum(low * low, high * high))
    imp_high = 2.0 * var * np.maximum(low * low, high * high)
    imp_low = np.where(bounded, imp_low, 0.0)  # an unbounded coefficient can be 0 ... or not at all
    imp_high = np.where(bounded | (var == 0), np.where(bounded, imp_high, 0.0), np.nan)
    return imp_low, imp_high


#: Points per round of the one-dimensional search for the smallest and largest reliance; each round
#: zooms into the two grid steps around the best point, so three rounds resolve u to ~(2/400)³ of its range.
RELIANCE_GRID = 401
RELIANCE_ROUNDS = 3


def _reliance_ranges(ell, centre, sd, bounded):
    """Smallest and largest error growth under swapping column j, over the least-squares set (module docstring)."""
    p = centre.size
    var = sd * sd
    b = max(ell.budget, 0.0)
    low, high = np.full(p, np.nan), np.full(p, np.nan)
    free = ~np.asarray(bounded, bool)
    # β_j moves freely along a dependency while (Gδ)_j reaches ±sqrt(budget·Var): min of 2v·u² − 2u·m is −budget/2.
    low[free] = np.where(var[free] > 0, -0.5 * b, 0.0)
    high[free] = np.where(var[free] > 0, np.nan, 0.0)
    cols = np.flatnonzero(~free)
    if cols.size == 0:
        return low, high
    pos = {int(j): i for i, j in enumerate(ell.kept)}
    # (G_K⁻¹)_qq for every kept column: the squared column norms of R_K⁻ᵀ, one triangular solve.
    Zi = _solve_upper_transposed(ell.RK, np.eye(ell.kept.size))
    inv_diag = np.einsum("ij,ij->j", Zi, Zi)
    rho = 1.0 / inv_diag[[pos[int(j)] for j in cols]]  # the variance of x_j the other kept columns leave
    m = np.clip(var[cols] - rho, 0.0, None)  # ... and the part they explain
    bj = centre[cols].astype(float)
    r = np.sqrt(b / rho)  # the coefficient's own half-range

    def growth(u, sign):
        t = np.sqrt(np.clip(b - rho[:, None] * (u - bj[:, None]) ** 2, 0.0, None))
        return (2 * m[:, None] * u * u + 2 * (rho * bj)[:, None] * u
                + sign * 2 * np.sqrt(m)[:, None] * np.abs(u) * t)

    grid = np.linspace(0.0, 1.0, RELIANCE_GRID)
    rows = np.arange(cols.size)
    for sign, out in ((-1.0, low), (1.0, high)):
        lo_u, hi_u = bj - r, bj + r
        best = np.full(cols.size, np.inf if sign < 0 else -np.inf)
        for _ in range(RELIANCE_ROUNDS):
            U = lo_u[:, None] + (hi_u - lo_u)[:, None] * grid[None, :]
            vals = growth(U, sign)
            i = np.argmin(vals, axis=1) if sign < 0 else np.argmax(vals, axis=1)
            found = vals[rows, i]
            best = np.minimum(best, found) if sign < 0 else np.maximum(best, found)
            lo_u, hi_u = U[rows, np.maximum(i - 1, 0)], U[rows, np.minimum(i + 1, grid.size - 1)]
        out[cols] = best
    return low, high


def _widest(X, mean, sd, columns, rn, centre, half, binary=False) -> tuple:
    """The rows whose range is widest (for a yes/no outcome: widest in probability), with their unusual values."""
    if half.size == 0:
        return ()
    p_lo, p_hi = _expit(centre - half), _expit(centre + half)
    order = np.argsort(-(p_hi - p_lo if binary else half), kind="stable")[:WIDEST_ROWS]
    out = []
    for i in order:
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(sd > 0, (X[i] - mean) / np.where(sd > 0, sd, 1.0), 0.0)
        top = [j for j in np.argsort(-np.abs(z), kind="stable")[:ROW_COLUMNS] if abs(z[j]) >= 1.0]
        out.append({
            "row": int(rn[i]), "centre": float(centre[i]), "low": float(centre[i] - half[i]),
            "high": float(centre[i] + half[i]), "width": float(2 * half[i]),
            "unusual": tuple((columns[j], float(X[i, j]), float(z[j])) for j in top),
        })
        if binary:
            out[-1].update(p_centre=float(_expit(centre[i])), p_low=float(p_lo[i]), p_high=float(p_hi[i]),
                           p_width=float(p_hi[i] - p_lo[i]))
    return tuple(out)


def _trades(columns, ell, set_aside) -> tuple:
    """One entry per set-aside column: the columns that trade weight with it, and why."""
    by_col = {sa.column: sa for sa in set_aside}
    out = []
    for i, a in enumerate(ell.aside):
        name = columns[a]
        partners = tuple(columns[ell.kept[r]] for r in np.flatnonzero(np.abs(ell.links[:, i]) > 0))
        sa = by_col.get(name)
        if not partners:
            sentence = (f"{name} is constant on the rows, so its weight trades with the intercept without limit: "
                        "the data cannot say how much belongs to it.")
        else:
            why = f" ({name} equals {combination_text(sa)})" if sa is not None and sa.combination else ""
            sentence = (f"{name} and {', '.join(partners)} can trade weight without limit: the data cannot say "
                        f"how much belongs to each{why}.")
        out.append({"columns": (name,) + partners, "sentence": sentence})
    return tuple(out)


# -- words ------------------------------------------------------------------------------------

def _percent(tau: float) -> str:
    return number_text(100.0 * float(tau), 2) + " %"


def _num(v, digits=2) -> str:
    return number_text(v, digits, unicode_minus=True)


#: How every view names the approximation for a yes/no outcome.
QUADRATIC_WORDS = "quadratic approximation of the log-loss around the logistic fit"


def _error_of(r: Ranges) -> str:
    return _error_word(r.outcome == "binary")


def tolerance_phrase(r: Ranges) -> str:
    """'within 1 % of the best training error' or the held-out wording (log-loss for a yes/no outcome)."""
    word = _error_of(r)
    if r.tolerance_kind == KIND_HELDOUT:
        return (f"within one standard error of the best held-out {word} ({_percent(r.tolerance)} above the "
                f"best training {word})")
    return f"within {_percent(r.tolerance)} of the best training {word}"


def approximation_note(r: Ranges) -> str:
    """One sentence on how exact the set is: exact for least squares, the quadratic approximation otherwise."""
    if r.approximation == "quadratic":
        return (f"These ranges come from the {QUADRATIC_WORDS}: the near-best set of logistic models is "
                "approximated by the ellipsoid the log-loss's curvature draws around the best fit, so each "
                "range is close to, not exactly, the extremes over those models. Coefficients and predictions "
                "are on the log-odds scale; a row's range of probabilities maps its log-odds range exactly.")
    return ("For least squares this set is exact (an ellipsoid around OLS), so the ranges are not estimates but "
            "the extremes over all those models.")


def ranges_sentences(r: Ranges) -> list:
    """One or two sentences a stakeholder can take away, then notes on unbounded columns and the fits."""
    out = []
    binary = r.outcome == "binary"
    phrase = tolerance_phrase(r)
    approx = f", by the {QUADRATIC_WORDS}," if r.approximation == "quadratic" else ""
    cols = list(r.columns)
    open_sign = [j for j in range(len(cols)) if r.bounded[j] and not r.sign_settled[j]]
    first = f"Any model {phrase}{approx}"
    what = "a log-odds coefficient" if binary else "a coefficient"
    if open_sign:
        # The column whose range reaches furthest on both sides of zero (standardized) says it best.
        j = max(open_sign, key=lambda k: min(-r.low_std[k], r.high_std[k]))
        s = (f"{first} can give {cols[j]} {what} from {_num(r.low[j])} to {_num(r.high[j])}: "
             "the data do not settle its sign.")
        others = [cols[k] for k in open_sign if k != j]
        if others:
            more = others[:4] + ([f"{len(others) - 4} more"] if len(others) > 4 else [])
            s = s[:-1] + f"; nor those of {join_words(more)}."
        out.append(s)
    else:
        n_set = int(r.sign_settled.sum())
        if n_set:
            out.append(f"{first} gives each of the {n_set} bounded columns the same sign: the data settle them.")
    if r.row_half is not None and r.row_half.size:
        if binary:
            _, lo, hi = r.probabilities()
            i = int(np.argmax(hi - lo))
            width, whose = hi[i] - lo[i], f"predicted probabilities of {r.target or 'yes'}"
        else:
            i = int(np.argmax(r.row_half))
            width, whose = 2 * r.row_half[i], f"predictions of {r.target or 'the target'}"
        where = (f"on any of {r.row_half.size:,} rows sampled from {r.rows_of:,}" if r.rows_of
                 else "on any row")
        # Probabilities get a third digit: a width of 0.998 must not read as 1.
        out.append(f"Their {whose} differ by at most {_num(width, 3 if binary else 2)} {where} "
                   f"(most on row {int(r.row_numbers[i])}).")
    unb = [cols[j] for j in range(len(cols)) if not r.bounded[j]]
    if unb:
        who = "the logistic fit (as OLS)" if binary else "OLS"
        out.append(f"The coefficients of {join_words(unb)} are not bounded at all: the dependencies {who} set "
                   "aside let them take any value without changing the predictions on these rows.")
    inside = [n for n, m in r.models.items() if m.inside and n not in ("ols", "logistic")]
    outside = [n for n, m in r.models.items() if not m.inside]
    if outside:
        words = ", ".join(f"{model_label(n).lower()} ({_percent(r.models[n].excess)} above)" for n in outside)
        out.append(f"Outside the set: {words}." + (f" Inside: {join_words([model_label(n).lower() for n in inside])}."
                                                    if inside else ""))
    elif inside:
        out.append(f"{join_words([model_label(n) for n in inside])} at their chosen α all lie inside the set.")
    return out


def ranges_to_json(r: Ranges) -> dict:
    """The ``ranges`` key of the fit JSON (strict JSON: unbounded ends are null)."""
    def num(v):
        v = float(v)
        return v if np.isfinite(v) else None

    binary = r.outcome == "binary"
    relative = r.best_error > 0 and not binary  # importance is a share of the error for least squares only
    coefficients = {}
    importance = {}
    for j, c in enumerate(r.columns):
        coefficients[c] = {"low": num(r.low[j]), "high": num(r.high[j]), "low_std": num(r.low_std[j]),
                           "high_std": num(r.high_std[j]), "sign_settled": bool(r.sign_settled[j]),
                           "bounded": bool(r.bounded[j])}
        importance[c] = {"low": num(r.importance_low[j]), "high": num(r.importance_high[j]),
                         "low_relative": num(r.importance_low[j] / r.best_error) if relative else None,
                         "high_relative": (num(r.importance_high[j] / r.best_error)
                                           if relative and np.isfinite(r.importance_high[j]) else None)}
    models = {n: {"excess_error": num(m.excess), "inside": bool(m.inside),
                  "position": {c: num(m.position[j]) for j, c in enumerate(r.columns)}}
              for n, m in r.models.items()}
    rows = None
    if r.row_half is not None:
        w = 2 * r.row_half
        rows = {"scale": "log_odds" if binary else "target",
                "sampled_from": r.rows_of or None,
                "largest_width": num(w.max()) if w.size else None,
                "median_width": num(np.median(w)) if w.size else None,
                "widest": []}
        for d in r.widest:
            entry = {"row": d["row"], "prediction": num(d["centre"]), "low": num(d["low"]),
                     "high": num(d["high"]), "width": num(d["width"]),
                     "unusual": [{"column": c, "value": num(v), "sd_from_mean": num(z)} for c, v, z in d["unusual"]]}
            if binary:
                entry["probability"] = {"prediction": num(d["p_centre"]), "low": num(d["p_low"]),
                                        "high": num(d["p_high"]), "width": num(d["p_width"])}
            rows["widest"].append(entry)
        if binary:
            _, lo, hi = r.probabilities()
            pw = hi - lo
            rows["largest_probability_width"] = num(pw.max()) if pw.size else None
            rows["median_probability_width"] = num(np.median(pw)) if pw.size else None
    return {
        "tolerance": num(r.tolerance),
        "tolerance_kind": r.tolerance_kind,
        "tolerance_note": r.tolerance_note,
        "approximation": r.approximation,
        "approximation_note": approximation_note(r),
        "outcome": r.outcome,
        "best_error": num(r.best_error),
        "coefficients": coefficients,
        "models": models,
        "rows": rows,
        "importance": importance,
        "trades": [{"columns": list(t["columns"]), "sentence": t["sentence"]} for t in r.trades],
        "sentences": list(r.sentences),
    }


__all__ = ["Ranges", "ModelPlace", "compute_ranges", "ranges_from_curvature", "resolve_tolerance",
           "heldout_tolerance", "ranges_to_json", "ranges_sentences", "tolerance_phrase", "approximation_note",
           "ranges_unavailable", "QUADRATIC_WORDS", "MODEL_NAMES"]

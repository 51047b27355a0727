"""Result objects of the engine.

Immutable dataclasses holding numpy arrays; each carries the names of the
design columns it refers to.  Everything later (analyses, session, report,
GUI) reads these and nothing else from the engine.

Penalty objective (the one parametrization for every penalized model)::

    minimise  1/(2W) * sum_i w_i (y_i - b0 - x~_i . beta)^2
              + alpha * (rho * ||beta||_1 + (1 - rho)/2 * ||beta||_2^2)

with x~ the predictors standardized by weighted mean and weighted population
SD and W = sum_i w_i; rho = 0 is ridge, rho = 1 lasso, in between elastic net.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from typing import TYPE_CHECKING, Callable, Dict, Optional, Tuple

import numpy as np

from regbench.formatting import number_text
# Settings live in their own numpy-free module (the CLI builds its options from them at start-up);
# they are re-exported here, where every result that carries them is defined.
from regbench.models.settings import ALPHA_RULES, FitSettings  # noqa: F401

if TYPE_CHECKING:  # the engine's cache type; imported for annotations only
    from regbench.models.gram import GramStats


def same_value(a, b) -> bool:
    """Deep equality for result values: arrays by shape and value (NaN equals NaN), floats with
    NaN equal to NaN, containers and result objects item by item."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        if not (isinstance(a, np.ndarray) and isinstance(b, np.ndarray)) or a.shape != b.shape:
            return False
        try:
            return bool(np.array_equal(a, b, equal_nan=True))
        except TypeError:  # equal_nan on a non-numeric dtype
            return bool(np.array_equal(a, b))
    if isinstance(a, (tuple, list)) or isinstance(b, (tuple, list)):
        return type(a) is type(b) and len(a) == len(b) and all(same_value(x, y) for x, y in zip(a, b))
    if isinstance(a, dict) or isinstance(b, dict):
        return (isinstance(a, dict) and isinstance(b, dict) and list(a) == list(b)
                and all(same_value(a[k], b[k]) for k in a))
    if isinstance(a, float) and isinstance(b, float) and a != a and b != b:
        return True
    return bool(a == b)


class Result:
    """Base of the result objects: ``==`` compares field by field (arrays by value, NaN equal
    to NaN; fields declared ``compare=False`` are left out), and columns are found by name."""

    __hash__ = None  # equal by value, and they hold arrays: not usable as keys

    def __eq__(self, other):
        if type(other) is not type(self):
            return NotImplemented
        return all(same_value(getattr(self, f.name), getattr(other, f.name)) for f in fields(self) if f.compare)

    def index(self, column: str) -> int:
        """Position of ``column`` in this result's ``columns``; names the known columns when absent."""
        try:
            return self.columns.index(column)
        except ValueError:
            raise KeyError(f"'{column}' is not a column of this result; its columns are: "
                           f"{', '.join(self.columns)}") from None

    def by_column(self, values) -> Dict[str, object]:
        """column -> value for an array laid out like ``columns``."""
        return dict(zip(self.columns, values))


#: Names of the four model families, in the order every view lists them.
MODEL_NAMES = ("ols", "ridge", "lasso", "elastic_net")
MODEL_LABELS = {"ols": "OLS", "logistic": "Logistic", "ridge": "Ridge", "lasso": "Lasso", "elastic_net": "Elastic net",
                "relaxed_lasso": "Relaxed lasso", "relaxed_elastic_net": "Relaxed elastic net"}
#: Kinds of target: a number, or a yes/no outcome (two distinct values).
OUTCOMES = ("numeric", "binary")
ALPHA_RULES = ("fixed", "cv_min", "cv_1se")


def to_design_coding(coef, intercept, p: int, sibling_idx):
    """Coefficients (…, p+m) on all levels → (coefficients (…, p), intercepts) in reference coding.

    ``sibling_idx[g]`` are the design positions of the other levels of the category whose
    reference level is column ``p + g`` (see :mod:`regbench.models.coding`).
    """
    coef = np.asarray(coef, dtype=float)
    out = coef[..., :p].copy()
    b0 = np.array(intercept, dtype=float, copy=True)
    for g, idx in enumerate(sibling_idx):
        ref = coef[..., p + g]
        if idx:
            out[..., list(idx)] -= ref[..., None]
        b0 = b0 + ref
    return out, (float(b0) if np.ndim(b0) == 0 else b0)


def model_columns(columns, models) -> tuple:
    """The design's ``columns`` followed by every reference level a model of ``models`` carries
    (penalized fits weigh every level of a category alike), each once, in order of appearance."""
    out = list(columns)
    for m in models:
        for c in getattr(m, "columns", ())[len(columns):]:
            if c not in out:
                out.append(c)
    return tuple(out)


def aligned(model, columns, standardized: bool = False, fill: float = 0.0) -> np.ndarray:
    """``model``'s coefficients laid out over ``columns`` (``fill`` where it carries no such column)."""
    vals = np.asarray(model.coef_std if standardized else model.coef, dtype=float)
    # A model that does not name its columns is laid out like the first of ``columns``.
    own = {c: j for j, c in enumerate(model.columns or tuple(columns)[:vals.shape[0]])}
    return np.array([vals[own[c]] if c in own else fill for c in columns], dtype=float)


def model_label(name: str) -> str:
    """Human label for a model key ('elastic_net_0.8' -> 'Elastic net (L1 ratio 0.8)')."""
    if name in MODEL_LABELS:
        return MODEL_LABELS[name]
    if name.startswith("elastic_net_"):
        return f"Elastic net (L1 ratio {name[len('elastic_net_'):]})"
    return name


def unpenalized(models) -> str:
    """The unpenalized model among model keys: 'logistic' for a yes/no outcome, else 'ols'."""
    return "logistic" if "logistic" in models else "ols"


@dataclass(frozen=True, eq=False)
class LinearModel(Result):
    """A fitted linear predictor in original units: ``intercept + X @ coef``.

    Attributes
    ----------
    name : str
        'ols', 'ridge', 'lasso', 'elastic_net' or 'elastic_net_<ratio>'.
    columns : tuple of str
        Design columns, in design order.
    intercept : float
    coef : ndarray (p,)
        Original units; exactly 0.0 for a column the model does not use.
    coef_std : ndarray (p,)
        The same on standardized columns (coef * weighted SD).
    alpha, l1_ratio : float or None
        None for OLS.
    """

    name: str
    columns: Tuple[str, ...]
    intercept: float
    coef: np.ndarray
    coef_std: np.ndarray
    alpha: Optional[float] = None
    l1_ratio: Optional[float] = None
    #: Duality gap of a penalized fit as a share of the weighted variance of y
    #: (see :class:`Convergence`); None for OLS and for fits saved before it existed.
    gap: Optional[float] = None
    #: Whether ``gap`` is within the solver's tolerance; None when not known.
    converged: Optional[bool] = None
    #: Relaxation γ of a relaxed family's model (see :mod:`regbench.models.relaxed`); None otherwise.
    relaxation: Optional[float] = None
    #: 'numeric' (predictions on the target's scale) or 'binary' (predictions are
    #: probabilities of "yes": the inverse logit of the linear predictor).
    outcome: str = "numeric"
    #: A penalized model fitted on every level of its categories (see
    #: :mod:`regbench.models.coding`): for each category's reference level, which is one of the
    #: last columns of ``columns``, its name and the design columns of the category's other
    #: levels (the reference indicator is 1 minus their sum).  Empty for a model on the
    #: design's own columns.
    reference_levels: Tuple[Tuple[str, Tuple[str, ...]], ...] = ()

    @property
    def used(self) -> np.ndarray:
        """Boolean mask of the columns with a non-zero coefficient."""
        return self.coef != 0.0

    @property
    def n_design(self) -> int:
        """How many of ``columns`` are design columns (the rest are reference levels)."""
        return len(self.columns) - len(self.reference_levels)

    def design_coefficients(self):
        """(intercept, coef over the design's columns) of the same predictor.

        A model on all levels is rewritten in the design's reference coding (each level's
        coefficient minus its reference level's, the reference level's added to the
        intercept), which predicts the same on every row; any other model as it is.
        """
        if not self.reference_levels:
            return float(self.intercept), np.asarray(self.coef, dtype=float)
        p = self.n_design
        idx = [tuple(self.columns.index(c) for c in sibs) for _, sibs in self.reference_levels]
        coef, b0 = to_design_coding(self.coef, self.intercept, p, idx)
        return float(b0), coef

    def expand(self, X: np.ndarray) -> np.ndarray:
        """Rows of design columns → rows of this model's columns (each reference level is 1 minus its siblings)."""
        X = np.asarray(X, dtype=np.float64)
        if not self.reference_levels or X.shape[-1] != self.n_design:
            return X
        extra = [1.0 - X[:, [self.columns.index(c) for c in sibs]].sum(axis=1) for _, sibs in self.reference_levels]
        return np.column_stack([X, *extra])

    def on_design(self, sd) -> "LinearModel":
        """The same predictor on the design's columns (itself unless fitted on all levels).

        ``sd`` (p,) are the design columns' weighted SDs, for the standardized coefficients.
        """
        if not self.reference_levels:
            return self
        b0, coef = self.design_coefficients()
        return replace(self, columns=self.columns[:self.n_design], intercept=b0, coef=coef,
                       coef_std=coef * np.asarray(sd, dtype=float), reference_levels=())

    def coefficient(self, column: str, standardized: bool = False) -> float:
        """The coefficient of ``column`` (0.0 for a column this model does not carry)."""
        try:
            j = self.columns.index(column)
        except ValueError:
            return 0.0
        return float((self.coef_std if standardized else self.coef)[j])

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Predictions for rows of design columns.

        Only used columns enter the product, so a column the model does not use
        cannot change a prediction even when it holds NaN or inf.
        """
        eta = self.linear_predictor(X)
        if self.outcome == "binary":
            from scipy.special import expit

            return expit(eta)
        return eta

    def linear_predictor(self, X: np.ndarray) -> np.ndarray:
        """``intercept + X @ coef`` (for a yes/no outcome: the log-odds of "yes").

        ``X`` holds the design's columns; a model on all levels of its categories reads
        each reference level off the design's indicators (see :meth:`design_coefficients`).
        """
        X = np.asarray(X, dtype=np.float64)
        intercept, coef = self.intercept, np.asarray(self.coef)
        if self.reference_levels and X.shape[-1] == self.n_design:
            intercept, coef = self.design_coefficients()
        used = np.flatnonzero(coef != 0.0)
        if used.size == 0:
            return np.full(X.shape[0], intercept)
        b = coef[used]
        if X.ndim != 2 or X.shape[0] * used.size <= PREDICT_BLOCK:
            return intercept + X[:, used] @ b
        # The used columns of a block of rows at a time: one copy of them for all 100,000 rows, made
        # afresh for each of two dozen predictions, took 0.3 s of a project at 100 columns.
        step = max(1, PREDICT_BLOCK // used.size)
        out = np.empty(X.shape[0])
        for s in range(0, X.shape[0], step):
            out[s:s + step] = X[s:s + step, used] @ b
        return intercept + out


#: Cells of the used columns gathered at a time by :meth:`LinearModel.linear_predictor` (4 MB).
PREDICT_BLOCK = 1 << 19


@dataclass(frozen=True, eq=False)
class SetAside(Result):
    """A column OLS set aside because the kept columns reproduce it.

    ``column ≈ intercept + Σ combination[c] · c`` over kept columns c, with
    ``residual`` the weighted RMS of what is left over (0 up to round-off for an
    exact alias).  ``alternatives`` are the kept columns in the combination:
    any one of them could have been set aside instead.  ``relative_residual``
    is ``residual`` over the column's weighted SD; ``exact`` says whether that
    is at round-off level (False: an almost-exact dependency that a larger
    rank tolerance set aside).
    """

    column: str
    combination: Dict[str, float]
    intercept: float
    residual: float
    alternatives: Tuple[str, ...]
    relative_residual: float = 0.0
    exact: bool = True
    #: Why it was set aside: 'combination' (kept columns reproduce it), 'category' (it takes
    #: one value per level of the category ``category``), 'constant' (the intercept carries
    #: it) or 'too_few_rows' (the kept columns already fit all ``rows`` rows exactly, so
    #: nothing can be learned about it; not a fact about the column).
    reason: str = "combination"
    category: str = ""
    rows: int = 0
    kept_count: int = 0

    def sentence(self) -> str:
        """Why the column was set aside and what could replace it, in one plain sentence."""
        # sentences.py imports this module for the result classes: imported here to break the cycle.
        from regbench.sentences import set_aside_sentence

        return set_aside_sentence(self)

    def to_dict(self) -> dict:
        return {
            "column": self.column,
            "combination": {k: float(v) for k, v in self.combination.items()},
            "intercept": float(self.intercept),
            "residual": float(self.residual),
            "alternatives": list(self.alternatives),
            "relative_residual": float(self.relative_residual),
            "exact": bool(self.exact),
            "reason": self.reason,
            "category": self.category or None,
        }


@dataclass(frozen=True, eq=False)
class OLSResult(Result):
    """Weighted OLS by column-pivoted QR, with inference on the kept columns.

    Arrays are over all design ``columns``; set-aside columns hold coef 0.0 and
    NaN in std_errors, t_values, p_values, ci_low, ci_high.
    """

    columns: Tuple[str, ...]
    kept: Tuple[str, ...]
    set_aside: Tuple[SetAside, ...]
    intercept: float
    intercept_se: float
    coef: np.ndarray
    std_errors: np.ndarray
    t_values: np.ndarray
    p_values: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    r_squared: float
    adj_r_squared: float
    residual_sd: float
    df_resid: float
    n_obs: int
    rank: int
    rank_tol: float
    model: LinearModel
    #: (p+2)×(p+2) upper-triangular factor R of the weighted rows ``sqrt(w/W)·[1, x, y]``
    #: (columns: intercept, ``columns`` in order, target; so ``R'R`` is the weighted
    #: cross-product matrix / W, ``R[0, 1:]`` the weighted means).  The diagnostics use it
    #: instead of a second pass over the rows; None on results saved before it existed.
    r_factor: Optional[np.ndarray] = None
    #: 'counts' (a row of weight w is w observations) or 'precision'.
    weights_kind: str = "precision"
    #: Observations behind the inference: Σw for count rows, else ``n_obs``.
    observations: float = float("nan")
    #: Why inference is missing (no residual degrees of freedom), or "".
    inference_note: str = ""
    #: Cluster-robust (by group) standard errors when the design has groups, else None;
    #: small-sample factor G/(G-1)·(N-1)/(N-K) as statsmodels' ``cov_type="cluster"``.
    cluster_std_errors: Optional[np.ndarray] = None
    cluster_intercept_se: float = float("nan")
    n_clusters: int = 0

    @property
    def set_aside_mask(self) -> np.ndarray:
        """Boolean mask over ``columns``: True where OLS set the column aside.

        A set-aside column has no coefficient (its ``coef`` entry is 0.0 only so
        that :meth:`LinearModel.predict` leaves it out); views and exports show
        "set aside" or null there, never 0.
        """
        kept = set(self.kept)
        return np.array([c not in kept for c in self.columns], dtype=bool)

    def coef_or_nan(self, standardized: bool = False) -> np.ndarray:
        """Coefficients with NaN for set-aside columns (original units, or standardized)."""
        v = np.array(self.model.coef_std if standardized else self.model.coef, dtype=float)
        v[self.set_aside_mask] = np.nan
        return v


@dataclass(frozen=True, eq=False)
class NearDependency(Result):
    """A strongly collinear column and the few others that explain it."""

    column: str
    vif: float
    explained_by: Tuple[str, ...]  # column names
    r_squared: float  # R² those columns reach when predicting ``column``
    sentence: str


@dataclass(frozen=True, eq=False)
class Diagnostics(Result):
    """Collinearity diagnostics on the kept columns.

    Attributes
    ----------
    columns : tuple of str
        Kept columns (OLS), the order of ``vif``.
    vif : ndarray (k,)
    condition_indices : ndarray (k+1,)
        Of the column-scaled design with intercept, ascending.
    variance_proportions : ndarray (k+1, k+1)
        Row i: dimension i (same order as condition_indices); column j: term j
        ('(intercept)' then ``columns``).
    terms : tuple of str
        '(intercept)' followed by ``columns``.
    near_dependencies : tuple of NearDependency
        For each column with VIF above 10 (common practice).
    damaging : tuple of dict
        Dimensions with condition index > 30 and two or more proportions > 0.5
        (Belsley, Kuh & Welsch 1980): {'index': float, 'terms': [names]}.
    sentences : tuple of str
        Plain-language summary.
    """

    columns: Tuple[str, ...]
    vif: np.ndarray
    condition_indices: np.ndarray
    variance_proportions: np.ndarray
    terms: Tuple[str, ...]
    near_dependencies: Tuple[NearDependency, ...]
    damaging: Tuple[dict, ...]
    sentences: Tuple[str, ...]


@dataclass(frozen=True, eq=False)
class PathResult(Result):
    """Coefficients along a penalty path (α descending)."""

    name: str
    l1_ratio: float
    alphas: np.ndarray  # (k,)
    coef: np.ndarray  # (k, p) original units
    coef_std: np.ndarray  # (k, p) standardized
    intercepts: np.ndarray  # (k,)
    columns: Tuple[str, ...]
    #: As :attr:`LinearModel.reference_levels`: a path on every level of its categories.
    reference_levels: Tuple[Tuple[str, Tuple[str, ...]], ...] = ()


@dataclass(frozen=True, eq=False)
class CVResult(Result):
    """Cross-validated error per α: weighted mean squared error over held-out rows."""

    alphas: np.ndarray
    mean: np.ndarray
    se: np.ndarray
    alpha_min: float
    alpha_1se: float
    n_folds: int
    grouped: bool
    #: The lowest CV error is at the smallest α of the grid: the true minimum may lie below it.
    at_edge: bool = False
    #: What ``mean`` measures: 'mse' (weighted mean squared error) or 'log_loss'
    #: (weighted mean log-loss, for a yes/no outcome).
    measure: str = "mse"

    def edge_sentence(self) -> str:
        """One line for people when the lowest error is at the grid's smallest α, else ""."""
        if not self.at_edge:
            return ""
        from regbench.formatting import number_text

        return (f"At the edge of the grid: held-out error is lowest at the smallest α tried "
                f"({number_text(self.alpha_min, 3)}); a smaller α might predict better, so that α is a bound, "
                "not a minimum.")


@dataclass(frozen=True, eq=False)
class Convergence(Result):
    """The duality-gap certificate of one penalized family.

    A duality gap bounds how far a fit's objective is above the true optimum;
    here it is a share of the weighted variance of y on the rows fitted (the
    objective at β = 0 is half of that), so one tolerance serves every table.

    Attributes
    ----------
    converged : bool
        Every fit of the family (each α of the path, the chosen fit, and each
        cross-validation fold's fits) has a gap within ``tolerance``.
    max_gap : float
        The largest of those gaps.
    tolerance : float
    gaps : ndarray (k,)
        The gap at each α of the path.
    worst : str
        Where ``max_gap`` occurred: 'path', 'chosen fit' or 'fold K'.
    """

    converged: bool
    max_gap: float
    tolerance: float
    gaps: np.ndarray
    worst: str = "path"

    def to_dict(self) -> dict:
        return {"converged": bool(self.converged), "max_gap": float(self.max_gap), "tolerance": float(self.tolerance)}

    def sentence(self) -> str:
        """One line for people: certified, or flagged with where the solver stopped short."""
        gap, tol = number_text(self.max_gap, 2), number_text(self.tolerance, 2)
        if self.converged:
            return (f"Solver converged: largest duality gap {gap} of the variance of y "
                    f"(tolerance {tol}).")
        return (f"NOT CONVERGED: the solver stopped with a duality gap of {gap} of the variance of y "
                f"({self.worst}), above the tolerance {tol}; these coefficients are not the exact "
                "optimum. Refit, or report the problem with the table.")


@dataclass(frozen=True, eq=False)
class RelaxationCV(Result):
    """Cross-validated error of a relaxed family over (relaxation γ, α), on the same folds as α.

    ``mean`` and ``se`` have shape (len(relaxations), len(alphas)).
    """

    relaxations: np.ndarray
    alphas: np.ndarray
    mean: np.ndarray
    se: np.ndarray


@dataclass(frozen=True, eq=False)
class PenalizedFit(Result):
    """One penalized model family: its path, its CV curve and the chosen model."""

    name: str
    l1_ratio: float
    path: PathResult
    cv: Optional[CVResult]
    alpha: float
    alpha_rule: str
    model: LinearModel
    #: None on results saved before the certificate existed.
    convergence: Optional[Convergence] = None
    #: Chosen (or fixed) relaxation γ of a relaxed family; None for the other families.
    relaxation: Optional[float] = None
    relaxation_cv: Optional[RelaxationCV] = None


@dataclass(frozen=True, eq=False)
class FitResults(Result):
    """Everything one ``fit_all`` produced on one design."""

    columns: Tuple[str, ...]
    settings: FitSettings
    ols: OLSResult
    diagnostics: Diagnostics
    penalized: Dict[str, PenalizedFit]  # model name -> fit, in display order
    fold_ids: np.ndarray  # (n,) fold of each design row, 0..K-1
    n_obs: int
    #: 'numeric' or 'binary'.  For a yes/no outcome ``ols`` is the least-squares fit of
    #: the 0/1 target, kept only for the columns it set aside and the diagnostics (both
    #: are about the predictors alone); the unpenalized model is ``logistic``.
    outcome: str = "numeric"
    logistic: Optional[LogisticResult] = None

    @property
    def unpenalized_name(self) -> str:
        """'ols' for a numeric target, 'logistic' for a yes/no outcome."""
        return "logistic" if self.outcome == "binary" else "ols"
    #: The engine's cross-products of the whole design, accumulated fold by fold (not stored in a
    #: project; a project opened from its file gathers them on first use, see :meth:`whole_stats`).
    gram: Optional[GramStats] = field(default=None, repr=False, compare=False)
    #: How to gather ``gram`` when it is first needed; None once gathered or when nothing can.
    gram_source: Optional[Callable[[], GramStats]] = field(default=None, repr=False, compare=False)
    #: The cross-products of each fold from the same pass (``gram`` is their sum), so that held-out
    #: refits of this design need no second pass; not stored, None when restored from a project.
    fold_stats: Optional[tuple] = field(default=None, repr=False, compare=False)

    def whole_stats(self) -> Optional[GramStats]:
        """``gram``, gathered on first use when these results were restored from a project file.

        Opening a project needs no pass over its rows; the first refit at a new α, range or
        comparison that needs the cross-products pays for the pass, in the thread that asks
        (a refit's worker), once.
        """
        if self.gram is None and self.gram_source is not None:
            # A cache of the engine, outside the value (compare=False): filled in once, in place.
            object.__setattr__(self, "gram", self.gram_source())
            object.__setattr__(self, "gram_source", None)
        return self.gram

    def models(self) -> dict:
        """name -> LinearModel for the unpenalized model and every penalized model, in display order.

        For a yes/no outcome whose classes a column separates, the unpenalized
        logistic model has no finite estimate and is left out (see
        ``logistic.separation``).
        """
        if self.outcome == "binary":
            out = {}
            if self.logistic is not None and self.logistic.model is not None:
                out["logistic"] = self.logistic.model
        else:
            out = {"ols": self.ols.model}
        for name, pf in self.penalized.items():
            out[name] = pf.model
        return out


@dataclass(frozen=True, eq=False)
class Separation(Result):
    """Columns whose combination predicts a yes/no outcome perfectly (or perfectly but for ties).

    ``score = intercept + Σ combination[c] · c`` is ≥ 0 on every "yes" row and
    ≤ 0 on every "no" row; ``rows_exact`` rows (of ``rows``) are on the strict
    side, so their fitted probability would be pushed to exactly 0 or 1.
    ``kind`` is 'complete' (every row strictly) or 'quasi-complete'.
    """

    kind: str
    combination: Dict[str, float]
    intercept: float
    rows_exact: int
    rows: int
    sentence: str


@dataclass(frozen=True, eq=False)
class LogisticResult(Result):
    """Unpenalized weighted logistic regression on the columns OLS kept.

    Arrays are over all design ``columns``; set-aside columns (the same as
    OLS's, with the same explanations) hold coef 0.0 and NaN inference.  When
    ``separation`` is set the likelihood has no maximum: every coefficient and
    its inference are NaN and ``model`` is None, so no huge coefficient is
    ever shown as if it were an estimate.
    """

    columns: Tuple[str, ...]
    kept: Tuple[str, ...]
    set_aside: Tuple[SetAside, ...]
    intercept: float
    intercept_se: float
    coef: np.ndarray
    std_errors: np.ndarray
    z_values: np.ndarray
    p_values: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    log_likelihood: float
    null_log_likelihood: float
    pseudo_r_squared: float  # McFadden: 1 − ℓ / ℓ₀
    n_obs: int
    weight_total: float
    iterations: int
    converged: bool
    positive_level: str
    model: Optional[LinearModel] = None
    separation: Optional[Separation] = None

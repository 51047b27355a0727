"""The stress test: damage one input column and measure how each model's predictions move.

The fitted models stay as they are; one chosen predictor is damaged in the rows
being predicted, and each model's predictions on the damaged rows are compared
with its own predictions on the clean rows and with the target.

Kinds of damage and what ``strength`` means (defaults in brackets):

``shuffle``  [1]     share of rows whose values are permuted among themselves
``noise``    [1]     Gaussian noise of ``strength`` × the column's weighted SD is added
``constant`` [–]     the column is frozen at its weighted mean, or at ``fill``
``rescale``  [1.8]   values are multiplied by ``strength`` (a unit slip such as °C read
                     as °F), plus ``fill`` as an offset when given
``wild``     [0.05]  share of rows replaced by extreme values, mean ± 10 weighted SDs
                     (sign drawn at random)
``missing``  [0.1]   share of rows lost and filled with the weighted mean, or ``fill``

A categorical predictor named by its table column (e.g. ``variety``) damages
all its one-hot design columns together: a shuffle moves whole rows of the
block, so each damaged row still has exactly one level; the other kinds act
on each coded column of the block (noise, a rescale or a wild value on 0/1
columns is a deliberately impossible input, the kind a broken feed produces).

All statistics are weighted by ``design.weights``.  A prediction has *moved*
when it shifts by more than the tolerance, by default 0.1 × the weighted SD of
the target (our choice).  A model that does not use the damaged column does
not move at all, bit for bit: ``LinearModel.predict`` multiplies only the
columns a model uses, so even NaN or inf in an unused column cannot reach a
prediction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Optional

import numpy as np

from regbench.analysis.agreement import in_sentence, json_number, weighted_mean, weighted_rms, weighted_sd
from regbench.data.derive import dependents, recompute
from regbench.errors import DataError
from regbench.formatting import join_words, sentence_number
from regbench.models.engine import fit_all, fit_models_at
from regbench.models.results import Result, model_label
from regbench.progress import check, report

#: How a stress test damages a column (``regbench stress --kind``).
STRESS_KINDS = ("shuffle", "noise", "constant", "rescale", "wild", "missing")
DEFAULT_STRENGTH = {"shuffle": 1.0, "noise": 1.0, "constant": None, "rescale": 1.8, "wild": 0.05, "missing": 0.1}
#: Kinds whose strength is a share of rows (0..1).
SHARE_KINDS = ("shuffle", "wild", "missing")
#: How far out a wild value lies, in weighted SDs from the weighted mean.
WILD_SDS = 10.0
#: Default tolerance as a share of the target's weighted SD.
TOLERANCE_SHARE = 0.1
#: Strengths a sweep uses when none are given.
DEFAULT_SWEEP = {
    "shuffle": np.linspace(0.0, 1.0, 11),
    "noise": np.array([0.0, 0.1, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0]),
    "rescale": np.array([0.5, 0.75, 0.9, 1.0, 1.1, 1.25, 1.5, 1.8, 2.0]),
    "wild": np.array([0.0, 0.01, 0.02, 0.05, 0.1, 0.2]),
    "missing": np.linspace(0.0, 1.0, 11),
}


def _fill_to_json(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else str(v)


@dataclass(frozen=True)
class StressConfig:
    """What to damage and how.

    Attributes
    ----------
    column : str
        A design column, or a table column (all its design columns are damaged together).
    kind : {'shuffle', 'noise', 'constant', 'rescale', 'wild', 'missing'}
    strength : float or None
        Kind-specific (see the module notes); None: the kind's default.
    seed : int
    tolerance : float or None
        A prediction 'moved' when it shifts by more than this; None: 0.1 × weighted SD of the target.
    fill : float or None
        The constant for 'constant' and 'missing', the offset for 'rescale'.
    """

    column: str
    kind: str
    strength: Optional[float] = None
    seed: int = 0
    tolerance: Optional[float] = None
    fill: Optional[float] = None

    def __post_init__(self):
        if self.kind not in STRESS_KINDS:
            raise DataError(f"stress kind '{self.kind}' is unknown; choose one of: {', '.join(STRESS_KINDS)}")
        if self.tolerance is not None and not (self.tolerance >= 0 and math.isfinite(self.tolerance)):
            raise DataError(f"stress tolerance {self.tolerance!r} must be a number >= 0")

    def resolved_strength(self) -> Optional[float]:
        """The strength in use (the kind's default when none was given), checked."""
        s = DEFAULT_STRENGTH[self.kind] if self.strength is None else float(self.strength)
        if self.kind == "constant":
            return None
        if not math.isfinite(s):
            raise DataError(f"stress strength for '{self.kind}' must be a finite number, not {s!r}")
        if self.kind in SHARE_KINDS and not 0.0 <= s <= 1.0:
            raise DataError(f"stress strength for '{self.kind}' is a share of rows; give a value between 0 and 1, not {s:g}")
        if self.kind == "noise" and s < 0:
            raise DataError(f"stress strength for 'noise' is a number of SDs; give a value >= 0, not {s:g}")
        return s

    def to_dict(self) -> dict:
        return {"column": self.column, "kind": self.kind, "strength": self.strength, "seed": int(self.seed),
                "tolerance": self.tolerance, "fill": _fill_to_json(self.fill)}

    @classmethod
    def from_dict(cls, d: dict) -> "StressConfig":
        for key in ("column", "kind"):
            if key not in d:
                raise DataError(f"stress configuration has no '{key}' field")

        def num(key):
            v = d.get(key)
            if v is None:
                return None
            try:
                return float(v)
            except (TypeError, ValueError):
                raise DataError(f"stress configuration field '{key}' must be a number, not {v!r}") from None

        return cls(column=str(d["column"]), kind=str(d["kind"]), strength=num("strength"),
                   seed=int(d.get("seed", 0)), tolerance=num("tolerance"), fill=num("fill"))


@dataclass(frozen=True, eq=False)
class ModelShift(Result):
    """How one model's predictions moved (all weighted).

    ``shift_rmse`` and ``mean_shift`` are of damaged − clean predictions;
    ``moved_share`` the weighted share of rows that moved by more than the
    tolerance; ``error_clean`` and ``error_damaged`` the weighted RMSE against
    the target before and after the damage.
    """

    shift_rmse: float
    mean_shift: float
    moved_share: float
    error_clean: float
    error_damaged: float
    uses_column: bool = True
    #: Yes/no outcomes with a recorded threshold: the weighted share of rows whose probability
    #: lands on the other side of the threshold after the damage (None otherwise).
    crossed_share: Optional[float] = None

    def to_dict(self) -> dict:
        d = {k: json_number(getattr(self, k)) for k in
             ("shift_rmse", "mean_shift", "moved_share", "error_clean", "error_damaged")}
        d["uses_column"] = bool(self.uses_column)
        if self.crossed_share is not None:
            d["crossed_share"] = json_number(self.crossed_share)
        return d


@dataclass(frozen=True, eq=False)
class StressResult(Result):
    """One stress test.

    Attributes
    ----------
    config : StressConfig
    column : str
        The damaged column as named in the configuration.
    columns : tuple of str
        The design columns that were damaged.
    kind : str
    strength : float or None
        The strength used (defaults resolved).
    tolerance : float
        The tolerance used.
    models : tuple of str
    shifts : dict of str -> ModelShift
    row_shift : dict of str -> ndarray (n,)
        Per design row, damaged − clean prediction.
    refit : bool
        True when the models were retrained on damaged data (``stress_refit``).
    target : str
    sentences : tuple of str
    """

    config: StressConfig
    column: str
    columns: tuple
    kind: str
    strength: Optional[float]
    tolerance: float
    models: tuple
    shifts: dict
    row_shift: dict
    refit: bool
    target: str
    sentences: tuple

    def to_dict(self) -> dict:
        return {
            "config": self.config.to_dict(), "column": self.column, "columns": list(self.columns),
            "kind": self.kind, "strength": self.strength, "tolerance": json_number(self.tolerance),
            "refit": self.refit, "target": self.target, "models": {k: self.shifts[k].to_dict() for k in self.models},
            "sentences": list(self.sentences),
        }


@dataclass(frozen=True, eq=False)
class StressSweep(Result):
    """Shift and error per model over a range of strengths of one kind of damage."""

    column: str
    kind: str
    strengths: np.ndarray
    shift_rmse: dict  # name -> ndarray (len(strengths),)
    error_damaged: dict
    moved_share: dict
    models: tuple
    tolerance: float
    sentences: tuple

    def to_dict(self) -> dict:
        arr = lambda a: [json_number(v) for v in a]  # noqa: E731
        return {"column": self.column, "kind": self.kind, "strengths": arr(self.strengths),
                "models": list(self.models), "tolerance": json_number(self.tolerance),
                "shift_rmse": {k: arr(v) for k, v in self.shift_rmse.items()},
                "error_damaged": {k: arr(v) for k, v in self.error_damaged.items()},
                "moved_share": {k: arr(v) for k, v in self.moved_share.items()},
                "sentences": list(self.sentences)}


@dataclass(frozen=True, eq=False)
class ColumnRanking(Result):
    """Each source column damaged in turn: how far each model moves.

    ``shift_rmse`` and ``error_damaged`` are (models × columns); ``order`` gives,
    per model, the columns from the one that moves it most to the least.
    """

    columns: tuple
    models: tuple
    kind: str
    strength: Optional[float]
    seed: int
    shift_rmse: np.ndarray
    error_damaged: np.ndarray
    error_clean: dict
    order: dict
    sentences: tuple

    def to_dict(self) -> dict:
        return {
            "kind": self.kind, "strength": self.strength, "seed": int(self.seed), "columns": list(self.columns),
            "models": {
                k: {"shift_rmse": {c: json_number(self.shift_rmse[i, j]) for j, c in enumerate(self.columns)},
                    "error_damaged": {c: json_number(self.error_damaged[i, j]) for j, c in enumerate(self.columns)},
                    "error_clean": json_number(self.error_clean[k]),
                    "order": list(self.order[k])}
                for i, k in enumerate(self.models)
            },
            "sentences": list(self.sentences),
        }


# -- damage -------------------------------------------------------------------------------


def _own_columns(design, column: str) -> list:
    if column in design.columns:
        return [design.columns.index(column)]
    return [j for j, s in enumerate(design.sources) if s == column]


def _followers(design, column: str) -> list:
    """(design index, Derived) of the derived design columns computed from ``column``."""
    names = {c: j for j, c in enumerate(design.columns)}
    return [(names[d.name], d) for d in dependents(getattr(design, "derived", ()), column) if d.name in names]


def resolve_column(design, column: str) -> np.ndarray:
    """Indices of the design columns to damage for ``column`` (a design or a table column name),
    followed by those of the derived columns computed from it, which the damage spoils too."""
    idx = _own_columns(design, column)
    if idx:
        return np.array(idx + [j for j, _ in _followers(design, column) if j not in idx])
    sources = list(dict.fromkeys(design.sources))
    extra = [c for c in design.columns if c not in sources]
    msg = f"'{column}' is not a predictor of this design; choose one of: {', '.join(sources)}"
    if extra:
        msg += f" (or a single coded level: {', '.join(extra)})"
    raise DataError(msg)


def damage_block(design, idx: np.ndarray, config: StressConfig) -> np.ndarray:
    """The damaged values of design columns ``idx`` (an (n, k) copy); the design is untouched.

    Derived columns among ``idx`` that are computed from the damaged column are not damaged
    on their own: they are recomputed from the damaged values.
    """
    follow = [(j, d) for j, d in _followers(design, config.column) if j in idx]
    if follow:
        return _damage_with_followers(design, idx, config, follow)
    return _damaged(design.X[:, idx].copy(), design.weights, config)


def _damaged(block: np.ndarray, w: np.ndarray, config: StressConfig) -> np.ndarray:
    """``block`` (a copy, overwritten) damaged as ``config`` says.

    Every kind draws per row, and noise one draw per cell; the closed-form ranking
    (:func:`_difference_sums`) draws as this does for a single column.
    """
    strength = config.resolved_strength()
    rng = np.random.default_rng(config.seed)
    n = block.shape[0]
    kind = config.kind
    # Only the kinds that fill with the mean or draw around it need it.
    mean = (np.array([weighted_mean(block[:, j], w) for j in range(block.shape[1])])
            if kind in ("constant", "wild", "missing") else None)
    fill = None if config.fill is None else float(config.fill)

    def some_rows(share):
        m = int(round(share * n))
        if m >= n:
            return np.arange(n)
        return np.sort(rng.choice(n, size=m, replace=False))

    if kind == "shuffle":
        rows = some_rows(strength)
        block[rows] = block[rows[rng.permutation(rows.size)]]
    elif kind == "noise":
        sd = np.array([weighted_sd(block[:, j], w) for j in range(block.shape[1])])
        block += strength * sd * rng.standard_normal(block.shape)
    elif kind == "constant":
        block[:] = mean if fill is None else fill
    elif kind == "rescale":
        # A rescale past the float range gives inf on purpose: the figures then report an
        # infinite shift, so numpy's overflow warning would only repeat what they say.
        with np.errstate(over="ignore"):
            block *= strength
        if fill is not None:
            block += fill
    elif kind == "wild":
        sd = np.array([weighted_sd(block[:, j], w) for j in range(block.shape[1])])
        rows = some_rows(strength)
        sign = rng.choice((-1.0, 1.0), size=(rows.size, 1))
        block[rows] = mean + sign * WILD_SDS * sd
    elif kind == "missing":
        rows = some_rows(strength)
        block[rows] = mean if fill is None else fill
    return block


def _damage_with_followers(design, idx, config, follow) -> np.ndarray:
    idx = list(idx)
    own = [j for j in idx if j not in {k for k, _ in follow}]
    block = design.X[:, idx].copy()
    if own:
        block[:, [idx.index(j) for j in own]] = damage_block(design, np.array(own), config)
    current = {design.columns[j]: block[:, idx.index(j)] for j in own}
    if config.column not in current and len(own) == 1:
        current[config.column] = block[:, idx.index(own[0])]
    for j, d in follow:
        names = set(design.columns)
        if not all(c in current or c in names for c in d.columns):
            continue  # an input is not in the design: the derived column cannot be recomputed here
        inputs = [current[c] if c in current else design.X[:, design.columns.index(c)] for c in d.columns]
        clean = [design.X[:, design.columns.index(c)] if c in names else current[c] for c in d.columns]
        values = recompute(d, inputs, clean, design.X[:, j])
        block[:, idx.index(j)] = values
        current[d.name] = values
    return block


def damaged_design(design, config: StressConfig):
    """A copy of the design with the configured column(s) damaged."""
    idx = resolve_column(design, config.column)
    X = design.X.copy()
    X[:, idx] = damage_block(design, idx, config)
    return replace(design, X=X)


#: For a yes/no outcome a probability "moved" when it shifts by more than this (5 percentage points).
BINARY_TOLERANCE = 0.05


def default_tolerance(design) -> float:
    """0.1 × the weighted SD of the target; for a yes/no outcome 0.05 on the probability scale."""
    if getattr(design, "outcome", "numeric") == "binary":
        return BINARY_TOLERANCE
    return TOLERANCE_SHARE * weighted_sd(design.y, design.weights)


# -- measuring ----------------------------------------------------------------------------


def _shift(design, clean: np.ndarray, damaged: np.ndarray, tol: float, uses: bool, error_clean=None,
           threshold=None) -> ModelShift:
    w = design.weights
    crossed = None
    if threshold is not None:
        # Probabilities of a yes/no outcome: rows flagged before and not after, or the reverse.
        with np.errstate(invalid="ignore"):
            flip = (clean >= threshold) != (damaged >= threshold)
        crossed = float(w[flip].sum() / w.sum())
    # Damage may be extreme on purpose (inf, 1e300): overflow to inf is the honest answer.
    with np.errstate(over="ignore", invalid="ignore"):
        d = damaged - clean
        # A NaN prediction counts as moved.
        moved = ~(np.abs(d) <= tol)
        return ModelShift(
            shift_rmse=weighted_rms(d, w),
            mean_shift=weighted_mean(d, w),
            moved_share=float(w[moved].sum() / w.sum()),
            error_clean=weighted_rms(clean - design.y, w) if error_clean is None else error_clean,
            error_damaged=weighted_rms(damaged - design.y, w),
            uses_column=uses,
            crossed_share=crossed,
        )


def _uses(model, idx) -> bool:
    # On the design's columns: a fit on every level of a category uses it when any level, the reference
    # level included, has a coefficient.
    return bool(np.any(model.design_coefficients()[1][idx] != 0.0))


def run_stress(design, models: dict, config: StressConfig, threshold: Optional[float] = None) -> StressResult:
    """Damage one column in the rows being predicted; the models stay fixed.

    Parameters
    ----------
    design : Design
    models : dict of str -> LinearModel
    config : StressConfig

    Returns
    -------
    StressResult
    """
    idx = resolve_column(design, config.column)
    strength = config.resolved_strength()
    tol = default_tolerance(design) if config.tolerance is None else float(config.tolerance)
    Xd = design.X.copy()
    Xd[:, idx] = damage_block(design, idx, config)
    shifts, rows = {}, {}
    for name, m in models.items():
        clean = m.predict(design.X)
        damaged = m.predict(Xd)
        rows[name] = damaged - clean
        shifts[name] = _shift(design, clean, damaged, tol, _uses(m, idx), threshold=threshold)
    names = tuple(models)
    sentences = _stress_sentences(design, config, strength, tol, names, shifts, refit=False)
    if threshold is not None and names:
        worst = max(names, key=lambda k: shifts[k].crossed_share)
        sentences = sentences + (
            f"At the recorded threshold {sentence_number(threshold)}, {shifts[worst].crossed_share:.1%} of rows cross it under "
            f"{in_sentence(model_label(worst))} (flagged before and not after, or the reverse).",)
    return StressResult(config=config, column=config.column, columns=tuple(design.columns[j] for j in idx),
                        kind=config.kind, strength=strength, tolerance=tol, models=names, shifts=shifts,
                        row_shift=rows, refit=False, target=design.target, sentences=sentences)


def _damage_words(design, config, strength) -> str:
    c = config.column
    k = config.kind
    if k == "shuffle":
        return f"{c} is shuffled" if strength >= 1 else f"{strength:.0%} of {c}'s rows are shuffled"
    if k == "noise":
        return f"noise of {sentence_number(strength)} SD is added to {c}"
    if k == "constant":
        if config.fill is not None:
            return f"{c} is frozen at {sentence_number(config.fill)}"
        return f"{c} is frozen at its mean"
    if k == "rescale":
        off = "" if config.fill is None else f" and shifted by {sentence_number(config.fill)}"
        return f"{c} is multiplied by {sentence_number(strength)}{off}"
    if k == "wild":
        return f"{strength:.0%} of {c}'s rows get wild values (mean ± {WILD_SDS:g} SD)"
    fill = "its mean" if config.fill is None else sentence_number(config.fill)
    return f"{strength:.0%} of {c}'s rows are lost and filled with {fill}"


def _stress_sentences(design, config, strength, tol, names, shifts, refit: bool) -> tuple:
    what = _damage_words(design, config, strength)
    movers = [k for k in names if shifts[k].shift_rmse != 0.0 or not np.isfinite(shifts[k].shift_rmse)]
    still = [k for k in names if k not in movers]
    if refit:
        lead = f"When the models are retrained on data where {what}, "
        on = " on the clean rows"
    else:
        lead = f"When {what}, "
        on = ""
    parts = []
    for i, k in enumerate(movers):
        v = shifts[k].shift_rmse
        label = model_label(k) if i == 0 else in_sentence(model_label(k))
        if not np.isfinite(v):
            parts.append(f"{label} predictions{on} become undefined")
        elif i == 0:
            parts.append(f"{label} predictions{on} move by {sentence_number(v)} RMS")
        else:
            parts.append(f"{label} by {sentence_number(v)}")
    first = lead + join_words(parts) if parts else lead
    if still:
        labels = [in_sentence(model_label(k)) for k in still]
        if not parts:
            labels[0] = model_label(still[0])
        unused = [k for k in still if not shifts[k].uses_column]
        if len(unused) == len(still) and not refit:
            verb = "does" if len(still) == 1 else "do"
            clause = f"{join_words(labels)} {verb} not use {config.column} and {verb} not move at all"
        else:
            clause = f"{join_words(labels)} {'does' if len(still) == 1 else 'do'} not move at all"
        first += ("; " if parts else "") + clause
    out = [first + "."]
    follow = [d.name for _, d in _followers(design, config.column)]
    if follow:
        out.append(f"Computed from {config.column}, {join_words(follow)} {'is' if len(follow) == 1 else 'are'} "
                   "spoiled with it.")
    finite = [k for k in names if np.isfinite(shifts[k].error_damaged)]
    if movers and finite:
        worst = max(movers, key=lambda k: shifts[k].shift_rmse if np.isfinite(shifts[k].shift_rmse) else np.inf)
        s = shifts[worst]
        if np.isfinite(s.error_damaged):
            out.append(f"{model_label(worst)}'s error against {design.target} goes from {sentence_number(s.error_clean)} to "
                       f"{sentence_number(s.error_damaged)}, and {s.moved_share:.0%} of its predictions move by more than "
                       f"{sentence_number(tol)}.")
        best = min(finite, key=lambda k: shifts[k].error_damaged)
        if len(names) > 1:
            out.append(f"After the damage the most accurate model is {in_sentence(model_label(best))} "
                       f"(error {sentence_number(shifts[best].error_damaged)}).")
    binary = getattr(design, "outcome", "numeric") == "binary"
    out.append(f"A {'probability' if binary else 'prediction'} counts as moved when it shifts by more than {sentence_number(tol)}"
               + ((" (5 percentage points)." if binary else " (0.1 × the SD of the target).")
                  if config.tolerance is None else "."))
    return tuple(out)


# -- sweep and ranking --------------------------------------------------------------------


def _delta_predictions(model, idx, block_clean, block_damaged, clean_pred):
    """Damaged predictions from the clean ones: only the model's used columns among ``idx`` enter."""
    coef = model.design_coefficients()[1]  # the same predictor on the design's columns
    used = idx[coef[idx] != 0.0]
    if used.size == 0:
        return clean_pred
    sel = np.isin(idx, used)
    if getattr(model, "outcome", "numeric") == "binary":
        # Probabilities: the damage moves the log-odds linearly, the probability through the logistic curve.
        from scipy.special import expit, logit

        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            eta = logit(clean_pred) + ((block_damaged[:, sel] - block_clean[:, sel]) * coef[used]).sum(axis=1)
        return expit(eta)
    # A few columns: element-wise beats a threaded BLAS call on a busy machine.
    return clean_pred + ((block_damaged[:, sel] - block_clean[:, sel]) * coef[used]).sum(axis=1)


def stress_sweep(design, models: dict, column: str, kind: str, strengths=None, seed: int = 0,
                 tolerance: Optional[float] = None, fill: Optional[float] = None) -> StressSweep:
    """Run one kind of damage at a range of strengths (same seed each time).

    Returns
    -------
    StressSweep
        Per model, shift RMS, error against the target and share of rows moved, per strength.
    """
    if kind == "constant":
        raise DataError("the 'constant' stress has no strength to sweep; run it once, or sweep another kind")
    strengths = DEFAULT_SWEEP[kind] if strengths is None and kind in DEFAULT_SWEEP else np.asarray(strengths, float)
    if strengths is None or np.ndim(strengths) != 1 or len(strengths) == 0:
        raise DataError("a stress sweep needs at least one strength")
    idx = resolve_column(design, column)
    tol = default_tolerance(design) if tolerance is None else float(tolerance)
    names = tuple(models)
    clean = {k: m.predict(design.X) for k, m in models.items()}
    block = design.X[:, idx]
    out = {k: np.empty((3, len(strengths))) for k in names}
    for i, s in enumerate(strengths):
        cfg = StressConfig(column, kind, strength=float(s), seed=seed, tolerance=tol, fill=fill)
        bd = damage_block(design, idx, cfg)
        for k in names:
            dm = _delta_predictions(models[k], idx, block, bd, clean[k])
            ms = _shift(design, clean[k], dm, tol, _uses(models[k], idx))
            out[k][:, i] = ms.shift_rmse, ms.error_damaged, ms.moved_share
    sentences = []
    end = float(strengths[-1])
    ranked = sorted(names, key=lambda k: -out[k][0, -1])
    if ranked:
        top = ranked[0]
        sentences.append(f"At the strongest {kind} of {column} (strength {sentence_number(end)}), {in_sentence(model_label(top))} "
                         f"moves most ({sentence_number(out[top][0, -1])} RMS)"
                         + (f" and {in_sentence(model_label(ranked[-1]))} least ({sentence_number(out[ranked[-1]][0, -1])})."
                            if len(ranked) > 1 else "."))
    return StressSweep(column=column, kind=kind, strengths=np.asarray(strengths, float).copy(),
                       shift_rmse={k: out[k][0].copy() for k in names},
                       error_damaged={k: out[k][1].copy() for k in names},
                       moved_share={k: out[k][2].copy() for k in names},
                       models=names, tolerance=tol, sentences=tuple(sentences))


_PARTICIPLE = {"shuffle": "shuffled", "noise": "noised", "constant": "frozen", "rescale": "rescaled",
               "wild": "given wild values", "missing": "partly lost"}


def rank_columns(design, models: dict, kind: str = "shuffle", strength: Optional[float] = None, seed: int = 0,
                 progress=None, cancel=None, columns=None) -> ColumnRanking:
    """Damage every source column (or those in ``columns``) in turn and rank them by how far each model moves.

    Categorical predictors are damaged as a whole block.  Progress is reported per
    column and ``cancel`` is checked between columns.
    """
    columns = tuple(dict.fromkeys(design.sources)) if columns is None else tuple(columns)
    resolved = StressConfig(columns[0], kind, strength).resolved_strength()
    names = tuple(models)
    clean = _clean_predictions(design, models)
    w = design.weights
    err_clean = {k: weighted_rms(clean[k] - design.y, w) for k in names}
    shift = np.zeros((len(names), len(columns)))
    err = np.zeros_like(shift)
    tol = default_tolerance(design)
    single = _closed_form_columns(design, columns)
    if single:
        shift, err = _rank_closed_form(design, models, names, columns, single, kind, strength, seed, clean, err_clean,
                                       shift, err, progress, cancel)
    for j, col in enumerate(columns):
        if col in single:
            continue
        check(cancel)
        report(progress, j, len(columns), f"stress test: {kind} {col}")
        idx = resolve_column(design, col)
        cfg = StressConfig(col, kind, strength=strength, seed=seed)
        bd = damage_block(design, idx, cfg)
        block = design.X[:, idx]
        for i, k in enumerate(names):
            dm = _delta_predictions(models[k], idx, block, bd, clean[k])
            ms = _shift(design, clean[k], dm, tol, _uses(models[k], idx), error_clean=err_clean[k])
            shift[i, j] = ms.shift_rmse
            err[i, j] = ms.error_damaged
    report(progress, len(columns), len(columns), "stress test done")
    order = {}
    for i, k in enumerate(names):
        key = np.where(np.isfinite(shift[i]), shift[i], np.inf)
        order[k] = tuple(columns[j] for j in np.argsort(-key, kind="stable"))
    sentences = []
    for i, k in enumerate(names):
        moved = dict(zip(columns, shift[i]))  # column -> RMS shift of this model
        top = [c for c in order[k][:3] if moved[c] != 0.0]
        zero = [c for c in columns if moved[c] == 0.0]
        if not top:
            sentences.append(f"{model_label(k)} does not move whichever column is {_PARTICIPLE[kind]}.")
            continue
        first = top[0]
        txt = f"{model_label(k)} moves most when {first} is {_PARTICIPLE[kind]} ({sentence_number(moved[first])} RMS)"
        if len(top) > 1:
            txt += ", then " + join_words(f"{c} ({sentence_number(moved[c])})" for c in top[1:])
        if zero:
            txt += f"; it does not move at all for {len(zero)} column{'s' if len(zero) != 1 else ''} it does not use"
        sentences.append(txt + ".")
    return ColumnRanking(columns=columns, models=names, kind=kind, strength=resolved, seed=seed,
                         shift_rmse=shift, error_damaged=err, error_clean=err_clean, order=order,
                         sentences=tuple(sentences))


#: Bytes of one block of damaged differences the closed-form ranking forms at once: small enough
#: to stay in cache between forming it and summing it, large enough that numpy's per-call cost
#: is negligible.
CLOSED_FORM_BYTES = 2 << 20


def _closed_form_columns(design, columns) -> dict:
    """Source column -> its design column, for the columns damaged alone (one design column,
    no derived columns following it): their figures have a closed form.  None for a yes/no
    outcome, whose probabilities move through the logistic curve rather than linearly."""
    if getattr(design, "outcome", "numeric") == "binary":
        return {}
    out = {}
    for col in columns:
        own = _own_columns(design, col)
        if len(own) == 1 and not _followers(design, col):
            out[col] = own[0]
    return out


def _clean_predictions(design, models: dict) -> dict:
    """Each model's predictions on the clean rows, the linear ones from one product with the design.

    Only the columns some model uses enter the product (as in ``LinearModel.predict``), so one
    pass over the rows serves every model rather than one pass each.
    """
    names = [k for k, m in models.items() if getattr(m, "outcome", "numeric") != "binary"]
    out = {k: m.predict(design.X) for k, m in models.items() if k not in names}
    if not names:
        return out
    pairs = [models[k].design_coefficients() for k in names]
    C = np.column_stack([c for _, c in pairs])
    used = np.flatnonzero(np.any(C != 0.0, axis=1))
    X = design.X
    if used.size == X.shape[1]:
        P = X @ C
    elif used.size:
        P = X[:, used] @ C[used]
    else:
        P = np.zeros((X.shape[0], len(names)))
    for t, (k, (b0, _)) in enumerate(zip(names, pairs)):
        out[k] = P[:, t] + b0
    return out


def _rank_closed_form(design, models, names, columns, single, kind, strength, seed, clean, err_clean, shift, err,
                      progress, cancel):
    """The ranking's figures for columns damaged alone, from column sums of the damaged differences.

    Damaging column j moves model k's predictions by ``b_kj · D_j`` with ``D_j`` the
    damaged minus the clean column, so with ``r_k`` the clean residuals and weights w::

        shift_rmse = |b_kj| · √(Σ w D_j² / Σ w)
        error_damaged = √((Σ w r_k² + 2 b_kj Σ w r_k D_j + b_kj² Σ w D_j²) / Σ w)

    The damage is drawn as :func:`damage_block` draws it for one column (the same seed
    for every column), so the figures equal those of damaging each column in turn to
    round-off.  A column whose damage is not finite (an extreme rescale or wild value)
    is left to the column-by-column route.
    """
    w, W = design.weights, design.weights.sum()
    cfg = StressConfig(columns[0], kind, strength=strength, seed=seed)
    resid = np.column_stack([clean[k] - design.y for k in names])  # n × models
    ss_r = (w[:, None] * resid * resid).sum(axis=0)
    position = {c: j for j, c in enumerate(columns)}
    items = list(single.items())
    idx = np.array([j for _, j in items])
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is caught below, per column
        dd, rd = _difference_sums(design.X, w, idx, cfg, w[:, None] * resid, cancel)
    finite = np.isfinite(dd) & np.all(np.isfinite(rd), axis=0)
    coef = [models[k].design_coefficients()[1] for k in names]
    for t, (col, j) in enumerate(items):
        check(cancel)
        report(progress, t, len(columns), f"stress test: {kind} {col}")
        if not finite[t]:
            single.pop(col)  # the column-by-column route handles overflow as it always has
            continue
        for i, k in enumerate(names):
            b = coef[i][j]
            if b == 0.0:
                shift[i, position[col]] = 0.0
                err[i, position[col]] = err_clean[k]
                continue
            shift[i, position[col]] = abs(b) * np.sqrt(dd[t] / W)
            e2 = (ss_r[i] + 2.0 * b * rd[i, t] + b * b * dd[t]) / W
            err[i, position[col]] = np.sqrt(max(e2, 0.0))
    return shift, err


def _difference_sums(X, w, idx, config: StressConfig, wr, cancel=None):
    """``Σ w D²`` per column and ``Σ w r D`` per model and column, for ``D`` the damaged minus the
    clean values of design columns ``idx`` under ``config`` and ``wr`` (n × models) the weighted
    clean residuals.

    The draws are :func:`_damaged`'s for a single column, one per row and shared by every column, so
    each column is damaged exactly as it would be alone.  ``D`` is formed only on the rows the damage
    touches, a column at a time when the design is stored column by column and a block of rows at a
    time otherwise (a row gathered from a column-major design touches every column's memory); noise
    needs no ``D`` at all (``D_j`` is ``strength · sd_j · z``).  No copy of the design is made.
    """
    n, k = X.shape[0], idx.size
    strength = config.resolved_strength()
    rng = np.random.default_rng(config.seed)
    kind = config.kind
    fill = None if config.fill is None else float(config.fill)
    whole = k == X.shape[1] and np.array_equal(idx, np.arange(k))
    step = max(256, CLOSED_FORM_BYTES // (8 * max(k, 1)))

    def cols(rows):
        return X[rows] if whole else X[rows][:, idx]

    def moments(sd: bool):
        """Weighted mean (and SD) of each damaged column over every row, as ``_damaged`` takes them."""
        W = w.sum()
        total = np.zeros(k)
        for a in range(0, n, step):
            total += w[a:a + step] @ cols(slice(a, a + step))
        mean = total / W
        if not sd:
            return mean, None
        var = np.zeros(k)
        for a in range(0, n, step):
            c = cols(slice(a, a + step)) - mean
            c *= c
            var += w[a:a + step] @ c
        return mean, np.sqrt(var / W)

    def some_rows(share):
        m = int(round(share * n))
        if m >= n:
            return None  # every row
        return np.sort(rng.choice(n, size=m, replace=False))

    if kind == "noise":
        _, sd = moments(sd=True)
        z = rng.standard_normal(n)
        scale = strength * sd
        return scale * scale * (w @ (z * z)), np.outer(wr.T @ z, scale)
    rows = source = value = mean = sd = sign = None
    if kind == "shuffle":
        rows = some_rows(strength)
        perm = rng.permutation(n if rows is None else rows.size)
        source = perm if rows is None else rows[perm]
    elif kind in ("constant", "missing"):
        if kind == "missing":
            rows = some_rows(strength)
        value = moments(sd=False)[0] if fill is None else np.full(k, fill)
    elif kind == "wild":
        mean, sd = moments(sd=True)
        rows = some_rows(strength)
        sign = rng.choice((-1.0, 1.0), size=(n if rows is None else rows.size, 1))[:, 0]
    m = n if rows is None else rows.size

    def difference(get, ps, t):
        """Damaged minus clean values at positions ``ps`` of the damaged rows, columns ``t``
        (``get(rows)`` reads the clean values); and the design rows they are."""
        at = ps if rows is None else rows[ps]
        clean = get(at)
        if kind == "shuffle":
            D = get(source[ps])
        elif kind == "rescale":
            D = clean * strength
            if fill is not None:
                D += fill
        elif kind == "wild":
            D = mean[t] + (sign[ps] if clean.ndim == 1 else sign[ps, None]) * WILD_SDS * sd[t]
        else:
            D = np.broadcast_to(value[t], clean.shape).copy()
        D -= clean
        return D, at

    dd = np.zeros(k)
    rd = np.zeros((wr.shape[1], k))
    if X.strides[0] < X.strides[1]:  # column-major: each column's rows lie together
        w_at, wr_at = (w, wr) if rows is None else (w[rows], wr[rows])
        for t, j in enumerate(idx):
            check(cancel)
            D, _ = difference(X[:, j].__getitem__, slice(None), t)
            rd[:, t] = wr_at.T @ D
            dd[t] = w_at @ (D * D)
        return dd, rd
    everything = slice(None)
    for a in range(0, m, step):
        check(cancel)
        D, at = difference(cols, slice(a, min(a + step, m)), everything)
        rd += wr[at].T @ D
        D *= D
        dd += w[at] @ D
    return dd, rd


# -- retraining on damaged data -----------------------------------------------------------


def stress_refit(design, settings, alphas: dict, config: StressConfig, relaxations=None) -> StressResult:
    """Retrain every model on damaged data and predict the clean rows.

    Each retrained model's predictions on the clean rows are compared with the
    clean fit's predictions at the same α (``engine.fit_models_at``).
    """
    idx = resolve_column(design, config.column)
    strength = config.resolved_strength()
    tol = default_tolerance(design) if config.tolerance is None else float(config.tolerance)
    clean_models = fit_models_at(design, settings, alphas, relaxations)
    bad_models = fit_models_at(damaged_design(design, config), settings, alphas, relaxations)
    shifts, rows = {}, {}
    for name, m in clean_models.items():
        if name not in bad_models:
            continue
        clean = m.predict(design.X)
        moved = bad_models[name].predict(design.X)
        rows[name] = moved - clean
        shifts[name] = _shift(design, clean, moved, tol, _uses(m, idx) or _uses(bad_models[name], idx))
    names = tuple(shifts)
    sentences = _stress_sentences(design, config, strength, tol, names, shifts, refit=True)
    return StressResult(config=config, column=config.column, columns=tuple(design.columns[j] for j in idx),
                        kind=config.kind, strength=strength, tolerance=tol, models=names, shifts=shifts,
                        row_shift=rows, refit=True, target=design.target, sentences=sentences)


# -- the CLI command ----------------------------------------------------------------------


def stress_command(design, settings, column: Optional[str], all_columns: bool, kind: str,
                   strength: Optional[float] = None, seed: int = 0, tolerance: Optional[float] = None,
                   progress=None) -> dict:
    """Fit every model, then stress one column (or rank all of them).

    Returns
    -------
    dict
        ``{"json": dict, "result": StressResult or ColumnRanking}`` for ``regbench stress``
        (its text: :func:`regbench.sentences.stress_text` / :func:`~regbench.sentences.ranking_text`).
    """
    # Check the request before the fit, so a typo fails fast.
    _check_request(design, column, all_columns, kind, strength, seed, tolerance)
    results = fit_all(design, settings, progress=progress)
    return stress_on_models(design, results.models(), column, all_columns, kind, strength, seed, tolerance,
                            progress)


def _check_request(design, column, all_columns: bool, kind: str, strength, seed: int, tolerance) -> None:
    """One line for a stress request that names no column, both routes, an unknown column, kind or strength."""
    if all_columns and column:
        raise DataError("give either --column or --all-columns, not both")
    if not all_columns and not column:
        sources = ", ".join(dict.fromkeys(design.sources))
        raise DataError(f"--column is required (or --all-columns); predictors are: {sources}")
    if column:
        resolve_column(design, column)
    StressConfig(column or design.sources[0], kind, strength, seed, tolerance).resolved_strength()


def stress_on_models(design, models: dict, column: Optional[str], all_columns: bool, kind: str,
                     strength: Optional[float] = None, seed: int = 0, tolerance: Optional[float] = None,
                     progress=None) -> dict:
    """Stress one column (or rank all of them) for models already fitted (e.g. on every row of a table
    read in batches, with ``design`` its row sample); returns what :func:`stress_command` returns."""
    _check_request(design, column, all_columns, kind, strength, seed, tolerance)
    if all_columns:
        rk = rank_columns(design, models, kind=kind, strength=strength, seed=seed, progress=progress)
        js = {"kind": kind, "strength": rk.strength, "seed": seed, "ranking": rk.to_dict(),
              "sentences": list(rk.sentences)}
        return {"json": js, "result": rk}
    res = run_stress(design, models, StressConfig(column, kind, strength, seed, tolerance))
    js = {
        "column": res.column, "columns": list(res.columns), "kind": res.kind, "strength": res.strength,
        "seed": seed, "tolerance": json_number(res.tolerance),
        "models": {k: res.shifts[k].to_dict() for k in res.models},
        "sentences": list(res.sentences),
    }
    return {"json": js, "result": res}

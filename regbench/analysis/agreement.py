"""Agreement: do the fitted models predict alike?

For every pair of models, on the training rows and on held-out rows, the
difference between their predictions is summarised by its RMS, its largest
absolute value, the correlation of the two prediction vectors and the mean
difference with 95% limits of agreement (mean ± 1.96 · SD of the differences).
Every statistic is weighted by the design's row weights (``design.weights``):
means, SDs, correlations and RMS values use ``w / Σw``; the largest absolute
difference is taken over rows with positive weight.

A difference counts as *tiny* when the pair's RMS difference is below
``TINY_SHARE`` (10%) of the smaller of the two models' own errors (weighted
RMSE against the target) on the same rows.  It counts as *small* below
``SMALL_SHARE`` (50%).  Both thresholds are our own choice, stated in every
sentence that relies on them.

For a yes/no outcome the predictions are probabilities, so the same statistics
compare probabilities and each model's own error is its root Brier score (the
weighted RMS of p − y).  The pairs are compared on the log-odds scale too
(``log_odds_pairs``), beside each model's weighted log-loss (``log_loss``):
two models can give nearly the same probabilities in the middle and still
differ by a lot in log-odds where the probabilities are near 0 or 1.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Optional, Tuple

import numpy as np

from regbench.errors import DataError
from regbench.formatting import sentence_number
from regbench.models.results import Result, model_label
from regbench.sentences import gap_words, miss_words, own_error_words

#: Pair RMS difference below this share of the smaller own error: "practically the same predictions".
TINY_SHARE = 0.10
#: Below this share: "close"; above it the choice between the two models matters.
SMALL_SHARE = 0.50
#: z for the 95% limits of agreement.
LOA_Z = 1.96

SPLITS = ("training", "held_out")


# -- weighted statistics (shared by the other analyses) -----------------------------------


# Element-wise products with pairwise summation rather than BLAS dot: as accurate or more,
# and measured several times faster for long vectors on a busy 2-core machine, where
# threaded BLAS level-1 calls contend for the cores.


def weighted_mean(v: np.ndarray, w: np.ndarray) -> float:
    """Σ w v / Σ w."""
    return float((w * v).sum() / w.sum())


def weighted_sd(v: np.ndarray, w: np.ndarray) -> float:
    """Weighted population SD: sqrt(Σ w (v − mean)² / Σ w)."""
    m = weighted_mean(v, w)
    return float(np.sqrt((w * (v - m) ** 2).sum() / w.sum()))


def weighted_rms(v: np.ndarray, w: np.ndarray) -> float:
    """sqrt(Σ w v² / Σ w)."""
    return float(np.sqrt((w * v * v).sum() / w.sum()))


def weighted_corr(a: np.ndarray, b: np.ndarray, w: np.ndarray) -> float:
    """Weighted Pearson correlation; NaN when either vector is constant."""
    wn = w / w.sum()
    da = a - (wn * a).sum()
    db = b - (wn * b).sum()
    saa = (wn * da * da).sum()
    sbb = (wn * db * db).sum()
    if not (saa > 0 and sbb > 0):
        return float("nan")
    return float(np.clip((wn * da * db).sum() / np.sqrt(saa * sbb), -1.0, 1.0))


def in_sentence(label: str) -> str:
    """A model label inside a sentence: 'Lasso' -> 'lasso', 'OLS' stays."""
    if label[:3].isupper():
        return label
    return label[:1].lower() + label[1:]


def json_number(x):
    """A float for JSON: non-finite values become None."""
    x = float(x)
    return x if np.isfinite(x) else None


# -- results ------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PairAgreement(Result):
    """How closely two models' predictions agree on one split ('training' or 'held_out').

    ``rmse``, ``mean_diff`` and the limits are of ``a − b``; all weighted.
    """

    a: str
    b: str
    split: str
    rmse: float
    max_abs: float
    corr: float
    mean_diff: float
    loa_low: float
    loa_high: float

    def to_dict(self) -> dict:
        return {
            "a": self.a, "b": self.b, "split": self.split,
            **{k: json_number(getattr(self, k)) for k in
               ("rmse", "max_abs", "corr", "mean_diff", "loa_low", "loa_high")},
        }


@dataclass(frozen=True, eq=False)
class Agreement(Result):
    """Agreement between every pair of models.

    Attributes
    ----------
    models : tuple of str
        Model names, in the order given.
    pairs : tuple of PairAgreement
        For each pair (in model order) the training split, then the held-out split
        when held-out predictions were given.
    own_error : dict
        name -> {'training': weighted RMSE vs target, 'held_out': same or NaN}.
    target : str
    tiny_share : float
        The threshold used to call a difference tiny (share of the smaller own error).
    sentences : tuple of str
    """

    models: tuple
    pairs: tuple
    own_error: dict
    target: str
    tiny_share: float
    sentences: tuple
    #: 'value' (a numeric target) or 'probability' (a yes/no outcome: own_error is the root Brier score).
    scale: str = "value"
    #: Yes/no outcome: the same pairs compared on the log-odds scale.
    log_odds_pairs: Tuple[PairAgreement, ...] = ()
    #: Yes/no outcome: name -> {'training': weighted log-loss, 'held_out': same or NaN}.
    log_loss: Dict[str, Dict[str, float]] = field(default_factory=dict)

    def pair(self, a: str, b: str, split: str = "held_out") -> PairAgreement:
        for p in self.pairs:
            if p.split == split and {p.a, p.b} == {a, b}:
                return p
        raise KeyError(f"no agreement for {a} and {b} on {split} rows")

    def to_dict(self) -> dict:
        return {
            "models": list(self.models),
            "target": self.target,
            "tiny_share": self.tiny_share,
            "pairs": [p.to_dict() for p in self.pairs],
            "own_error": {k: {s: json_number(v) for s, v in d.items()} for k, d in self.own_error.items()},
            "sentences": list(self.sentences),
        } | ({} if self.scale == "value" else {
            "scale": self.scale,
            "log_odds_pairs": [p.to_dict() for p in self.log_odds_pairs],
            "log_loss": {k: {s: json_number(v) for s, v in d.items()} for k, d in self.log_loss.items()},
        })


def _all_pairs(names, train, held, w) -> tuple:
    """Every pair of models compared on training rows, and on held-out rows where both have them."""
    pairs = []
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            pairs.append(pair_agreement(train[a], train[b], w, a, b, "training"))
            if a in held and b in held:
                pairs.append(pair_agreement(held[a], held[b], w, a, b, "held_out"))
    return tuple(pairs)


def pair_agreement(pa: np.ndarray, pb: np.ndarray, w: np.ndarray, a: str, b: str, split: str) -> PairAgreement:
    """Weighted agreement statistics of two prediction vectors."""
    d = pa - pb
    mean = weighted_mean(d, w)
    sd = weighted_sd(d, w)
    pos = w > 0
    return PairAgreement(
        a=a, b=b, split=split,
        rmse=weighted_rms(d, w),
        max_abs=float(np.max(np.abs(d[pos]))) if pos.any() else float("nan"),
        corr=weighted_corr(pa, pb, w),
        mean_diff=mean,
        loa_low=mean - LOA_Z * sd,
        loa_high=mean + LOA_Z * sd,
    )


def compare_models(design, models: dict, heldout: Optional[dict] = None, units: Optional[str] = None,
                   tiny_share: float = TINY_SHARE) -> Agreement:
    """Compare every pair of fitted models on training rows and on held-out rows.

    Parameters
    ----------
    design : Design
        The rows the models were fitted on; ``design.weights`` weight every statistic.
    models : dict of str -> LinearModel
        In display order.
    heldout : dict of str -> ndarray (n,), optional
        Each row's prediction by a model of the same family fitted without that
        row's fold (``engine.heldout_predictions``).  Models missing here get no
        held-out comparison.
    units : str, optional
        Units of the target for the sentences; omitted when None.
    tiny_share : float
        A pair RMS difference below this share of the smaller own error is "tiny".

    Returns
    -------
    Agreement
    """
    names = tuple(models)
    if len(names) < 1:
        raise DataError("agreement needs at least one fitted model")
    w = np.asarray(design.weights, dtype=np.float64)
    y = design.y
    heldout = dict(heldout or {})
    for name, pred in heldout.items():
        if name in models and np.shape(pred) != (design.n,):
            raise DataError(
                f"held-out predictions for '{name}' have shape {np.shape(pred)}; expected one per design row ({design.n})"
            )
    train = {k: models[k].predict(design.X) for k in names}
    held = {k: np.asarray(heldout[k], dtype=np.float64) for k in names if k in heldout}
    own = {}
    for k in names:
        own[k] = {
            "training": weighted_rms(train[k] - y, w),
            "held_out": weighted_rms(held[k] - y, w) if k in held else float("nan"),
        }
    pairs = _all_pairs(names, train, held, w)
    if getattr(design, "outcome", "numeric") == "binary":
        return _probability_agreement(design, names, pairs, own, train, held, tiny_share)
    sentences = _sentences(design, names, pairs, own, units, tiny_share)
    return Agreement(models=names, pairs=pairs, own_error=own, target=design.target,
                     tiny_share=float(tiny_share), sentences=sentences)


#: Probabilities are clipped this far from 0 and 1 before taking log-odds (a fitted probability
#: is never exactly 0 or 1 unless it underflowed).
_P_CLIP = 1e-15


def _log_odds(p: np.ndarray) -> np.ndarray:
    p = np.clip(p, _P_CLIP, 1.0 - _P_CLIP)
    return np.log(p) - np.log1p(-p)


def _log_loss(p: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    """Weighted mean log-loss of probabilities ``p`` for outcomes ``y`` (0/1, or a share of yes)."""
    p = np.clip(p, _P_CLIP, 1.0 - _P_CLIP)
    return weighted_mean(-(y * np.log(p) + (1.0 - y) * np.log1p(-p)), w)


def _probability_agreement(design, names, pairs, own, train, held, tiny_share) -> Agreement:
    """A yes/no outcome's agreement: probabilities against the root Brier score, log-odds beside log-loss."""
    w, y = np.asarray(design.weights, dtype=np.float64), design.y
    lo_train = {k: _log_odds(train[k]) for k in names}
    lo_held = {k: _log_odds(held[k]) for k in held}
    loss = {k: {"training": _log_loss(train[k], y, w),
                "held_out": _log_loss(held[k], y, w) if k in held else float("nan")} for k in names}
    lo_pairs = _all_pairs(names, lo_train, lo_held, w)
    sentences = _sentences(design, names, pairs, own, None, tiny_share)
    sentences += _log_odds_sentences(design, lo_pairs, loss)
    return Agreement(models=names, pairs=pairs, own_error=own, target=design.target, tiny_share=float(tiny_share),
                     sentences=sentences, scale="probability", log_odds_pairs=lo_pairs, log_loss=loss)


def _log_odds_sentences(design, lo_pairs, loss) -> tuple:
    """One sentence: the pair furthest apart on the log-odds scale, beside the two models' log-loss."""
    use = [p for p in lo_pairs if p.split == "held_out"] or [p for p in lo_pairs if p.split == "training"]
    if not use:
        return ()
    p = max(use, key=lambda q: q.rmse if np.isfinite(q.rmse) else -1.0)
    la, lb = model_label(p.a), model_label(p.b)
    la_loss, lb_loss = loss[p.a][p.split], loss[p.b][p.split]
    gap = abs(la_loss - lb_loss) / min(la_loss, lb_loss) if min(la_loss, lb_loss) > 0 else float("nan")
    return (f"On the log-odds scale the two models furthest apart are {in_sentence(la)} and {in_sentence(lb)}: "
            f"{sentence_number(p.rmse)} RMS on {_rows_words(design, p.split)} (largest single gap "
            f"{sentence_number(p.max_abs)}), while their log-loss is {sentence_number(la_loss)} and "
            f"{sentence_number(lb_loss)} ({gap:.0%} apart); a log-odds gap matters most where the probabilities "
            "are near 0 or 1, which the probability scale hides.",)


def _rows_words(design, split: str) -> str:
    if split == "training":
        return "the training rows"
    if design.groups_column:
        g = design.groups_column
        return f"held-out {g}" if g.lower().rstrip("s").endswith("group") else f"held-out {g} groups"
    return "held-out rows"


def _sentences(design, names, pairs, own, units, tiny_share) -> tuple:
    binary = getattr(design, "outcome", "numeric") == "binary"
    t = design.target
    out = []
    if len(names) < 2:
        k = names[0]
        return (f"Only {model_label(k)} was fitted; {miss_words(t, 'it', [own[k]['training']], units, binary)} "
                "on the training rows.",)
    held_pairs = [p for p in pairs if p.split == "held_out"]
    use = held_pairs or [p for p in pairs if p.split == "training"]
    split = use[0].split
    smaller_words = own_error_words(binary)
    verdicts = []
    for p in use:
        ea, eb = own[p.a][split], own[p.b][split]
        smaller = min(ea, eb)
        ratio = p.rmse / smaller if smaller > 0 else float("inf")
        verdicts.append(ratio)
        la, lb = model_label(p.a), model_label(p.b)
        if np.isclose(ea, eb, rtol=0.05):
            miss = miss_words(t, "each", [smaller], units, binary)
        else:
            miss = miss_words(t, "they", [ea, eb], units, binary)
        if p.rmse == 0.0:
            out.append(f"{la} and {in_sentence(lb)} predict exactly the same on {_rows_words(design, split)} "
                       f"({miss_words(t, 'both', [smaller], units, binary)}).")
            verdicts[-1] = 0.0
            continue
        head = (f"{la} and {in_sentence(lb)} differ by {gap_words(p.rmse, units, binary)} on "
                f"{_rows_words(design, split)} while {miss}")
        gap = gap_words(p.max_abs, units, binary, rms=False)
        if ratio < tiny_share:
            tail = (f": either gives practically the same predictions (the difference is under "
                    f"{tiny_share:.0%} of {smaller_words}).")
        elif ratio < SMALL_SHARE:
            tail = (f": they predict alike, though the difference is {ratio:.0%} of {smaller_words} "
                    f"(largest single gap {gap}).")
        else:
            tail = (f": the difference is {ratio:.0%} of {smaller_words}, so choosing between them "
                    f"changes the predictions (largest single gap {gap}).")
        out.append(head + tail)
    if len(use) > 1:
        n_tiny = sum(r < tiny_share for r in verdicts)
        if n_tiny == len(use):
            out.insert(0, f"All {len(names)} models give practically the same predictions of {design.target} on "
                          f"{_rows_words(design, split)}: every pair differs by less than {tiny_share:.0%} of its own error.")
        elif n_tiny == 0 and all(r >= SMALL_SHARE for r in verdicts):
            out.insert(0, f"No two models predict {design.target} alike on {_rows_words(design, split)}.")
    if not held_pairs:
        out.append("No held-out predictions were given, so agreement is judged on the training rows only; "
                   "judge models on held-out rows before relying on them.")
    return tuple(out)

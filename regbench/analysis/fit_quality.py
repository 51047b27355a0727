"""Fit quality: does any of the models fit? Observed against predicted, residuals, error per group.

The other analyses compare models with each other; this one compares each model with
the target, on the training rows and on held-out rows (each row predicted by a model
of the same family fitted without that row's fold — without its whole group when the
folds are grouped).  Every figure is weighted by the design's row weights, like the
rest of the product: RMSE = sqrt(Σ w r² / Σ w), R² = 1 − Σ w r² / Σ w (y − ȳ_w)².

The window plots observed against predicted and residuals against predicted or any
column from :meth:`FitQuality.residuals`; the numbers and the sentences come from here,
so the command line and the report give the same ones.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

import numpy as np

from regbench.analysis.agreement import in_sentence, json_number
from regbench.formatting import natural_key, number_text
from regbench.models.results import model_label

SPLITS = ("training", "held_out")


@dataclass(frozen=True)
class ModelFit:
    """How one model fits on one split."""

    model: str
    split: str
    rmse: float
    mae: float
    r_squared: float
    mean_residual: float

    def to_dict(self) -> dict:
        return {"model": self.model, "split": self.split,
                **{k: json_number(getattr(self, k)) for k in ("rmse", "mae", "r_squared", "mean_residual")}}


@dataclass(frozen=True)
class GroupError:
    """One model's held-out error in one group (or training error when nothing is held out)."""

    model: str
    group: str
    rows: int
    rmse: float
    mean_residual: float

    def to_dict(self) -> dict:
        return {"model": self.model, "group": self.group, "rows": self.rows,
                "rmse": json_number(self.rmse), "mean_residual": json_number(self.mean_residual)}


@dataclass(frozen=True)
class FitQuality:
    """Each model against the target.

    Attributes
    ----------
    target : str
    models : tuple of str
    fits : tuple of ModelFit
        Per model the training split, then the held-out split when held-out
        predictions were given.
    groups : tuple of GroupError
        Per model and group, in natural group order (2 before 10); empty without a group
        column.  Held-out error when held-out predictions were given, else training.
    group_split : str
        Which split ``groups`` describes.
    predicted : dict
        (model, split) -> predictions per design row.
    observed : ndarray
        The target per design row.
    sentences : tuple of str
    """

    target: str
    models: tuple
    fits: tuple
    groups: tuple
    group_split: str
    predicted: dict
    observed: np.ndarray
    sentences: tuple

    def fit(self, model: str, split: str) -> Optional[ModelFit]:
        for f in self.fits:
            if f.model == model and f.split == split:
                return f
        return None

    def residuals(self, model: str, split: str = "training") -> np.ndarray:
        """Observed minus predicted, per design row."""
        return self.observed - self.predicted[(model, split)]

    def to_dict(self) -> dict:
        return {"target": self.target, "fits": [f.to_dict() for f in self.fits],
                "groups": [g.to_dict() for g in self.groups], "group_split": self.group_split,
                "sentences": list(self.sentences)}


def _stats(y, p, w):
    r = y - p
    W = w.sum()
    ybar = (w * y).sum() / W
    ss_res = (w * r * r).sum()
    ss_tot = (w * (y - ybar) ** 2).sum()
    return (float(np.sqrt(ss_res / W)), float((w * np.abs(r)).sum() / W),
            float(1.0 - ss_res / ss_tot) if ss_tot > 0 else float("nan"), float((w * r).sum() / W))


def fit_quality(design, models: dict, heldout: Optional[dict] = None) -> FitQuality:
    """Fit quality of each model on ``design``.

    Parameters
    ----------
    design : Design
    models : dict of name -> LinearModel
    heldout : dict of name -> ndarray (n,), optional
        Held-out predictions (see :func:`regbench.models.engine.heldout_predictions`).

    Returns
    -------
    FitQuality
    """
    heldout = heldout or {}
    y, w = design.y, design.weights
    fits, predicted = [], {}
    for name, m in models.items():
        for split, pred in (("training", m.predict(design.X)), ("held_out", heldout.get(name))):
            if pred is None:
                continue
            pred = np.asarray(pred, dtype=np.float64)
            predicted[(name, split)] = pred
            fits.append(ModelFit(name, split, *_stats(y, pred, w)))
    group_split = "held_out" if heldout else "training"
    groups = []
    if design.groups is not None:
        order = sorted(range(len(design.group_labels)), key=lambda k: natural_key(design.group_labels[k]))
        for name in models:
            pred = predicted.get((name, group_split))
            if pred is None:
                continue
            for k in order:
                rows = design.groups == k
                wk = w[rows]
                if not wk.sum() > 0:
                    continue
                r = y[rows] - pred[rows]
                groups.append(GroupError(name, str(design.group_labels[k]), int(rows.sum()),
                                         float(np.sqrt((wk * r * r).sum() / wk.sum())),
                                         float((wk * r).sum() / wk.sum())))
    result = FitQuality(target=design.target, models=tuple(models), fits=tuple(fits), groups=tuple(groups),
                        group_split=group_split, predicted=predicted, observed=y.copy(), sentences=())
    return FitQuality(**{**result.__dict__, "sentences": tuple(_sentences(result, design))})


def _sentences(q: FitQuality, design) -> list:
    best = _best(q)
    if best is None:
        return []
    worst = group_sentence(q, best.model, design)
    return _overall(q, design, best) + ([worst] if worst else [])


def sentences_for_model(q: FitQuality, design, model: str) -> list:
    """The overall sentences, then the per-group sentence about ``model`` (the model a view shows).

    ``FitQuality.sentences`` speak of the best model; a view that shows another model's
    groups takes this, so its sentence names the model beside it.
    """
    best = _best(q)
    if best is None:
        return []
    worst = group_sentence(q, model, design)
    return _overall(q, design, best) + ([worst] if worst else [])


def _split(q: FitQuality) -> str:
    return "held_out" if any(f.split == "held_out" for f in q.fits) else "training"


def _best(q: FitQuality):
    """The model with the highest R² on the held-out rows (the training rows without folds)."""
    split = _split(q)
    ranked = sorted((f for f in q.fits if f.split == split and np.isfinite(f.r_squared)),
                    key=lambda f: -f.r_squared)
    return ranked[0] if ranked else None


def _overall(q: FitQuality, design, best) -> list:
    """How well the best model fits and how far the worst lags; a held-out error far above the training one."""
    split = _split(q)
    where = ("on held-out " + ("groups" if design.groups is not None else "rows")) if split == "held_out" \
        else "on the rows it was fitted to"
    ranked = sorted((f for f in q.fits if f.split == split and np.isfinite(f.r_squared)),
                    key=lambda f: -f.r_squared)
    if getattr(design, "outcome", "numeric") == "binary":
        # On a 0/1 outcome the mean squared error of the probabilities is the Brier score and
        # R² is its skill: the share of the error of predicting the observed share for every row
        # that the model removes.
        return [f"{model_label(best.model)}'s probabilities have the lowest Brier score {where} "
                f"({number_text(best.rmse ** 2, 3)}, {number_text(100 * best.r_squared, 3)} % below predicting the "
                f"observed share of {q.target} for every row)"
                + (f"; {in_sentence(model_label(ranked[-1].model))} {number_text(ranked[-1].rmse ** 2, 3)}."
                   if len(ranked) > 1 else ".")]
    out = [f"{model_label(best.model)} explains {number_text(100 * best.r_squared, 3)} % of the variation in "
           f"{q.target} {where} (RMSE {number_text(best.rmse, 3)})"
           + (f"; {in_sentence(model_label(ranked[-1].model))} {number_text(100 * ranked[-1].r_squared, 3)} %."
              if len(ranked) > 1 else ".")]
    if split == "held_out":
        train = q.fit(best.model, "training")
        if train is not None and train.rmse > 0 and best.rmse > 1.5 * train.rmse:
            out.append(f"Its held-out error is {number_text(best.rmse / train.rmse, 2)}× its training error: "
                       "judge it on the held-out figure, not on the fit to its own rows.")
    return out


def group_sentence(q: FitQuality, model: str, design) -> Optional[str]:
    """The group where ``model``'s error stands out (over 1.5× the median group's), naming the model; else None."""
    if getattr(design, "outcome", "numeric") == "binary":
        return None  # the probabilities' per-group error is in the table; no sentence (as before)
    mine = [g for g in q.groups if g.model == model]
    if len(mine) < 2:
        return None
    worst = max(mine, key=lambda g: g.rmse)
    typical = float(np.median([g.rmse for g in mine]))
    if not (typical > 0 and worst.rmse > 1.5 * typical):
        return None
    return (f"{model_label(model)}'s largest error is in {design.groups_column} {worst.group} "
            f"(RMSE {number_text(worst.rmse, 3)}, {number_text(worst.rmse / typical, 2)}× the typical "
            "group): look at what is different there before trusting the model on such groups.")

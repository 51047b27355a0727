"""How well yes/no probabilities fit the outcomes: calibration, discrimination and thresholds.

For each model, on training rows and on held-out rows (each row predicted by a
model fitted without its fold; with groups, without its group):

* Calibration.  A reliability curve by isotonic regression of the outcome on
  the predicted probability (the CORP approach: Dimitriadis, Gneiting & Jordan
  2021, PNAS 118, e2016191118); the calibration intercept (the log-odds shift
  that makes the mean probability match the observed share, slope held at 1)
  and the calibration slope (logistic regression of the outcome on the
  predicted log-odds), as Van Calster et al. 2019 (BMC Medicine 17, 230)
  describe them; the Brier score and its CORP split
  ``Brier = miscalibration − discrimination + uncertainty``, where the
  isotonic recalibration gives the first two and ȳ(1−ȳ) the third.
* Discrimination.  The ROC curve and its area (AUC; tied probabilities count
  half), and a threshold table: for each threshold, sensitivity, specificity
  and the share of rows flagged (probability at or above it).

Nothing here recommends a threshold: the table shows the trade-off and the
person who acts on the score records the threshold they chose.  Nothing
rebalances the classes: reweighting "yes" and "no" distorts the probabilities
without improving discrimination (van den Goorbergh et al. 2022, JAMIA 29,
1525-1534); choosing a threshold is the honest way to flag more or fewer rows.

Rows of yes/no counts (``y`` a share, weight the row's count) enter as two
weighted parts, a "yes" part and a "no" part, so every number equals that of
the expanded table.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Optional, Tuple

import numpy as np

from regbench.analysis.agreement import in_sentence, json_number as j
from regbench.formatting import sentence_number as fmt
from regbench.models.results import Result, model_label

#: Thresholds of the trade-off table (the recorded threshold is added when set).
THRESHOLDS = tuple(np.round(np.arange(0.05, 0.96, 0.05), 2))
#: At most this many points of a ROC or reliability curve are stored (the AUC uses them all).
CURVE_POINTS = 400
EPS_P = 1e-12


@dataclass(frozen=True, eq=False)
class Calibration(Result):
    """Calibration of one model's probabilities on one set of rows."""

    intercept: float
    slope: float
    brier: float
    miscalibration: float
    discrimination: float
    uncertainty: float
    log_loss: float
    mean_probability: float
    observed_share: float
    curve_p: np.ndarray  # predicted probability (ascending)
    curve_observed: np.ndarray  # isotonic estimate of the share of "yes" at that probability

    def to_dict(self) -> dict:
        return {"intercept": j(self.intercept), "slope": j(self.slope), "brier": j(self.brier),
                "miscalibration": j(self.miscalibration), "discrimination": j(self.discrimination),
                "uncertainty": j(self.uncertainty), "log_loss": j(self.log_loss),
                "mean_probability": j(self.mean_probability), "observed_share": j(self.observed_share),
                "curve": {"predicted": [j(v) for v in self.curve_p], "observed": [j(v) for v in self.curve_observed]}}


@dataclass(frozen=True, eq=False)
class Discrimination(Result):
    """ROC curve, AUC and the threshold table of one model on one set of rows."""

    auc: float
    roc_fpr: np.ndarray
    roc_tpr: np.ndarray
    thresholds: np.ndarray
    sensitivity: np.ndarray
    specificity: np.ndarray
    flagged: np.ndarray  # weighted share of rows at or above each threshold

    def to_dict(self) -> dict:
        return {"auc": j(self.auc),
                "roc": {"false_positive_rate": [j(v) for v in self.roc_fpr],
                        "true_positive_rate": [j(v) for v in self.roc_tpr]},
                "thresholds": [{"threshold": j(t), "sensitivity": j(a), "specificity": j(b), "flagged": j(c)}
                               for t, a, b, c in zip(self.thresholds, self.sensitivity, self.specificity,
                                                     self.flagged)]}


@dataclass(frozen=True, eq=False)
class Classification(Result):
    """Calibration and discrimination of every model, on training and held-out rows.

    ``calibration[split][model]`` and ``discrimination[split][model]`` with split
    'training' or 'held_out'; ``threshold`` is the one the person recorded (or None).
    """

    models: Tuple[str, ...]
    positive_level: str
    observed_share: float
    threshold: Optional[float]
    calibration: Dict[str, Dict[str, Calibration]]
    discrimination: Dict[str, Dict[str, Discrimination]]
    sentences: Tuple[str, ...] = ()
    splits: Tuple[str, ...] = field(default=("training", "held_out"))

    def to_dict(self) -> dict:
        return {
            "positive_level": self.positive_level, "observed_share": j(self.observed_share),
            "threshold": j(self.threshold) if self.threshold is not None else None,
            "models": {m: {s: {"calibration": self.calibration[s][m].to_dict(),
                               "discrimination": self.discrimination[s][m].to_dict()}
                           for s in self.splits if m in self.calibration.get(s, {})}
                       for m in self.models},
            "sentences": list(self.sentences),
        }


# -- the pieces ------------------------------------------------------------------------------

def parts(p, y, w):
    """Each row as a weighted "yes" part and "no" part: (probability, label 0/1, weight), weight > 0."""
    p, y, w = (np.asarray(a, dtype=float) for a in (p, y, w))
    pp = np.r_[p, p]
    lab = np.r_[np.ones_like(p), np.zeros_like(p)]
    ww = np.r_[w * y, w * (1.0 - y)]
    keep = ww > 0
    return pp[keep], lab[keep], ww[keep]


def _thin(x, y, k=CURVE_POINTS):
    if x.size <= k:
        return x.copy(), y.copy()
    idx = np.unique(np.r_[np.linspace(0, x.size - 1, k).round().astype(int)])
    return x[idx], y[idx]


def reliability_curve(p, label, w):
    """Isotonic (non-decreasing) estimate of P(yes | probability), at each distinct probability.

    Returns (probabilities ascending, recalibrated values, recalibrated value of each input)."""
    from sklearn.isotonic import IsotonicRegression

    iso = IsotonicRegression(y_min=0.0, y_max=1.0, increasing=True, out_of_bounds="clip")
    fitted = iso.fit_transform(p, label, sample_weight=w)
    xs, first = np.unique(p, return_index=True)
    return xs, fitted[first], fitted


def _logit(p):
    p = np.clip(p, EPS_P, 1.0 - EPS_P)
    return np.log(p / (1.0 - p))


def calibration_intercept_slope(p, label, w):
    """(intercept with slope fixed at 1, slope) of the logistic recalibration on the predicted log-odds."""
    lp = _logit(p)
    ybar = float(w @ label) / float(w.sum())
    # Calibration intercept: solve Σ w (y − expit(a + lp)) = 0 by Newton in one dimension.
    a = 0.0
    for _ in range(100):
        q = 0.5 * (1.0 + np.tanh(0.5 * (a + lp)))
        g = float(w @ (label - q))
        h = float(w @ (q * (1.0 - q)))
        if not h > 0:
            break
        step = g / h
        a += float(np.clip(step, -5.0, 5.0))
        if abs(step) < 1e-12:
            break
    # Calibration slope: y ~ b0 + b1·lp by Newton with step halving on the log-likelihood.
    b = np.array([_logit(np.array([ybar]))[0], 1.0])
    Z = np.column_stack([np.ones_like(lp), lp])

    def nll(bb):
        eta = Z @ bb
        return float(w @ (np.logaddexp(0.0, eta) - label * eta))

    f = nll(b)
    for _ in range(100):
        q = 0.5 * (1.0 + np.tanh(0.5 * (Z @ b)))
        g = Z.T @ (w * (label - q))
        H = Z.T @ (Z * (w * q * (1.0 - q))[:, None])
        try:
            d = np.linalg.solve(H, g)
        except np.linalg.LinAlgError:
            break
        t = 1.0
        while t > 1e-8 and nll(b + t * d) > f + 1e-12 * max(abs(f), 1.0):
            t *= 0.5
        b = b + t * d
        f = nll(b)
        if np.max(np.abs(t * d)) < 1e-10:
            break
    return float(a), float(b[1])


def calibration(p, y, w) -> Calibration:
    """Calibration of probabilities ``p`` against outcomes ``y`` (1/0 or a share) with weights ``w``."""
    pp, lab, ww = parts(p, y, w)
    W = float(ww.sum())
    ybar = float(ww @ lab) / W
    xs, curve, recal = reliability_curve(pp, lab, ww)
    brier = float(ww @ (lab - pp) ** 2) / W
    brier_recal = float(ww @ (lab - recal) ** 2) / W
    unc = ybar * (1.0 - ybar)
    q = np.clip(pp, EPS_P, 1.0 - EPS_P)
    ll = float(ww @ -(lab * np.log(q) + (1.0 - lab) * np.log1p(-q))) / W
    icpt, slope = calibration_intercept_slope(pp, lab, ww)
    cx, cy = _thin(xs, curve)
    return Calibration(intercept=icpt, slope=slope, brier=brier, miscalibration=brier - brier_recal,
                       discrimination=unc - brier_recal, uncertainty=unc, log_loss=ll,
                       mean_probability=float(ww @ pp) / W, observed_share=ybar, curve_p=cx, curve_observed=cy)


def roc(p, label, w):
    """(false positive rates, true positive rates, AUC) over every distinct probability, highest first."""
    order = np.argsort(-p, kind="mergesort")
    ps, ls, ws = p[order], label[order], w[order]
    tp = np.cumsum(ws * ls)
    fp = np.cumsum(ws * (1.0 - ls))
    last = np.r_[np.flatnonzero(np.diff(ps) != 0), ps.size - 1]  # end of each run of equal probabilities
    P, N = tp[-1], fp[-1]
    tpr = np.r_[0.0, tp[last] / P] if P > 0 else np.full(last.size + 1, np.nan)
    fpr = np.r_[0.0, fp[last] / N] if N > 0 else np.full(last.size + 1, np.nan)
    auc = float(np.trapezoid(tpr, fpr)) if P > 0 and N > 0 else float("nan")
    return fpr, tpr, auc


def threshold_table(p, label, w, thresholds):
    """Sensitivity, specificity and share flagged (probability ≥ threshold), weighted."""
    t = np.asarray(thresholds, dtype=float)
    flag = p[None, :] >= t[:, None]
    W = w.sum()
    P = float(w @ label)
    N = float(w @ (1.0 - label))
    sens = (flag * (w * label)).sum(axis=1) / P if P > 0 else np.full(t.size, np.nan)
    spec = ((~flag) * (w * (1.0 - label))).sum(axis=1) / N if N > 0 else np.full(t.size, np.nan)
    flagged = (flag * w).sum(axis=1) / W
    return sens, spec, flagged


def discrimination(p, y, w, threshold: Optional[float] = None) -> Discrimination:
    """ROC, AUC and threshold table of probabilities ``p`` against outcomes ``y`` with weights ``w``."""
    pp, lab, ww = parts(p, y, w)
    fpr, tpr, auc = roc(pp, lab, ww)
    ts = sorted(set(float(v) for v in THRESHOLDS) | ({float(threshold)} if threshold is not None else set()))
    sens, spec, flagged = threshold_table(pp, lab, ww, ts)
    fx, fy = _thin(fpr, tpr)
    return Discrimination(auc=auc, roc_fpr=fx, roc_tpr=fy, thresholds=np.asarray(ts), sensitivity=sens,
                          specificity=spec, flagged=flagged)


# -- every model -----------------------------------------------------------------------------

def assess(design, models: dict, heldout: Optional[dict] = None, threshold: Optional[float] = None) -> Classification:
    """Calibration and discrimination of every model, on training rows and on held-out rows.

    Parameters
    ----------
    design : Design
        A yes/no design (``design.outcome == 'binary'``).
    models : dict of name -> LinearModel
        Their ``predict`` gives probabilities.
    heldout : dict of name -> ndarray, optional
        Held-out probabilities (see :func:`regbench.models.engine.heldout_predictions`).
    threshold : float, optional
        The threshold the person recorded; added to each threshold table.
    """
    y, w = design.y, design.weights
    cal, dis = {"training": {}, "held_out": {}}, {"training": {}, "held_out": {}}
    for name, m in models.items():
        p = m.predict(design.X)
        cal["training"][name] = calibration(p, y, w)
        dis["training"][name] = discrimination(p, y, w, threshold)
        if heldout and name in heldout:
            cal["held_out"][name] = calibration(heldout[name], y, w)
            dis["held_out"][name] = discrimination(heldout[name], y, w, threshold)
    share = float(w @ y) / float(w.sum())
    names = tuple(models)
    out = Classification(models=names, positive_level=str(design.levels[1]) if design.levels else "1",
                         observed_share=share, threshold=threshold, calibration=cal, discrimination=dis)
    return Classification(**{**out.__dict__, "sentences": tuple(_sentences(out))})


def _sentences(c: Classification) -> list:
    split = "held_out" if c.calibration["held_out"] else "training"
    where = "on held-out rows" if split == "held_out" else "on the training rows"
    cal, dis = c.calibration[split], c.discrimination[split]
    out = []
    if not c.models:
        return out
    best = max(c.models, key=lambda k: dis[k].auc if np.isfinite(dis[k].auc) else -1.0)
    low = min(c.models, key=lambda k: cal[k].brier)
    out.append(f"{where.capitalize()}, {in_sentence(model_label(best))} separates '{c.positive_level}' from the "
               f"rest best (AUC {fmt(dis[best].auc)}); {in_sentence(model_label(low))} has the lowest Brier score "
               f"({fmt(cal[low].brier)}; predicting the observed share {fmt(c.observed_share)} for every row scores "
               f"{fmt(cal[low].uncertainty)}).")
    off = [k for k in c.models if abs(cal[k].slope - 1.0) > 0.2]
    if off:
        words = ", ".join(f"{model_label(k)} {fmt(cal[k].slope)}" for k in off)
        out.append(f"Calibration slopes far from 1 {where} ({words}): below 1 the probabilities are too extreme, "
                   "above 1 too timid.")
    k0 = c.models[0]
    i = int(np.argmin(np.abs(dis[k0].thresholds - 0.5)))
    out.append(f"With a 0.5 cut, {model_label(k0)} flags {fmt(100 * dis[k0].flagged[i])}% of rows while "
               f"{fmt(100 * c.observed_share)}% are '{c.positive_level}'"
               + (" — for a rare outcome a 0.5 cut flags almost nobody." if c.observed_share < 0.15 else "."))
    out.append("A risk score is not a decision: the person who acts on it chooses the threshold; the table shows "
               "what each threshold flags and misses.")
    return out

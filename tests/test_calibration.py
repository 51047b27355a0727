"""Calibration and discrimination of yes/no probabilities, against scikit-learn and statsmodels.

Sources: scikit-learn ``brier_score_loss``, ``roc_auc_score``, ``roc_curve``, ``calibration_curve``
and ``IsotonicRegression``; statsmodels ``GLM(Binomial)`` for the calibration intercept (an offset
fit) and slope (Van Calster et al. 2019, BMC Medicine); the CORP identity
Brier = miscalibration − discrimination + uncertainty (Dimitriadis, Gneiting & Jordan 2021, PNAS).
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.calibration import assess, calibration, discrimination
from regbench.data import design_from_arrays
from regbench.models.engine import fit_all, heldout_predictions
from regbench.models.results import FitSettings


def _probs(n=500, seed=0, shift=0.0, scale=1.0):
    rng = np.random.default_rng(seed)
    eta = rng.normal(size=n) * 1.5 - 1.0
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    p = 1 / (1 + np.exp(-(scale * eta + shift)))
    w = rng.integers(1, 5, size=n).astype(float)
    return p, y, w


def test_brier_and_auc_match_sklearn_with_weights():
    from sklearn.metrics import brier_score_loss, roc_auc_score, roc_curve

    p, y, w = _probs()
    p = np.round(p, 2)  # ties: the AUC counts them half, as scikit-learn does
    c = calibration(p, y, w)
    d = discrimination(p, y, w)
    assert c.brier == pytest.approx(brier_score_loss(y, p, sample_weight=w), abs=1e-12)
    assert d.auc == pytest.approx(roc_auc_score(y, p, sample_weight=w), abs=1e-12)
    fpr, tpr, _ = roc_curve(y, p, sample_weight=w, drop_intermediate=False)
    np.testing.assert_allclose(d.roc_fpr, fpr, atol=1e-12)
    np.testing.assert_allclose(d.roc_tpr, tpr, atol=1e-12)


def test_reliability_curve_is_isotonic_and_matches_binned_shares():
    from sklearn.calibration import calibration_curve
    from sklearn.isotonic import IsotonicRegression

    rng = np.random.default_rng(1)
    # Five distinct probabilities whose observed shares rise: the isotonic curve is the per-value share.
    levels = np.array([0.1, 0.3, 0.5, 0.7, 0.9])
    p = np.repeat(levels, 400)
    y = (rng.random(p.size) < p).astype(float)
    c = calibration(p, y, np.ones_like(p))
    prob_true, prob_pred = calibration_curve(y, p, n_bins=5, strategy="uniform")
    np.testing.assert_allclose(c.curve_p, prob_pred, atol=1e-12)
    np.testing.assert_allclose(c.curve_observed, prob_true, atol=1e-12)
    # Any probabilities: the curve is scikit-learn's isotonic fit at each distinct value.
    p2, y2, w2 = _probs(300, seed=4)
    iso = IsotonicRegression(y_min=0, y_max=1).fit(p2, y2, sample_weight=w2)
    c2 = calibration(p2, y2, w2)
    np.testing.assert_allclose(c2.curve_observed, iso.predict(c2.curve_p), atol=1e-12)


def test_corp_decomposition_adds_up():
    for shift, scale in [(0.0, 1.0), (0.8, 1.0), (0.0, 2.5), (-0.5, 0.4)]:
        p, y, w = _probs(800, seed=2, shift=shift, scale=scale)
        c = calibration(p, y, w)
        # CORP: Brier = MCB − DSC + UNC exactly, MCB ≥ 0 and DSC ≥ 0 (Dimitriadis et al. 2021).
        assert c.brier == pytest.approx(c.miscalibration - c.discrimination + c.uncertainty, abs=1e-12)
        assert c.miscalibration >= -1e-12 and c.discrimination >= -1e-12
        ybar = (w @ y) / w.sum()
        assert c.uncertainty == pytest.approx(ybar * (1 - ybar), abs=1e-12)


def test_calibration_intercept_and_slope_match_statsmodels():
    import statsmodels.api as sm

    p, y, w = _probs(600, seed=3, shift=0.4, scale=1.8)
    c = calibration(p, y, w)
    lp = np.log(p / (1 - p))
    slope = sm.GLM(y, sm.add_constant(lp), family=sm.families.Binomial(), freq_weights=w).fit(tol=1e-12)
    icpt = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=lp, freq_weights=w).fit(tol=1e-12)
    assert c.slope == pytest.approx(slope.params[1], abs=1e-7)
    assert c.intercept == pytest.approx(icpt.params[0], abs=1e-7)
    # Too extreme probabilities (scale 1.8 over the truth) give a slope below 1.
    assert c.slope < 1.0


def test_threshold_table_and_count_rows_equal_the_expanded_table():
    from sklearn.metrics import confusion_matrix

    rng = np.random.default_rng(5)
    n = 60
    p = rng.random(n)
    total = rng.integers(1, 6, n)
    yes = rng.binomial(total, p)
    share = yes / total
    c = calibration(p, share, total.astype(float))
    d = discrimination(p, share, total.astype(float), threshold=0.33)
    rows = np.repeat(np.arange(n), total)
    yy = np.concatenate([np.r_[np.ones(yes[i]), np.zeros(total[i] - yes[i])] for i in range(n)])
    ce = calibration(p[rows], yy, np.ones(yy.size))
    de = discrimination(p[rows], yy, np.ones(yy.size), threshold=0.33)
    assert c.brier == pytest.approx(ce.brier, abs=1e-12) and d.auc == pytest.approx(de.auc, abs=1e-12)
    assert c.slope == pytest.approx(ce.slope, abs=1e-8)
    np.testing.assert_allclose(d.sensitivity, de.sensitivity, atol=1e-12)
    assert 0.33 in list(d.thresholds)
    # Sensitivity and specificity at 0.33 from scikit-learn's confusion matrix of the expanded rows.
    i = list(d.thresholds).index(0.33)
    tn, fp, fn, tp = confusion_matrix(yy, (p[rows] >= 0.33).astype(int)).ravel()
    assert d.sensitivity[i] == pytest.approx(tp / (tp + fn)) and d.specificity[i] == pytest.approx(tn / (tn + fp))
    assert d.flagged[i] == pytest.approx((tp + fp) / yy.size)


def test_assess_every_model_training_and_held_out():
    rng = np.random.default_rng(8)
    n = 240
    X = rng.normal(size=(n, 4))
    X[:, 3] = X[:, 0] + 0.05 * rng.normal(size=n)
    eta = -1.6 + X[:, 0] - 0.7 * X[:, 1]
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    des = design_from_arrays(X, y, groups=np.arange(n) % 12, outcome="binary")
    res = fit_all(des, FitSettings(n_penalties=10, folds=4))
    models = res.models()
    held = heldout_predictions(des, res, models)
    cl = assess(des, models, held, threshold=0.2)
    assert set(cl.calibration["held_out"]) == set(models) and cl.threshold == 0.2
    for k in models:
        # Training rows: the free intercept makes the mean probability the observed share.
        assert cl.calibration["training"][k].mean_probability == pytest.approx(cl.observed_share, rel=1e-6)
        assert 0.5 < cl.discrimination["held_out"][k].auc <= 1.0
    assert any("threshold" in s for s in cl.sentences)
    d = cl.to_dict()
    assert d["models"]["lasso"]["held_out"]["calibration"]["curve"]["predicted"]

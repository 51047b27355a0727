"""Fit quality against outside references.

References: scikit-learn's ``mean_squared_error``, ``mean_absolute_error`` and
``r2_score`` (with ``sample_weight``) for every figure; statsmodels WLS's R² for
OLS on the rows it was fitted to; the diabetes data that scikit-learn ships
(Efron et al. 2004) as the table.
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.fit_quality import fit_quality
from regbench.data import design_from_arrays
from regbench.formatting import natural_key
from regbench.models.engine import fit_all, heldout_predictions
from regbench.models.results import FitSettings


@pytest.fixture(scope="module")
def diabetes():
    from sklearn.datasets import load_diabetes

    data = load_diabetes()
    rng = np.random.default_rng(11)
    n = data.data.shape[0]
    weights = rng.integers(1, 4, n).astype(float)
    groups = np.array([f"clinic {k}" for k in rng.integers(1, 13, n)])  # 'clinic 2' must sort before 'clinic 10'
    design = design_from_arrays(data.data, data.target, columns=data.feature_names, weights=weights,
                                groups=groups, target="progression")
    results = fit_all(design, FitSettings(folds=4, n_penalties=30, seed=2))
    models = results.models()
    return design, results, models, heldout_predictions(design, results, models)


def test_figures_match_scikit_learn_metrics(diabetes):
    from sklearn.metrics import mean_absolute_error, mean_squared_error, r2_score

    design, _, models, held = diabetes
    q = fit_quality(design, models, held)
    y, w = design.y, design.weights
    for name, m in models.items():
        for split, pred in (("training", m.predict(design.X)), ("held_out", held[name])):
            f = q.fit(name, split)
            assert f.rmse == pytest.approx(np.sqrt(mean_squared_error(y, pred, sample_weight=w)), rel=1e-12)
            assert f.mae == pytest.approx(mean_absolute_error(y, pred, sample_weight=w), rel=1e-12)
            assert f.r_squared == pytest.approx(r2_score(y, pred, sample_weight=w), rel=1e-12)
            np.testing.assert_allclose(q.residuals(name, split), y - pred, rtol=0, atol=1e-9)
    # Held-out rows are predicted by models that never saw them: their error is the larger.
    assert q.fit("ols", "held_out").rmse > q.fit("ols", "training").rmse


def test_ols_training_r_squared_is_statsmodels_wls(diabetes):
    sm = pytest.importorskip("statsmodels.api")
    design, results, models, held = diabetes
    ref = sm.WLS(design.y, sm.add_constant(design.X), weights=design.weights).fit()
    assert fit_quality(design, models, held).fit("ols", "training").r_squared == pytest.approx(ref.rsquared, rel=1e-10)


def test_error_per_group_in_natural_order(diabetes):
    from sklearn.metrics import mean_squared_error

    design, _, models, held = diabetes
    q = fit_quality(design, models, held)
    assert q.group_split == "held_out"
    labels = [g.group for g in q.groups if g.model == "lasso"]
    assert labels == [f"clinic {k}" for k in range(1, 13)]
    for g in q.groups:
        k = design.group_labels.index(g.group)
        rows = design.groups == k
        assert g.rows == int(rows.sum())
        want = np.sqrt(mean_squared_error(design.y[rows], held[g.model][rows], sample_weight=design.weights[rows]))
        assert g.rmse == pytest.approx(want, rel=1e-12)


def test_sentences_name_the_target_and_the_held_out_figure(diabetes):
    design, _, models, held = diabetes
    q = fit_quality(design, models, held)
    assert q.sentences and "progression" in q.sentences[0] and "held-out groups" in q.sentences[0]
    only_training = fit_quality(design, models)
    assert "on the rows it was fitted to" in only_training.sentences[0]
    assert only_training.fit("ridge", "held_out") is None and only_training.group_split == "training"


def test_natural_key_orders_numbers_by_value():
    assert sorted(["10", "2", "1", "house 10", "house 9", "b", "A"], key=natural_key) == \
        ["1", "2", "10", "A", "b", "house 9", "house 10"]

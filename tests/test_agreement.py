"""Agreement between fitted models, checked against direct numpy computations."""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.agreement import TINY_SHARE, compare_models
from regbench.data import design_from_arrays
from regbench.errors import DataError
from regbench.models.results import LinearModel


def lm(name, intercept, coef, columns):
    coef = np.asarray(coef, dtype=float)
    return LinearModel(name=name, columns=tuple(columns), intercept=float(intercept), coef=coef, coef_std=coef.copy())


@pytest.fixture
def case():
    rng = np.random.default_rng(3)
    n = 400
    X = rng.normal(size=(n, 3))
    y = 1.0 + X @ [2.0, -1.0, 0.5] + rng.normal(0, 0.3, n)
    w = rng.uniform(0.2, 3.0, n)
    cols = ("a", "b", "c")
    d = design_from_arrays(X, y, cols, weights=w, target="growth")
    models = {
        "ols": lm("ols", 1.0, [2.0, -1.0, 0.5], cols),
        "ridge": lm("ridge", 1.001, [1.999, -0.999, 0.5], cols),
        "lasso": lm("lasso", 1.2, [1.5, -0.5, 0.0], cols),
    }
    held = {k: m.predict(X) + rng.normal(0, 0.05, n) for k, m in models.items()}
    return d, models, held


def test_pair_numbers_match_direct_numpy(case):
    d, models, held = case
    ag = compare_models(d, models, held)
    w = d.weights
    for split, preds in (("training", {k: m.predict(d.X) for k, m in models.items()}), ("held_out", held)):
        p = ag.pair("ols", "lasso", split)
        diff = preds["ols"] - preds["lasso"]
        # Direct weighted formulas (numpy): average with weights, cov with aweights.
        mean = np.average(diff, weights=w)
        sd = np.sqrt(np.average((diff - mean) ** 2, weights=w))
        assert p.rmse == pytest.approx(np.sqrt(np.average(diff**2, weights=w)), rel=1e-12)
        assert p.max_abs == pytest.approx(np.abs(diff).max(), rel=1e-12)
        assert p.mean_diff == pytest.approx(mean, rel=1e-12)
        assert p.loa_low == pytest.approx(mean - 1.96 * sd, rel=1e-12)
        assert p.loa_high == pytest.approx(mean + 1.96 * sd, rel=1e-12)
        c = np.cov(preds["ols"], preds["lasso"], aweights=w)
        assert p.corr == pytest.approx(c[0, 1] / np.sqrt(c[0, 0] * c[1, 1]), rel=1e-12)
    for k in models:
        assert ag.own_error[k]["training"] == pytest.approx(
            np.sqrt(np.average((models[k].predict(d.X) - d.y) ** 2, weights=w)), rel=1e-12)
        assert ag.own_error[k]["held_out"] == pytest.approx(
            np.sqrt(np.average((held[k] - d.y) ** 2, weights=w)), rel=1e-12)


def test_every_pair_in_model_order_on_both_splits(case):
    d, models, held = case
    ag = compare_models(d, models, held)
    assert ag.models == ("ols", "ridge", "lasso")
    assert [(p.a, p.b, p.split) for p in ag.pairs] == [
        ("ols", "ridge", "training"), ("ols", "ridge", "held_out"),
        ("ols", "lasso", "training"), ("ols", "lasso", "held_out"),
        ("ridge", "lasso", "training"), ("ridge", "lasso", "held_out"),
    ]


def test_sentences_call_near_identical_models_practically_the_same(case):
    d, models, _ = case
    # Held-out predictions equal to training ones: the OLS/ridge gap is tiny against their error.
    held = {k: m.predict(d.X) for k, m in models.items()}
    ag = compare_models(d, models, held)
    p = ag.pair("ols", "ridge")
    assert p.rmse < TINY_SHARE * min(ag.own_error["ols"]["held_out"], ag.own_error["ridge"]["held_out"])
    first = [s for s in ag.sentences if s.startswith("OLS and ridge")]
    assert len(first) == 1 and "practically the same predictions" in first[0] and "growth" in first[0]
    assert "held-out rows" in first[0]
    lasso = [s for s in ag.sentences if s.startswith("OLS and lasso")][0]
    assert "practically the same" not in lasso and "changes the predictions" in lasso


def test_units_and_group_words_in_sentences(case):
    d, models, held = case
    from dataclasses import replace

    d = replace(d, groups=np.arange(d.n) % 4, groups_column="house")
    ag = compare_models(d, models, held, units="kg/m²")
    assert any("kg/m² RMS on held-out house groups" in s for s in ag.sentences)


def test_without_heldout_only_training_and_a_caution(case):
    d, models, _ = case
    ag = compare_models(d, models, None)
    assert all(p.split == "training" for p in ag.pairs)
    assert all(np.isnan(e["held_out"]) for e in ag.own_error.values())
    assert "held-out" in ag.sentences[-1]
    js = ag.to_dict()
    assert js["own_error"]["ols"]["held_out"] is None


def test_constant_predictions_give_undefined_correlation(case):
    d, models, held = case
    models = dict(models, lasso=lm("lasso", 1.0, [0, 0, 0], d.columns))
    ag = compare_models(d, models)
    # A model that uses no column predicts a constant: correlation is undefined (0/0).
    assert np.isnan(ag.pair("ols", "lasso", "training").corr)
    assert ag.to_dict()["pairs"][2]["corr"] is None


def test_bad_heldout_shape_names_model(case):
    d, models, held = case
    held["ridge"] = held["ridge"][:10]
    with pytest.raises(DataError, match="ridge"):
        compare_models(d, models, held)


def test_zero_weight_rows_do_not_count(case):
    d, models, held = case
    from dataclasses import replace

    w = d.weights.copy()
    w[:50] = 0.0
    d0 = replace(d, weights=w)
    ag = compare_models(d0, models, held)
    sub = compare_models(d.subset(np.arange(50, d.n)), models, {k: v[50:] for k, v in held.items()})
    # A zero-weight row adds nothing to a weighted statistic: same as dropping it (definition).
    for p, q in zip(ag.pairs, sub.pairs):
        for f in ("rmse", "max_abs", "corr", "mean_diff", "loa_low", "loa_high"):
            assert getattr(p, f) == pytest.approx(getattr(q, f), rel=1e-10)


def test_with_the_engine_grouped_heldout_rows():
    engine = pytest.importorskip("regbench.models.engine")
    from regbench.models.results import FitSettings

    rng = np.random.default_rng(12)
    G, per = 12, 15
    groups = np.repeat(np.arange(G), per)
    n = G * per
    a = rng.normal(size=n)
    X = np.column_stack([a, a + rng.normal(0, 0.05, n), rng.normal(size=n)])
    y = 1 + a + 0.5 * X[:, 2] + rng.normal(0, 0.1, G)[groups] + rng.normal(0, 0.3, n)
    w = rng.uniform(0.5, 2.0, n)
    d = design_from_arrays(X, y, ("a", "a_twin", "z"), weights=w, groups=groups, target="out")
    res = engine.fit_all(d, FitSettings(folds=4, n_penalties=30))
    models = res.models()
    held = engine.heldout_predictions(d, res, models)
    # Grouped folds: every row of one group is in the same fold.
    assert all(len(set(res.fold_ids[groups == g])) == 1 for g in range(G))
    # OLS held-out predictions equal a weighted least-squares fit on the other folds (numpy lstsq).
    for k in range(4):
        tr, te = res.fold_ids != k, res.fold_ids == k
        A = np.column_stack([np.ones(tr.sum()), X[tr]]) * np.sqrt(w[tr])[:, None]
        beta = np.linalg.lstsq(A, y[tr] * np.sqrt(w[tr]), rcond=None)[0]
        np.testing.assert_allclose(held["ols"][te], beta[0] + X[te] @ beta[1:], rtol=1e-8, atol=1e-10)
    ag = compare_models(d, models, held)
    assert len(ag.pairs) == 2 * 6
    # The group column here is called 'groups': the words must not repeat it.
    assert any("RMS on held-out groups while" in s for s in ag.sentences)
    assert not any("groups groups" in s for s in ag.sentences)


def test_identical_models_even_with_a_perfect_fit():
    X = np.arange(20.0)[:, None]
    d = design_from_arrays(X, 2 * X[:, 0] + 1, ("x",))
    m = lm("ols", 1.0, [2.0], ("x",))
    ag = compare_models(d, {"ols": m, "ridge": lm("ridge", 1.0, [2.0], ("x",))})
    # Zero own error and zero difference: identical, not "the choice matters" (0/0 is not large).
    assert ag.pair("ols", "ridge", "training").rmse == 0.0
    assert "predict exactly the same" in ag.sentences[0]


class _Probabilities:
    """A stand-in for a fitted yes/no model: its predictions are the probabilities given."""

    def __init__(self, p):
        self.p = np.asarray(p, dtype=float)

    def predict(self, X):
        return self.p


def test_yes_no_outcome_sentences_speak_of_brier_scores_and_probabilities():
    rng = np.random.default_rng(11)
    n = 300
    X = rng.normal(size=(n, 2))
    y = (rng.uniform(size=n) < 0.4).astype(float)
    w = rng.uniform(0.5, 2.0, n)
    d = design_from_arrays(X, y, ("a", "b"), weights=w, target="top_grade", outcome="binary")
    pa = np.clip(0.4 + 0.3 * X[:, 0] / 3, 0.01, 0.99)
    pb = np.clip(pa + 0.3 + rng.normal(0, 0.1, n), 0.01, 0.99)  # off by 0.3: a clearly larger Brier score
    ag = compare_models(d, {"logistic": _Probabilities(pa), "ridge": _Probabilities(pb)})
    # Brier score: the weighted mean squared difference between probability and 0/1 outcome
    # (Brier 1950, Monthly Weather Review 78(1)), computed here straight with numpy.
    brier_a = np.average((pa - y) ** 2, weights=w)
    brier_b = np.average((pb - y) ** 2, weights=w)
    gap = np.sqrt(np.average((pa - pb) ** 2, weights=w))
    text = [s for s in ag.sentences if s.startswith("Logistic and ridge")][0]
    assert "misses" not in text and "miss " not in text
    assert f"Brier scores on top_grade are {brier_a:.3g} and {brier_b:.3g}" in text
    assert f"differ by {gap:.3g} in probability (RMS)" in text
    assert "root Brier score" in text
    # One model alone: its Brier score, not an RMS miss.
    alone = compare_models(d, {"logistic": _Probabilities(pa)}).sentences[0]
    assert f"Brier score of {brier_a:.3g}" in alone and "misses" not in alone
    # A number target keeps its RMS wording.
    num = compare_models(design_from_arrays(X, y, ("a", "b"), weights=w, target="growth"),
                         {"ols": _Probabilities(pa)}).sentences[0]
    assert f"misses growth by {np.sqrt(brier_a):.3g} RMS" in num

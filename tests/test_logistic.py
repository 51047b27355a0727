"""Logistic regression for yes/no outcomes, checked against outside references.

Sources: statsmodels ``Logit`` and ``GLM(Binomial)`` on the Spector & Mazzeo
grade data that statsmodels ships (``statsmodels.datasets.spector``), whose
logit estimates Greene prints in *Econometric Analysis* (values quoted from
memory: const −13.021, GPA 2.826, TUCE 0.095, PSI 2.379); scikit-learn
``LogisticRegression`` with C = 1/(α·W) for the penalized fits; the expanded
table (one row per person) for count weights and yes/no count pairs.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, design_from_arrays, table_from_frame
from regbench.errors import DataError
from regbench.models.engine import fit_all
from regbench.models.logistic import _Rows, fit_logistic, kkt_violation, model_at_alpha
from regbench.models.results import FitSettings


@pytest.fixture(scope="module")
def spector():
    import statsmodels.api as sm

    d = sm.datasets.spector.load_pandas()
    return d.exog.to_numpy(float), d.endog.to_numpy(float), tuple(d.exog.columns)


def test_spector_matches_statsmodels_logit_and_glm(spector):
    import statsmodels.api as sm

    X, y, cols = spector
    res = fit_logistic(design_from_arrays(X, y, columns=cols, outcome="binary"))
    Xc = sm.add_constant(X)
    # Reference 1: statsmodels Logit (Newton), tight tolerance.
    ref = sm.Logit(y, Xc).fit(disp=0, tol=1e-12, maxiter=100)
    ours = np.r_[res.intercept, res.coef]
    se = np.r_[res.intercept_se, res.std_errors]
    np.testing.assert_allclose(ours, ref.params, atol=1e-6)
    np.testing.assert_allclose(se, ref.bse, atol=1e-6)
    np.testing.assert_allclose(res.p_values, ref.pvalues[1:], atol=1e-6)
    assert res.log_likelihood == pytest.approx(ref.llf, abs=1e-8)
    # Reference 2: statsmodels GLM with the binomial family (IRLS).
    glm = sm.GLM(y, Xc, family=sm.families.Binomial()).fit(tol=1e-12)
    np.testing.assert_allclose(ours, glm.params, atol=1e-6)
    np.testing.assert_allclose(se, glm.bse, atol=1e-6)
    # Greene, Econometric Analysis (from memory): the printed logit estimates.
    np.testing.assert_allclose(ours, [-13.021, 2.826, 0.095, 2.379], atol=1e-3)


def test_set_aside_as_ols_and_same_fit_without_the_copy(spector):
    X, y, cols = spector
    # GPA on another scale (×25, +1) is an exact dependency: set aside with the OLS sentence.
    X2 = np.column_stack([X, 25.0 * X[:, 0] + 1.0])
    des = design_from_arrays(X2, y, columns=cols + ("GPA_pct",), outcome="binary")
    res = fit_logistic(des)
    base = fit_logistic(design_from_arrays(X, y, columns=cols, outcome="binary"))
    assert [sa.column for sa in res.set_aside] == ["GPA_pct"]
    assert "GPA" in res.set_aside[0].sentence() and "exactly" in res.set_aside[0].sentence()
    assert np.isnan(res.std_errors[-1]) and res.coef[-1] == 0.0
    np.testing.assert_allclose(res.coef[:3], base.coef, atol=1e-8)
    np.testing.assert_allclose(res.std_errors[:3], base.std_errors, atol=1e-8)


def test_lasso_leaves_an_exact_copy_at_exactly_zero(spector):
    X, y, cols = spector
    # GPA on another scale standardizes to the same column: the lasso penalty cannot tell
    # them apart, so any same-signed split of one weight is optimal.  A copy is either used
    # or exactly 0: round-off dust (1e-13) would read as "used by the model".
    X2 = np.column_stack([X, 25.0 * X[:, 0] + 1.0])
    des = design_from_arrays(X2, y, columns=cols + ("GPA_pct",), outcome="binary")
    base = design_from_arrays(X, y, columns=cols, outcome="binary")
    for alpha in (0.002, 0.01, 0.03):
        m = model_at_alpha(des, "lasso", 1.0, alpha)
        ref = model_at_alpha(base, "lasso", 1.0, alpha)
        pair = m.coef_std[[0, 3]]
        assert not np.any((pair != 0) & (np.abs(pair) < 1e-6)), (alpha, pair)
        assert np.all(pair * np.sign(ref.coef_std[0]) >= 0)
        # Same optimum as the table without the copy (the copy's weight folds into GPA's).
        assert pair.sum() == pytest.approx(ref.coef_std[0], abs=1e-6)
        np.testing.assert_allclose(m.predict(X2), ref.predict(X), atol=1e-7)
        assert kkt_violation(X2, y, np.ones_like(y), m) < 1e-6
    res = fit_all(des, FitSettings(n_penalties=15, folds=3))
    coef = res.penalized["lasso"].path.coef_std
    names = list(res.penalized["lasso"].path.columns)
    both = coef[:, [names.index(cols[0]), names.index("GPA_pct")]]
    assert not np.any((both != 0) & (np.abs(both) < 1e-6))


def _data(n=300, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5)) * [1.0, 2.0, 0.5, 3.0, 1.0] + [0.0, 10.0, -3.0, 100.0, 0.0]
    X[:, 4] = 0.8 * X[:, 0] + 0.2 * rng.normal(size=n)  # overlaps column 1
    eta = -0.5 + X[:, 0] - 0.3 * (X[:, 1] - 10.0) + 0.4 * X[:, 2]
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    w = rng.integers(1, 4, size=n).astype(float)
    return X, y, w


@pytest.mark.parametrize("rho", [0.0, 1.0, 0.5])
def test_penalized_matches_sklearn_with_mapped_C(rho):
    from sklearn.linear_model import LogisticRegression

    X, y, w = _data()
    des = design_from_arrays(X, y, weights=w, outcome="binary")
    alpha = 0.02
    m = model_at_alpha(des, "m", rho, alpha)
    rows = _Rows(X, y, w)  # the same weighted standardization the objective states
    # scikit-learn minimises C·Σ wᵢℓᵢ + penalty, so C = 1/(α·W) gives the same optimum.
    C = 1.0 / (alpha * w.sum())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = LogisticRegression(C=C, l1_ratio=rho, solver="saga" if rho > 0 else "lbfgs", tol=1e-12,
                                 max_iter=200_000).fit(rows.Xs, y, sample_weight=w)
    np.testing.assert_allclose(m.coef_std, ref.coef_[0], atol=1e-6)
    icpt_std = m.intercept + m.coef @ rows.mean
    assert icpt_std == pytest.approx(ref.intercept_[0], abs=1e-6)
    assert kkt_violation(X, y, w, m) < 1e-8


def test_paths_meet_optimality_and_cv_is_log_loss():
    X, y, w = _data(200)
    des = design_from_arrays(X, y, weights=w, outcome="binary")
    res = fit_all(des, FitSettings(n_penalties=12, folds=3))
    assert res.outcome == "binary" and list(res.models()) == ["logistic", "ridge", "lasso", "elastic_net"]
    from regbench.models.results import LinearModel

    for name, pf in res.penalized.items():
        assert pf.cv.measure == "log_loss" and np.all(np.isfinite(pf.cv.mean))
        for i, a in enumerate(pf.path.alphas):
            m = LinearModel(name=name, columns=res.columns, intercept=float(pf.path.intercepts[i]),
                            coef=pf.path.coef[i], coef_std=pf.path.coef_std[i], alpha=float(a),
                            l1_ratio=pf.l1_ratio, outcome="binary")
            # KKT of the stated objective at every path point (path tolerance 1e-6 on a step).
            assert kkt_violation(X, y, w, m) < 1e-5, (name, i)
        # The lasso path starts at the α that zeroes every coefficient.
    assert not np.any(res.penalized["lasso"].path.coef[0])


def test_free_intercept_reproduces_the_observed_share():
    X, y, w = _data(250, seed=5)
    des = design_from_arrays(X, y, weights=w, outcome="binary")
    res = fit_all(des, FitSettings(n_penalties=10, folds=3))
    for name, m in res.models().items():
        # Score equation of the unpenalized intercept: Σ wᵢpᵢ = Σ wᵢyᵢ (penalized or not).
        assert w @ m.predict(X) == pytest.approx(w @ y, rel=1e-6), name
        p = m.predict(X)
        assert np.all((p > 0) & (p < 1))


def test_count_weights_equal_the_expanded_table():
    import statsmodels.api as sm

    X, y, w = _data(120, seed=7)
    des = design_from_arrays(X[:, :3], y, weights=w, outcome="binary")
    res = fit_logistic(des)
    rep = np.repeat(np.arange(len(y)), w.astype(int))
    exp = fit_logistic(design_from_arrays(X[rep, :3], y[rep], outcome="binary"))
    np.testing.assert_allclose(res.coef, exp.coef, atol=1e-8)
    np.testing.assert_allclose(res.std_errors, exp.std_errors, atol=1e-8)
    # statsmodels GLM with frequency weights is the same reference.
    glm = sm.GLM(y, sm.add_constant(X[:, :3]), family=sm.families.Binomial(), freq_weights=w).fit(tol=1e-12)
    np.testing.assert_allclose(res.std_errors, glm.bse[1:], atol=1e-6)
    # Penalized at a fixed α: the same objective on the expanded rows.
    a = model_at_alpha(des, "lasso", 1.0, 0.01)
    b = model_at_alpha(design_from_arrays(X[rep, :3], y[rep], outcome="binary"), "lasso", 1.0, 0.01)
    np.testing.assert_allclose(a.coef, b.coef, atol=1e-7)


def test_yes_no_count_pairs_equal_the_expanded_table():
    rng = np.random.default_rng(11)
    n = 40
    dose = rng.uniform(0, 4, n)
    site = rng.normal(size=n)
    total = rng.integers(1, 12, n)
    yes = rng.binomial(total, 1 / (1 + np.exp(-(dose - 2 + 0.5 * site))))
    frame = pd.DataFrame({"dose": dose, "site": site, "top": yes.astype(float), "other": (total - yes).astype(float)})
    table = table_from_frame(frame)
    des = build_design(table, Roles(target="top", predictors=("dose", "site"), no_count="other"))
    assert des.outcome == "binary" and des.levels == ("other", "top")
    res = fit_logistic(des)
    # The expanded table: one row per batch member, yes = 1.
    rows = np.repeat(np.arange(n), total)
    yy = np.concatenate([np.r_[np.ones(yes[i]), np.zeros(total[i] - yes[i])] for i in range(n)])
    big = design_from_arrays(np.column_stack([dose, site])[rows], yy, columns=("dose", "site"), outcome="binary")
    ref = fit_logistic(big)
    np.testing.assert_allclose(res.coef, ref.coef, atol=1e-8)
    np.testing.assert_allclose(res.std_errors, ref.std_errors, atol=1e-8)
    assert res.intercept_se == pytest.approx(ref.intercept_se, abs=1e-8)


def test_complete_and_quasi_complete_separation_are_explained():
    rng = np.random.default_rng(2)
    x = rng.normal(size=60)
    z = rng.normal(size=60)
    y = (x > 0.1).astype(float)
    res = fit_logistic(design_from_arrays(np.column_stack([x, z]), y, columns=("dose", "noise"), outcome="binary"))
    assert res.separation is not None and res.separation.kind == "complete"
    assert res.model is None and np.all(np.isnan(res.coef))
    assert "dose" in res.separation.sentence and "separated" in res.separation.sentence
    # Quasi-complete: every row of the flagged batch is "yes"; the other rows mix.
    flag = np.r_[np.zeros(40), np.ones(10)]
    y2 = np.r_[rng.integers(0, 2, 40), np.ones(10)].astype(float)
    y2[:2] = [0, 1]
    res2 = fit_logistic(design_from_arrays(np.column_stack([flag, rng.normal(size=50)]), y2,
                                           columns=("flagged", "noise"), outcome="binary"))
    assert res2.separation is not None and res2.separation.kind == "quasi-complete"
    assert list(res2.separation.combination) == ["flagged"] and res2.separation.rows_exact == 10
    # A fit without separation has none.
    X, y3, _ = _data(100)
    assert fit_logistic(design_from_arrays(X[:, :3], y3, outcome="binary")).separation is None
    # The penalized families stay finite on separated data.
    full = fit_all(design_from_arrays(np.column_stack([x, z]), y, outcome="binary"), FitSettings(n_penalties=8, folds=3))
    assert "logistic" not in full.models()
    assert all(np.all(np.isfinite(m.coef)) for m in full.models().values())


def test_outcome_detection_levels_and_overrides(monkeypatch):
    import regbench.data.design as design_mod

    frame = pd.DataFrame({"grade": ["top", "other", "top", "other", "top", "other"] * 5,
                          "x": np.arange(30.0), "z": np.sin(np.arange(30.0)), "n": np.arange(30.0) % 7})
    table = table_from_frame(frame)
    monkeypatch.setattr(design_mod, "DETECT_YES_NO", True)
    des = build_design(table, Roles(target="grade", predictors=("x", "z")))
    assert des.outcome == "binary" and des.levels == ("other", "top")
    assert des.y[0] == 1.0 and des.y[1] == 0.0
    swapped = build_design(table, Roles(target="grade", predictors=("x", "z"), positive_level="other"))
    assert swapped.levels == ("top", "other") and swapped.y[0] == 0.0
    with pytest.raises(DataError, match="'maybe' is not a value of target 'grade'"):
        build_design(table, Roles(target="grade", predictors=("x", "z"), positive_level="maybe"))
    # A 0/1 number column is a yes/no outcome unless the person says numeric.
    frame["hit"] = (np.arange(30) % 3 == 0).astype(float)
    table = table_from_frame(frame)
    assert build_design(table, Roles(target="hit", predictors=("x", "z"))).outcome == "binary"
    assert build_design(table, Roles(target="hit", predictors=("x", "z"), outcome="numeric")).outcome == "numeric"
    with pytest.raises(DataError, match="'n' has 7 distinct values"):
        build_design(table, Roles(target="n", predictors=("x", "z"), outcome="binary"))
    assert build_design(table, Roles(target="n", predictors=("x", "z"))).outcome == "numeric"

    # Until every layer carries yes/no outcomes, detection is off: a 0/1 target stays numeric
    # unless the person asks for the yes/no outcome.
    monkeypatch.setattr(design_mod, "DETECT_YES_NO", False)
    assert build_design(table, Roles(target="hit", predictors=("x", "z"))).outcome == "numeric"
    assert build_design(table, Roles(target="hit", predictors=("x", "z"), outcome="binary")).outcome == "binary"


def test_cli_fit_json_says_binary(tmp_path, capsys):
    from regbench.cli import main

    X, y, _ = _data(150)
    frame = pd.DataFrame(X, columns=["a", "b", "c", "d", "e"])
    frame["passed"] = np.where(y > 0, "top", "other")
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(path), "--target", "passed", "--penalties", "8", "--folds", "3", "--json", str(out)]) == 0
    d = json.loads(out.read_text())
    assert d["outcome"] == "binary" and d["positive_level"] == "top"
    assert set(d["models"]) == {"logistic", "ridge", "lasso", "elastic_net"}
    lg = d["models"]["logistic"]
    assert lg["mean_probability"] == pytest.approx(lg["observed_share"], rel=1e-6)
    assert d["models"]["lasso"]["cv"]["measure"] == "log_loss"
    assert main(["fit", str(path), "--target", "passed", "--outcome", "numeric", "--penalties", "5"]) == 2
    assert "numeric" in capsys.readouterr().err

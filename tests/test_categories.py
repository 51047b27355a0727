"""Penalized fits weigh every level of a category alike: renaming or reordering levels changes nothing.

Source: the diabetes data shipped with scikit-learn (Efron et al. 2004, ``sklearn.datasets.load_diabetes``),
with one column cut into a 9-level category.  References: scikit-learn ``Ridge`` / ``Lasso`` /
``ElasticNet`` on one indicator per level (every level, standardized by mean and population SD, the
intercept unpenalized) with the README's α mapping (``Lasso``/``ElasticNet(alpha=α)``,
``Ridge(alpha=n·α)``); statsmodels OLS with the formula's reference coding for OLS.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, table_from_frame
from regbench.models.engine import fit_all, fit_models_at, heldout_predictions
from regbench.models.results import FitSettings

ALPHA = 0.05


def frames():
    from sklearn.datasets import load_diabetes

    data = load_diabetes(scaled=False, as_frame=True).frame
    cut = pd.qcut(data["s1"], 9, labels=False).astype(int) + 1  # levels 1..9
    a = data[["age", "bmi", "bp", "s5", "target"]].assign(band=cut.astype(str))
    b = a.assign(band=(10 - cut).astype(str))  # the same rows, levels renamed 1..9 -> 9..1
    c = a.assign(band=cut.map(lambda v: f"L{(v * 4) % 9}"))  # another renaming and order
    return a, b, c


@pytest.fixture(scope="module")
def designs():
    return [build_design(table_from_frame(f), Roles(target="target", categorical=("band",))) for f in frames()]


def test_the_reference_level_is_named_like_the_others(designs):
    d = designs[0]
    assert "band=1" not in d.columns and "band=2" in d.columns  # OLS: the first level is the reference
    m = fit_models_at(d, FitSettings(alpha=ALPHA))["lasso"]
    assert m.columns == d.columns + ("band=1",)
    assert m.reference_levels == (("band=1", tuple(f"band={k}" for k in range(2, 10))),)


def test_fixed_alpha_predictions_and_kept_levels_do_not_depend_on_level_names(designs):
    # Measured before: renaming 1..9 -> 9..1 moved ridge, lasso and elastic-net predictions by 0.22-0.25 SD of the
    # target and the lasso kept 8 indicators in one coding and 7 in the other.
    fits = [fit_models_at(d, FitSettings(alpha=ALPHA)) for d in designs]
    scale = designs[0].y.std()
    for name in fits[0]:
        base = fits[0][name].predict(designs[0].X)
        kept = int(np.count_nonzero(fits[0][name].coef))
        for d, f in zip(designs[1:], fits[1:]):
            tol = 1e-12 if name == "ols" else 1e-8
            np.testing.assert_allclose(f[name].predict(d.X), base, atol=tol * scale, err_msg=name)
            assert int(np.count_nonzero(f[name].coef)) == kept, name


def test_penalized_coding_is_one_indicator_per_level_as_scikit_learn_fits_it(designs):
    from sklearn.linear_model import ElasticNet, Lasso, Ridge

    a = frames()[0]
    d = designs[0]
    models = fit_models_at(d, FitSettings(alpha=ALPHA))
    onehot = pd.get_dummies(a["band"], prefix="band", prefix_sep="=", dtype=float)  # every level
    Xf = np.column_stack([a[["age", "bmi", "bp", "s5"]].to_numpy(), onehot.to_numpy()])
    names = ["age", "bmi", "bp", "s5", *onehot.columns]
    Z = (Xf - Xf.mean(axis=0)) / Xf.std(axis=0)
    y = a["target"].to_numpy()
    n = len(a)
    refs = {"ridge": Ridge(alpha=n * ALPHA), "lasso": Lasso(alpha=ALPHA, tol=1e-14, max_iter=1_000_000),
            "elastic_net": ElasticNet(alpha=ALPHA, l1_ratio=0.5, tol=1e-14, max_iter=1_000_000)}
    for name, ref in refs.items():
        ref.fit(Z, y)
        m = models[name]
        np.testing.assert_allclose(m.predict(d.X), ref.predict(Z), atol=1e-8 * y.std(), err_msg=name)
        # The coefficients themselves, level by level (standardized), by name.
        mine = np.array([m.coefficient(c, standardized=True) for c in names])
        tol = 1e-6 if name == "lasso" else 1e-8  # the lasso on all levels is unique only up to round-off
        np.testing.assert_allclose(mine, ref.coef_, atol=tol * y.std(), err_msg=name)


def test_ols_keeps_reference_coding_and_matches_statsmodels(designs):
    import statsmodels.formula.api as smf

    a = frames()[0]
    d = designs[0]
    m = fit_models_at(d, FitSettings(alpha=ALPHA))["ols"]
    ref = smf.ols("target ~ age + bmi + bp + s5 + C(band)", data=a).fit()
    np.testing.assert_allclose(m.predict(d.X), ref.fittedvalues, rtol=1e-10)
    assert m.columns == d.columns and m.reference_levels == ()


@pytest.fixture(scope="module")
def cv_fits(designs):
    return [fit_all(d, FitSettings(n_penalties=30, relaxed=True)) for d in designs]


def test_cv_chosen_alpha_and_kept_count_do_not_depend_on_level_names(designs, cv_fits):
    # Measured before: the CV-chosen α changed up to 3x under the renaming.
    res = cv_fits
    for name in res[0].penalized:
        alphas = [r.penalized[name].alpha for r in res]
        assert alphas[1] == pytest.approx(alphas[0], rel=1e-12) and alphas[2] == pytest.approx(alphas[0], rel=1e-12)
        np.testing.assert_allclose(res[1].penalized[name].cv.mean, res[0].penalized[name].cv.mean, rtol=1e-7)
        base = res[0].penalized[name].model
        for d, r in zip(designs[1:], res[1:]):
            m = r.penalized[name].model
            np.testing.assert_allclose(m.predict(d.X), base.predict(designs[0].X), atol=1e-7 * designs[0].y.std(),
                                       err_msg=name)
            assert np.count_nonzero(m.coef) == np.count_nonzero(base.coef), name


def test_heldout_predictions_do_not_depend_on_level_names(designs, cv_fits):
    preds = [heldout_predictions(d, r, r.models()) for d, r in zip(designs, cv_fits)]
    for name in preds[0]:
        tol = 1e-12 if name == "ols" else 1e-7
        np.testing.assert_allclose(preds[1][name], preds[0][name], atol=tol * designs[0].y.std(), err_msg=name)


def test_fit_json_lists_every_level_of_the_penalized_fits(designs, cv_fits):
    from regbench.models.export import fit_summary_text, fit_to_json

    js = json.loads(json.dumps(fit_to_json(designs[0], cv_fits[0]), allow_nan=False))
    assert "band=1" not in js["models"]["ols"]["coefficients"]
    for name in ("ridge", "lasso", "elastic_net"):
        m = js["models"][name]
        assert "band=1" in m["coefficients"] and m["reference_levels"] == ["band=1"]
        assert "band=1" in m["path"]["coefficients"]
    text = fit_summary_text(designs[0], cv_fits[0])
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("band=1 "))
    assert "reference" in line


def test_penalty_factor_of_a_category_reaches_its_reference_level(designs):
    # A factor of 0 set for the table column leaves every level unpenalized, the reference level included, and the
    # fit still does not depend on the level names (reference: the same fit on the renamed table).
    s = FitSettings(alpha=ALPHA, penalty_factors=(("band", 0.0),))
    fits = [fit_models_at(d, s) for d in designs[:2]]
    for name in ("ridge", "lasso", "elastic_net"):
        m = fits[0][name]
        assert np.all(m.coef[[m.columns.index(f"band={k}") for k in range(1, 10)]] != 0.0), name
        np.testing.assert_allclose(fits[1][name].predict(designs[1].X), m.predict(designs[0].X),
                                   atol=1e-8 * designs[0].y.std(), err_msg=name)


def test_logistic_penalized_fits_weigh_every_level_alike():
    # Yes/no outcome (target above 140 in the diabetes data).  Reference: scikit-learn LogisticRegression with an L2
    # penalty on the full one-hot, standardized design (C = 1/(n·α) for the objective mean log-loss + α/2·‖β‖²).
    from sklearn.linear_model import LogisticRegression

    a, b, _ = frames()
    ds = []
    for f in (a, b):
        g = f.assign(high=(f["target"] > 140).astype(int)).drop(columns="target")
        ds.append(build_design(table_from_frame(g), Roles(target="high", categorical=("band",), outcome="binary")))
    fits = [fit_models_at(d, FitSettings(alpha=0.02)) for d in ds]
    for name in ("ridge", "lasso", "elastic_net"):
        m0, m1 = fits[0][name], fits[1][name]
        assert m0.columns[-1] == m1.columns[-1] == "band=1"  # the first sorted level, another group of rows in b
        np.testing.assert_allclose(m1.predict(ds[1].X), m0.predict(ds[0].X), atol=1e-9, err_msg=name)
        assert np.count_nonzero(m1.coef) == np.count_nonzero(m0.coef), name
    onehot = pd.get_dummies(a["band"], dtype=float)
    Xf = np.column_stack([a[["age", "bmi", "bp", "s5"]].to_numpy(), onehot.to_numpy()])
    Z = (Xf - Xf.mean(axis=0)) / Xf.std(axis=0)
    ref = LogisticRegression(C=1.0 / (len(a) * 0.02), tol=1e-12, max_iter=10_000).fit(Z, ds[0].y)
    np.testing.assert_allclose(fits[0]["ridge"].predict(ds[0].X), ref.predict_proba(Z)[:, 1], atol=1e-6)

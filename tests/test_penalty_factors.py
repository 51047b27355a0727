"""Per-column penalty factors, checked against a general convex solver and scikit-learn.

Objective (README): (1/(2W))·Σ wᵢ(yᵢ − b₀ − x̃ᵢβ)² + α·Σⱼ vⱼ(ρ|βⱼ| + (1−ρ)/2·βⱼ²) on
weighted-standardized columns.  References: cvxpy (a general convex solver) on
the rows at fixed α, weights included; for the lasso the exact identity that a
factor v > 0 equals dividing the standardized column by v (scikit-learn's Lasso,
which has no factors, solves that rescaled problem).
"""

from __future__ import annotations

import json

import cvxpy as cp
import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import Lasso

from regbench.cli import main
from regbench.data import Roles, build_design, design_from_arrays
from regbench.data import table_from_frame
from regbench.errors import ModelError
from regbench.models.engine import fit_all, fit_models_at
from regbench.models.gram import gram_stats
from regbench.models.penalized import GAP_TOL, Problem, duality_gaps, factor_scores, solve_beta
from regbench.models.results import FitSettings

NAMES = [f"x{j}" for j in range(7)]


def _rows(seed=1, n=300):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 7)) * [1, 3, 0.5, 2, 1, 4, 1] + [5, -2, 0, 10, 1, 0, 3]
    X[:, 1] = 2.5 * X[:, 0] + rng.normal(0, 0.4, n)
    y = 2.0 + X @ [0.8, 0.1, -1.5, 0.0, 0.3, 0.0, 0.5] + rng.normal(0, 1.0, n)
    w = rng.uniform(0.2, 4.0, n)
    return X, y, w


def _std(X, y, w):
    W = w.sum()
    m = w @ X / W
    sd = np.sqrt(w @ (X - m) ** 2 / W)
    return (X - m) / sd, y - w @ y / W, w / W, m, sd


def _cvxpy(Xs, yc, wn, alpha, rho, v):
    b = cp.Variable(Xs.shape[1])
    loss = 0.5 * cp.sum(cp.multiply(wn, cp.square(yc - Xs @ b)))
    pen = alpha * cp.sum(cp.multiply(v, rho * cp.abs(b) + (1 - rho) / 2 * cp.square(b)))
    cp.Problem(cp.Minimize(loss + pen)).solve(solver=cp.CLARABEL, tol_gap_abs=1e-12, tol_gap_rel=1e-12,
                                              tol_feas=1e-12)
    return b.value


V = np.array([0.0, 1.0, 0.5, 2.0, 1.0, 0.0, 3.0])


def test_a_large_factor_is_used_as_given():
    # The largest factor allowed (1e6) still leaves the column to the penalty (cvxpy at an α small enough to keep it).
    X, y, w = _rows()
    Xs, yc, wn, _, _ = _std(X, y, w)
    v = np.ones(7)
    v[2] = 1e6
    problem = Problem.from_stats(gram_stats(X, y, w), v)
    for rho in (1.0, 0.5):
        alpha = 1e-8
        ours = solve_beta(problem, [alpha], rho)[0]
        ref = _cvxpy(Xs, yc, wn, alpha, rho, v)
        assert ours[2] != 0 and np.max(np.abs(ours - ref)) < 1e-5  # near-OLS, two columns track each other

        def objective(b):
            r = yc - Xs @ b
            return 0.5 * np.sum(wn * r * r) + alpha * np.sum(v * (rho * np.abs(b) + (1 - rho) / 2 * b * b))

        assert objective(ours) <= objective(ref) + 1e-12


@pytest.mark.parametrize("rho", [1.0, 0.5, 0.9, 0.0])
@pytest.mark.parametrize("alpha", [0.3, 0.05, 0.004])
def test_factors_match_a_general_convex_solver(rho, alpha):
    X, y, w = _rows()
    d = design_from_arrays(X, y, columns=NAMES, weights=w)
    settings = FitSettings(l1_ratios=(rho,) if 0 < rho < 1 else (0.5,), penalty_factors=tuple(zip(NAMES, V)))
    name = {1.0: "lasso", 0.0: "ridge"}.get(rho, "elastic_net")
    m = fit_models_at(d, settings, {n: alpha for n in ("ridge", "lasso", "elastic_net")})[name]
    Xs, yc, wn, mean, sd = _std(X, y, w)
    ref = _cvxpy(Xs, yc, wn, alpha, rho, V)  # cvxpy, standardized scale
    assert np.max(np.abs(m.coef_std - ref)) < 1e-7
    assert np.max(np.abs(m.coef - ref / sd)) < 1e-7 * np.max(np.abs(ref / sd))
    assert m.intercept == pytest.approx(w @ y / w.sum() - (ref / sd) @ mean, abs=1e-7)
    assert m.converged is True and m.gap <= GAP_TOL
    # Unpenalized columns are always kept.
    assert np.all(m.coef[V == 0] != 0)


@pytest.mark.parametrize("v", [0.5, 2.0, 7.0])
def test_lasso_factor_equals_dividing_the_standardized_column(v):
    # Exact identity: v·|β_j| with column x̃_j  ==  |γ_j| with column x̃_j / v, β_j = γ_j / v.
    X, y, w = _rows(seed=4)
    Xs, yc, wn, _, _ = _std(X, y, w)
    alpha = 0.02
    factors = np.ones(7)
    factors[2] = v
    Xv = Xs.copy()
    Xv[:, 2] /= v
    est = Lasso(alpha=alpha, tol=1e-14, max_iter=1_000_000).fit(Xv, yc, sample_weight=wn * len(y))
    gamma = est.coef_.copy()
    gamma[2] /= v
    problem = Problem.from_stats(gram_stats(X, y, w), factors)
    ours = solve_beta(problem, [alpha], 1.0)[0]
    assert np.max(np.abs(ours - gamma)) < 1e-9


def test_all_factors_one_is_the_plain_fit_bit_for_bit():
    X, y, w = _rows()
    d = design_from_arrays(X, y, columns=NAMES, weights=w)
    a = fit_all(d, FitSettings(folds=3, n_penalties=15))
    b = fit_all(d, FitSettings(folds=3, n_penalties=15, penalty_factors=(("x2", 1.0),)))
    for n in a.penalized:
        assert np.array_equal(a.penalized[n].path.coef, b.penalized[n].path.coef)


def test_grid_top_is_computed_over_the_penalized_columns():
    X, y, w = _rows()
    d = design_from_arrays(X, y, columns=NAMES, weights=w)
    s = FitSettings(folds=3, n_penalties=25, penalty_factors=tuple(zip(NAMES, V)))
    r = fit_all(d, s)
    for name in ("lasso", "elastic_net"):
        pf = r.penalized[name]
        top = pf.path.alphas[0]
        # At the top every penalized coefficient is 0 and the unpenalized ones are their OLS fit;
        # just below it a penalized column enters (KKT: |c_j| ≤ αρv_j after partialling out).
        assert np.all(pf.path.coef[0][V > 0] == 0) and np.all(pf.path.coef[0][V == 0] != 0)
        below = fit_models_at(d, s, {n: top * 0.98 for n in r.penalized})[name]
        assert np.any(below.coef[V > 0] != 0)
        Xs, yc, wn, _, _ = _std(X, y, w)
        # Outside reference for the kept-only fit: weighted least squares on the unpenalized columns.
        U = Xs[:, V == 0]
        sw = np.sqrt(wn)
        bu = np.linalg.lstsq(U * sw[:, None], yc * sw, rcond=None)[0]
        assert np.allclose(pf.path.coef_std[0][V == 0], bu, atol=1e-9)
        assert pf.convergence.converged


def test_a_categorical_column_takes_one_factor_for_all_its_indicators():
    rng = np.random.default_rng(5)
    n = 200
    frame = pd.DataFrame({"site": rng.choice(["north", "south", "east", "west"], n),
                          "a": rng.normal(size=n), "b": rng.normal(size=n)})
    frame["y"] = frame["a"] * 0.5 + frame["site"].map({"north": 0.0, "south": 0.05, "east": -0.04, "west": 0.02})
    frame["y"] += rng.normal(0, 1, n)
    table = table_from_frame(frame, source="sites.csv")
    design = build_design(table, Roles(target="y"))
    cats = [c for c in design.columns if c.startswith("site=")]
    assert len(cats) == 3
    s = FitSettings(folds=3, n_penalties=10, alpha=0.5, penalty_factors=(("site", 0.0),))
    m = fit_models_at(design, s)["lasso"]
    assert all(m.coef[design.index(c)] != 0 for c in cats)  # strong α, but unpenalized: all kept
    plain = fit_models_at(design, FitSettings(alpha=0.5))["lasso"]
    assert all(plain.coef[design.index(c)] == 0 for c in cats)


def test_gap_with_factors_matches_the_rows():
    X, y, w = _rows()
    Xs, yc, wn, _, _ = _std(X, y, w)
    problem = Problem.from_stats(gram_stats(X, y, w), V)
    beta = solve_beta(problem, [0.05], 0.5)[0]
    assert duality_gaps(problem, beta[None], [0.05], 0.5)[0] <= GAP_TOL
    # A point off the optimum: the reduced problem's gap equals primal minus the cvxpy optimum or more.
    off = beta * 1.05
    gap = duality_gaps(problem, off[None], [0.05], 0.5)[0]
    ref = _cvxpy(Xs, yc, wn, 0.05, 0.5, V)

    def primal(b):
        r = yc - Xs @ b
        return 0.5 * np.sum(wn * r * r) + 0.05 * np.sum(V * (0.5 * np.abs(b) + 0.25 * b * b))

    var_y = np.sum(wn * yc * yc)
    assert gap * var_y >= primal(off) - primal(ref) - 1e-12 > 0


def test_settings_refuse_bad_factors_and_unknown_columns():
    X, y, w = _rows()
    d = design_from_arrays(X, y, columns=NAMES, weights=w)
    with pytest.raises(ModelError, match="penalty_factors: x1"):
        fit_all(d, FitSettings(penalty_factors=(("x1", -1.0),)))
    with pytest.raises(ModelError, match="penalty factor for 'nope'"):
        fit_all(d, FitSettings(penalty_factors=(("nope", 2.0),)))
    s = FitSettings(penalty_factors=(("x1", 0.0), ("x3", 2.5)))
    assert FitSettings.from_dict(json.loads(json.dumps(s.to_dict()))) == s


def test_cli_penalty_factor(tmp_path, capsys):
    X, y, w = _rows()
    frame = pd.DataFrame(X, columns=NAMES)
    frame["y"] = y
    csv = tmp_path / "t.csv"
    frame.to_csv(csv, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(csv), "--target", "y", "--penalty-factor", "x0=0", "--penalty-factor", "x6=3",
                 "--json", str(out)]) == 0
    js = json.loads(out.read_text())
    assert js["settings"]["penalty_factors"] == {"x0": 0.0, "x6": 3.0}
    assert all(js["models"][n]["coefficients"]["x0"] != 0 for n in ("ridge", "lasso", "elastic_net"))
    assert main(["fit", str(csv), "--target", "y", "--penalty-factor", "x0=-1"]) == 2
    assert "--penalty-factor: x0: -1 is outside" in capsys.readouterr().err
    assert main(["fit", str(csv), "--target", "y", "--penalty-factor", "x0"]) == 2
    assert "--penalty-factor: 'x0' is not COLUMN=VALUE" in capsys.readouterr().err
    assert main(["fit", str(csv), "--target", "y", "--penalty-factor", "zz=2"]) == 2
    assert "'zz'" in capsys.readouterr().err


def test_session_sets_saves_and_validates_factors(tmp_path):
    import zipfile

    from regbench.errors import DataError, ProjectError
    from regbench.project import load_project, save_project
    from regbench.session import Session

    X, y, w = _rows(n=80)
    frame = pd.DataFrame(X, columns=NAMES)
    frame["y"] = y
    s = Session.from_table(table_from_frame(frame, source="t.csv"), Roles(target="y"),
                           FitSettings(folds=3, n_penalties=10))
    s.set_penalty_factor("x0", 0)
    s.set_penalty_factor("x3", 2.5)
    s.set_penalty_factor("x3", 1)  # back to the default: no longer listed
    assert s.settings.penalty_factors == (("x0", 0.0),)
    with pytest.raises(DataError, match="'zz' is not a predictor"):
        s.set_penalty_factor("zz", 2)
    with pytest.raises(DataError, match="penalty_factors.*x1"):
        s.set_penalty_factor("x1", -2)
    path = tmp_path / "p.regbench"
    save_project(s, path)
    back = load_project(path, compute=False)
    assert back.settings == s.settings
    # Dropping x0 from the predictors drops its factor, which has nothing left to act on.
    s.set_roles(Roles(target="y", predictors=tuple(NAMES[1:])))
    assert s.settings.penalty_factors == ()
    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    doc = json.loads(members["session.json"])
    doc["settings"]["penalty_factors"] = {"x0": "none"}
    import hashlib

    members["session.json"] = json.dumps(doc).encode()
    m = json.loads(members["manifest.json"])
    m["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                    for n, b in members.items() if n != "manifest.json"]
    members["manifest.json"] = json.dumps(m).encode()
    bad = tmp_path / "bad.regbench"
    with zipfile.ZipFile(bad, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    with pytest.raises(ProjectError, match="settings.penalty_factors.*x0"):
        load_project(bad, compute=False)

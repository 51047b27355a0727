"""Relaxed lasso and relaxed elastic net (Meinshausen 2007, CSDA 52(1); Hastie, Tibshirani &
Tibshirani 2020, Statistical Science 35(4)): β(γ) = (1 − γ)·β_penalized + γ·β_refit.

The fully relaxed fit (γ = 1) is checked against statsmodels WLS on the selected columns.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from regbench.cli import main
from regbench.data import Roles, design_from_arrays, table_from_frame
from regbench.errors import ModelError
from regbench.models.engine import fit_all, fit_models_at, heldout_predictions, model_at
from regbench.models.relaxed import RELAXATION_GRID, choose
from regbench.models.results import FitSettings

NAMES = [f"x{j}" for j in range(8)]


def _design(seed=2, n=260):
    rng = np.random.default_rng(seed)
    groups = rng.integers(0, 10, n)
    X = rng.normal(size=(n, 8)) * [1, 2, 0.5, 3, 1, 1, 2, 1] + [3, 0, -1, 4, 0, 2, 0, 1]
    X[:, 1] = 1.5 * X[:, 0] + rng.normal(0, 0.5, n)
    y = 1.0 + X @ [1.0, 0.4, -2.0, 0.0, 0.5, 0.0, 0.0, 0.3] + rng.normal(0, 1.5, n)
    w = rng.uniform(0.5, 3.0, n)
    return design_from_arrays(X, y, columns=NAMES, weights=w, groups=groups)


@pytest.mark.parametrize("name", ["relaxed_lasso", "relaxed_elastic_net"])
def test_fully_relaxed_equals_weighted_least_squares_on_the_selected_columns(name):
    d = _design()
    r = fit_all(d, FitSettings(folds=3, n_penalties=10, alpha=0.2, relaxation=1.0))
    pf = r.penalized[name]
    base = r.penalized[name.replace("relaxed_", "")]
    sel = np.flatnonzero(base.model.coef != 0)
    assert 0 < sel.size < d.p  # the penalty dropped some columns
    assert np.array_equal(np.flatnonzero(pf.model.coef != 0), sel)
    # statsmodels WLS with an intercept on the selected columns only (outside reference).
    ref = sm.WLS(d.y, sm.add_constant(d.X[:, sel]), weights=d.weights).fit()
    assert pf.model.intercept == pytest.approx(ref.params[0], abs=1e-8)
    assert np.max(np.abs(pf.model.coef[sel] - ref.params[1:])) < 1e-8
    assert pf.relaxation == 1.0 and pf.model.relaxation == 1.0 and pf.alpha_rule == "fixed"


def test_relaxation_zero_is_the_penalized_fit_and_half_is_the_midpoint():
    d = _design()
    s = FitSettings(folds=4, n_penalties=30, alpha=0.05)
    r0 = fit_all(d, FitSettings(**{**s.__dict__, "relaxation": 0.0}))
    r1 = fit_all(d, FitSettings(**{**s.__dict__, "relaxation": 1.0}))
    rh = fit_all(d, FitSettings(**{**s.__dict__, "relaxation": 0.5}))
    lasso = r0.penalized["lasso"].model
    assert np.array_equal(r0.penalized["relaxed_lasso"].model.coef, lasso.coef)
    assert np.array_equal(r0.penalized["relaxed_lasso"].path.coef, r0.penalized["lasso"].path.coef)
    mid = 0.5 * (lasso.coef + r1.penalized["relaxed_lasso"].model.coef)
    assert np.allclose(rh.penalized["relaxed_lasso"].model.coef, mid, rtol=0, atol=1e-12)


def test_relaxation_is_chosen_by_the_same_cross_validation_as_alpha():
    d = _design()
    r = fit_all(d, FitSettings(folds=5, n_penalties=30, relaxed=True))
    pf, lasso = r.penalized["relaxed_lasso"], r.penalized["lasso"]
    rcv = pf.relaxation_cv
    assert tuple(rcv.relaxations) == RELAXATION_GRID and rcv.mean.shape == (5, 30)
    # γ = 0 is the lasso itself: same folds, same held-out errors.
    assert np.allclose(rcv.mean[0], lasso.cv.mean, rtol=1e-12, atol=0)
    # cv_min: the chosen (α, γ) has the lowest mean error over the whole table.
    g = list(rcv.relaxations).index(pf.relaxation)
    a = int(np.flatnonzero(rcv.alphas == pf.alpha)[0])
    assert rcv.mean[g, a] == np.min(rcv.mean)
    assert rcv.mean[g, a] <= np.min(lasso.cv.mean)  # relaxing never scores worse than not relaxing
    # cv_1se: the largest α with some γ within one SE of the minimum (common practice for α alone).
    a1, g1 = choose(rcv.alphas, rcv.relaxations, rcv.mean, rcv.se, "cv_1se")
    limit = rcv.mean[g, a] + rcv.se[g, a]
    assert rcv.mean[g1, a1] <= limit
    assert not np.any(rcv.mean[:, rcv.alphas > rcv.alphas[a1]] <= limit)
    r1 = fit_all(d, FitSettings(folds=5, n_penalties=30, relaxed=True, alpha_rule="cv_1se"))
    assert r1.penalized["relaxed_lasso"].alpha == rcv.alphas[a1]
    assert r1.penalized["relaxed_lasso"].relaxation == rcv.relaxations[g1]


def test_relaxed_families_are_refitted_everywhere_families_are():
    d = _design()
    r = fit_all(d, FitSettings(folds=4, n_penalties=25, relaxed=True))
    assert list(r.penalized)[-2:] == ["relaxed_lasso", "relaxed_elastic_net"]
    pf = r.penalized["relaxed_lasso"]
    m = model_at(d, r, "relaxed_lasso", pf.alpha)
    assert np.allclose(m.coef, pf.model.coef, rtol=0, atol=1e-10)
    models = r.models()
    pred = heldout_predictions(d, r, models)
    assert set(pred) == set(models)
    # The held-out prediction of a fold equals the relaxed fit on the other folds.
    k = 0
    rows = r.fold_ids == k
    sub = d.subset(~rows)
    again = fit_models_at(sub, r.settings, {n: p.alpha for n, p in r.penalized.items()},
                          {"relaxed_lasso": pf.relaxation, "relaxed_elastic_net": r.penalized["relaxed_elastic_net"].relaxation})
    assert np.allclose(again["relaxed_lasso"].predict(d.X[rows]), pred["relaxed_lasso"][rows], atol=1e-8)
    with pytest.raises(ModelError, match="no relaxation given for relaxed_lasso"):
        fit_models_at(d, FitSettings(relaxed=True, alpha=0.1))
    # Fits without the relaxed families are unchanged.
    plain = fit_all(d, FitSettings(folds=4, n_penalties=25))
    assert list(plain.penalized) == ["ridge", "lasso", "elastic_net"]
    assert np.array_equal(plain.penalized["lasso"].path.coef, r.penalized["lasso"].path.coef)


def test_unpenalized_columns_stay_in_the_relaxed_refit():
    d = _design()
    r = fit_all(d, FitSettings(folds=4, n_penalties=25, alpha=2.0, relaxation=1.0, penalty_factors=(("x3", 0.0),)))
    m = r.penalized["relaxed_lasso"].model
    sel = np.flatnonzero(m.coef != 0)
    assert 3 in sel
    ref = sm.WLS(d.y, sm.add_constant(d.X[:, sel]), weights=d.weights).fit()
    assert np.max(np.abs(m.coef[sel] - ref.params[1:])) < 1e-8


def test_cli_relaxed_json_and_session_report(tmp_path, capsys):
    d = _design(n=120)
    frame = pd.DataFrame(d.X, columns=NAMES)
    frame["y"] = d.y
    frame["g"] = d.groups
    csv = tmp_path / "t.csv"
    frame.to_csv(csv, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(csv), "--target", "y", "--groups", "g", "--relaxed", "--json", str(out)]) == 0
    js = json.loads(out.read_text())
    rl = js["models"]["relaxed_lasso"]
    assert rl["relaxation"] in RELAXATION_GRID and len(rl["relaxation_cv"]["mean"]) == 5
    assert js["settings"]["relaxed"] is True and rl["convergence"]["converged"] is True
    assert main(["fit", str(csv), "--target", "y", "--relaxation", "1.5"]) == 2
    assert "--relaxation: 1.5 is outside [0, 1]" in capsys.readouterr().err
    assert main(["fit", str(csv), "--target", "y", "--relaxation", "0.5", "--json", str(out)]) == 0
    assert json.loads(out.read_text())["models"]["relaxed_elastic_net"]["relaxation"] == 0.5

    from regbench.project import load_project, save_project
    from regbench.report.html import report_html
    from regbench.session import Session

    s = Session.from_table(table_from_frame(frame, source="t.csv"), Roles(target="y", groups="g"),
                           FitSettings(folds=3, n_penalties=15, relaxed=True))
    s.set_bootstrap(4)
    from regbench.analysis.stress import StressConfig, stress_refit

    s.add_stress(StressConfig("x0", "rescale", 2.0))
    s.compute()
    moved = s.stress_results()[0].shifts
    assert moved["relaxed_lasso"].shift_rmse > 0 and moved["relaxed_elastic_net"].shift_rmse > 0
    rel = {n: pf.relaxation for n, pf in s.results.penalized.items() if pf.relaxation is not None}
    again = stress_refit(s.design, s.settings, s.alphas(), StressConfig("x0", "rescale", 2.0), rel)
    assert "relaxed_lasso" in again.models
    assert {"relaxed_lasso", "relaxed_elastic_net"} <= set(s.models())
    assert "relaxed_lasso" in s.stability.selected_freq
    s.set_alpha("relaxed_lasso", 0.05)
    html = report_html(s)
    assert "Relaxed lasso" in html and "relaxation γ" in html
    path = tmp_path / "r.regbench"
    save_project(s, path)
    back = load_project(path)
    assert back.cache_status == "used"
    assert back.results.penalized["relaxed_lasso"].relaxation == s.results.penalized["relaxed_lasso"].relaxation
    assert back.models()["relaxed_lasso"].alpha == 0.05
    # A damaged relaxation in session.json is refused with the field named.
    import hashlib
    import zipfile

    from regbench.errors import ProjectError

    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    doc = json.loads(members["session.json"])
    assert doc["settings"]["relaxed"] is True and "relaxation" not in doc["settings"]
    doc["settings"]["relaxation"] = 2
    members["session.json"] = json.dumps(doc).encode()
    man = json.loads(members["manifest.json"])
    man["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                      for n, b in members.items() if n != "manifest.json"]
    members["manifest.json"] = json.dumps(man).encode()
    bad = tmp_path / "bad.regbench"
    with zipfile.ZipFile(bad, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    with pytest.raises(ProjectError, match="settings.relaxation"):
        load_project(bad, compute=False)

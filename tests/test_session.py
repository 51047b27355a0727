"""Session document: edits, undo, observers, the pure compute / install split.

Outside checks: the model at a user-set α is compared with scikit-learn's Lasso
on the same weighted-standardized columns (same objective: sklearn's
``(1/(2·Σw))·Σ wᵢ rᵢ² + α‖β‖₁`` with sample weights is ours with ρ = 1).
"""

from __future__ import annotations

import pathlib

import numpy as np
import pytest

from regbench.analysis.stress import StressConfig
from regbench.data.design import Roles
from regbench.errors import DataError
from regbench.models.results import FitSettings
from regbench.session import Session, UNDO_DEPTH

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"
# No exact aliases here, so the lasso solution is unique and comparable with sklearn.
ROLES = Roles(target="yield_kg_m2", predictors=("day_temp_c", "night_temp_c", "light_hours", "humidity_pct",
                                                 "co2_ppm", "irrigation_l_m2", "ec_ms_cm"),
              weights="plants_per_bed", groups="glasshouse")
SETTINGS = FitSettings(folds=4, seed=3, n_penalties=30)


@pytest.fixture(scope="module")
def fitted():
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    s.set_bootstrap(0)
    s.compute()
    return s


def fresh(fitted_session) -> Session:
    s = Session.from_table(fitted_session.table, ROLES, SETTINGS)
    s.apply_results(fitted_session.compute_results())
    return s


def test_compute_results_is_pure_and_apply_installs():
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    s.set_bootstrap(0)
    events = []
    s.subscribe(lambda ev, d: events.append(ev))
    before = (s.results, s.stability, s.chosen_alpha, s.dirty)
    computed = s.compute_results()
    assert (s.results, s.stability, s.chosen_alpha, s.dirty) == before
    assert events == []
    assert s.models() == {}
    assert s.apply_results(computed) is True
    assert s.results is computed.results
    assert events == ["results"]
    assert set(s.models()) == {"ols", "ridge", "lasso", "elastic_net"}


def test_apply_results_refuses_results_of_other_settings(fitted):
    s = fresh(fitted)
    computed = s.compute_results()
    s.set_settings(FitSettings(folds=3, seed=3, n_penalties=30))
    assert s.results is None
    assert s.apply_results(computed) is False
    assert s.results is None


def test_user_alpha_matches_sklearn_lasso(fitted):
    from sklearn.linear_model import Lasso

    s = fresh(fitted)
    s.set_alpha("lasso", 0.002)
    m = s.models()["lasso"]
    assert m.alpha == 0.002
    d = s.design
    Xs, mean, sd = d.standardized()
    # Reference: scikit-learn Lasso on the same standardized columns and weights, tight tolerance.
    ref = Lasso(alpha=0.002, tol=1e-12, max_iter=200_000).fit(Xs, d.y, sample_weight=d.weights)
    np.testing.assert_allclose(m.coef_std, ref.coef_, atol=1e-7)
    np.testing.assert_allclose(m.coef, ref.coef_ / sd, atol=1e-7)
    # Back to the CV choice.
    s.set_alpha("lasso", None)
    assert s.models()["lasso"].alpha == s.results.penalized["lasso"].alpha
    with pytest.raises(DataError, match="positive"):
        s.set_alpha("lasso", -1.0)
    with pytest.raises(DataError, match="not a penalized model"):
        s.set_alpha("ols", 1.0)


def test_extra_fit_is_the_family_at_that_alpha(fitted):
    from regbench.models.engine import model_at

    s = fresh(fitted)
    name = s.add_extra_fit("ridge", 0.5)
    models = s.models()
    assert name in models and models[name].name == name
    ref = model_at(s.design, s.results, "ridge", 0.5)
    np.testing.assert_array_equal(models[name].coef, ref.coef)
    assert name in s.agreement().models
    s.remove_extra_fit(name)
    assert name not in s.models()
    with pytest.raises(DataError):
        s.remove_extra_fit(name)


def test_undo_restores_roles_design_and_results(fitted):
    s = fresh(fitted)
    results, design = s.results, s.design
    s.set_roles(Roles(target="yield_kg_m2", predictors=("day_temp_c", "co2_ppm"), weights="plants_per_bed"))
    assert s.results is None and s.design.columns == ("day_temp_c", "co2_ppm")
    assert s.can_undo
    assert s.undo() is True
    assert s.design is design and s.results is results and s.roles == ROLES


def test_bad_roles_change_nothing(fitted):
    s = fresh(fitted)
    with pytest.raises(DataError, match="not in the table"):
        s.set_roles(Roles(target="no_such_column"))
    assert s.roles == ROLES and not s.can_undo


def test_notes_typing_is_one_undo_step_and_depth_is_bounded(fitted):
    s = fresh(fitted)
    for text in ("a", "ab", "abc"):
        s.set_notes(text)
    s.set_view_state("tab", 2)
    assert s.undo() and s.view_state == {}
    assert s.undo() and s.notes == ""
    assert not s.can_undo
    for k in range(UNDO_DEPTH + 10):
        s.set_bootstrap(k + 1)
    n = 0
    while s.undo():
        n += 1
    assert n == UNDO_DEPTH


def test_observers_hear_every_edit_and_can_leave(fitted):
    s = fresh(fitted)
    heard = []

    def cb(ev, detail):
        heard.append(ev)

    s.subscribe(cb)
    s.set_alpha("ridge", 0.1)
    s.add_stress(StressConfig("co2_ppm", "shuffle"))
    s.remove_stress(0)
    s.set_notes("x")
    s.set_view_state("split", [1, 2])
    s.undo()
    s.unsubscribe(cb)
    s.set_notes("y")
    assert heard == ["alpha", "stress", "stress", "notes", "view_state", "undo"]


def test_stress_edits_and_refusals(fitted):
    s = fresh(fitted)
    s.add_stress(StressConfig("light_hours", "noise", 1.0))
    (res,) = s.stress_results()
    assert res.column == "light_hours"
    with pytest.raises(DataError, match="not a predictor"):
        s.add_stress(StressConfig("vpd_kpa", "noise", 1.0))
    with pytest.raises(DataError, match="share of rows"):
        s.add_stress(StressConfig("co2_ppm", "shuffle", 3.0))
    assert len(s.stress_configs) == 1
    with pytest.raises(DataError, match="view state"):
        s.set_view_state("bad", object())


def test_alpha_change_makes_stability_stale():
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    s.set_bootstrap(4)
    s.compute()
    assert s.stability is not None and s.stability_current
    assert s.stability.n_boot == 4
    s.set_alpha("ridge", 1.0)
    assert s.stability is not None and not s.stability_current


def test_dirty_follows_edits():
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    assert not s.dirty
    s.set_notes("changed")
    assert s.dirty


def test_progress_rises_and_cancel_stops_without_change():
    from regbench.errors import Cancelled

    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    s.set_bootstrap(3)
    seen = []
    computed = s.compute_results(progress=lambda d, t, m: seen.append((d, t, m)))
    done = [d for d, _, _ in seen]
    assert done == sorted(done) and seen[-1][0] == seen[-1][1] and len({t for _, t, _ in seen}) == 1
    assert computed.stability is not None and s.results is None
    calls = {"n": 0}

    def cancel():
        calls["n"] += 1
        return calls["n"] > 2

    with pytest.raises(Cancelled):
        s.compute(cancel=cancel)
    assert s.results is None and s.stability is None


@pytest.mark.parametrize("bad,field", [
    (FitSettings(folds=1), "folds"), (FitSettings(l1_ratios=(1.0,)), "l1_ratios"),
    (FitSettings(alpha=-0.5), "alpha"), (FitSettings(alpha_rule="smallest"), "alpha_rule"),
    (FitSettings(penalty_ratio=2.0), "penalty_ratio"), (FitSettings(l1_ratios=(0.5, 0.5)), "l1_ratios")])
def test_bad_settings_are_refused_and_change_nothing(bad, field):
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    with pytest.raises(DataError, match=f"setting '{field}'"):
        s.set_settings(bad)
    assert s.settings == SETTINGS and not s.can_undo
    s.set_settings(FitSettings(folds=3, alpha=1))  # an int α is a number too
    assert s.settings.alpha == 1

"""A yes/no outcome through the session, the project file, the report and the CLI.

Checks: the project round trip reproduces every cached number bit for bit (the
format's own definition, FORMAT.md); the recorded threshold and its note survive;
damaged fields are refused with a message naming them; the stress test's
threshold crossings are counted against a direct count on the rows; the
observed share equals the weighted mean probability of every model with a free
intercept (the score equation of the intercept).
"""

from __future__ import annotations

import json
import zipfile

import numpy as np
import pytest

from regbench.analysis.stress import StressConfig
from regbench.data.design import Roles
from regbench.data.reader import table_from_frame
from regbench.demo import GRADING_ROLES, grading
from regbench.errors import DataError, ProjectError
from regbench.models.results import FitSettings
from regbench.project import load_project, save_project
from regbench.session import Session

SETTINGS = FitSettings(folds=4, seed=3, n_penalties=15)


@pytest.fixture(scope="module")
def session():
    table = table_from_frame(grading(), "grading.csv")
    s = Session(table, Roles.from_dict(GRADING_ROLES), SETTINGS)
    s.add_stress(StressConfig("firmness_n", "rescale", 0.1))
    s.set_threshold(0.3, "the packhouse re-checks batches at 0.3 or above by hand")
    s.set_bootstrap(0)
    s.compute()
    return s


def test_session_fits_logistic_models_and_assesses_them(session):
    d = session.design
    assert d.outcome == "binary" and d.levels == ("standard", "top")
    assert session.results.outcome == "binary"
    models = session.models()
    assert "logistic" in models and "ols" not in models
    cl = session.classification()
    assert cl is not None and cl.threshold == 0.3 and set(cl.calibration["held_out"]) == set(models)
    share = float(d.weights @ d.y) / d.weights.sum()
    for k, m in models.items():
        assert float(d.weights @ m.predict(d.X)) / d.weights.sum() == pytest.approx(share, rel=1e-6), k
    # The exact aliases of the scenario (decanewtons of newtons, mean of day and night) are set aside as for OLS.
    aside = {sa.column for sa in session.results.logistic.set_aside}
    assert {"firmness_dan", "mean_temp_c"} <= aside


def test_stress_counts_rows_that_cross_the_threshold(session):
    res = session.stress_results()[0]
    d = session.design
    for k, m in session.models().items():
        clean = m.predict(d.X)
        X = d.X.copy()
        j = d.columns.index("firmness_n")
        X[:, j] = X[:, j] * 0.1
        damaged = m.predict(X)
        flip = (clean >= 0.3) != (damaged >= 0.3)
        assert res.shifts[k].crossed_share == pytest.approx(float(d.weights[flip].sum() / d.weights.sum()), abs=1e-12)
    assert any("recorded threshold" in s for s in res.sentences)


def test_threshold_is_checked_and_undoable(session):
    with pytest.raises(DataError, match="between 0 and 1"):
        session.set_threshold(1.5, "no")
    before = session.threshold
    session.set_threshold(0.25, "trial")
    assert session.threshold == {"value": 0.25, "note": "trial"}
    session.undo()
    assert session.threshold == before


def test_project_round_trip_keeps_outcome_threshold_and_results(session, tmp_path):
    path = tmp_path / "grading.regbench"
    save_project(session, path)
    with zipfile.ZipFile(path) as z:
        doc = json.loads(z.read("session.json"))
    assert doc["roles"]["outcome"] == "binary" and doc["roles"]["positive_level"] == "top"
    assert doc["threshold"] == {"value": 0.3, "note": "the packhouse re-checks batches at 0.3 or above by hand"}
    from regbench.project import inspect_project, inspect_text

    text = inspect_text(inspect_project(path))
    assert "outcome      binary; yes = top" in text and "threshold    0.3" in text
    back = load_project(path)
    assert back.cache_status == "used"
    assert back.threshold == session.threshold
    a, b = session.classification(), back.classification()
    assert a.to_dict() == b.to_dict()
    # Reopened exactly: every stored result compares equal by value (arrays included).
    assert back.results == session.results and back.results.logistic == session.results.logistic
    assert b == a and back.stability == session.stability
    assert back.derived_results()["agreement"] == session.derived_results()["agreement"]
    for k in session.models():
        np.testing.assert_array_equal(back.models()[k].coef, session.models()[k].coef)


def _rewrite(path, out, edit):
    with zipfile.ZipFile(path) as z:
        members = {n: z.read(n) for n in z.namelist()}
    doc = json.loads(members["session.json"])
    edit(doc)
    members["session.json"] = json.dumps(doc).encode()
    import hashlib

    man = json.loads(members["manifest.json"])
    for m in man["members"]:
        if m["name"] == "session.json":
            m["size"] = len(members["session.json"])
            m["sha256"] = hashlib.sha256(members["session.json"]).hexdigest()
    members["manifest.json"] = json.dumps(man).encode()
    with zipfile.ZipFile(out, "w") as z:
        for n, data in members.items():
            z.writestr(n, data)


@pytest.mark.parametrize("edit,fragment", [
    (lambda d: d.__setitem__("threshold", {"value": 2, "note": ""}), "field threshold.value"),
    (lambda d: d.__setitem__("threshold", {"value": 0.2}), "field threshold"),
    (lambda d: d["roles"].__setitem__("outcome", "ordinal"), "field roles.outcome"),
    (lambda d: d["roles"].__setitem__("positive_level", "gold"), "field roles"),
])
def test_damaged_binary_fields_are_refused(session, tmp_path, edit, fragment):
    path = tmp_path / "g.regbench"
    save_project(session, path)
    bad = tmp_path / "bad.regbench"
    _rewrite(path, bad, edit)
    with pytest.raises(ProjectError, match=fragment):
        load_project(bad, compute=False)


def test_report_has_the_yes_no_sections(session, tmp_path):
    from regbench.report import render_report

    out = tmp_path / "r.html"
    render_report(session, out)
    html = out.read_text(encoding="utf-8")
    assert "Calibration" in html and "AUC" in html
    assert "a risk score is not a decision" in html.lower()
    assert "0.3" in html and "re-checks batches" in html


def test_bootstrap_stability_of_a_yes_no_outcome(session):
    from regbench.analysis.stability import bootstrap_stability

    st = bootstrap_stability(session.design, session.settings, session.alphas(), n_boot=6, seed=1)
    assert st.models[0] == "logistic" and "lasso" in st.models
    # An exact alias (decanewtons of newtons) is set aside in every refit, as OLS would.
    assert st.set_aside_freq[session.design.columns.index("firmness_dan")] == 1.0
    assert st.set_aside_freq[session.design.columns.index("brix")] == 0.0


def test_agreement_on_probability_and_log_odds_scales(session):
    """Own error on the probability scale is the root Brier score and log-loss is the weighted
    log-loss (scikit-learn ``brier_score_loss`` and ``log_loss`` with sample weights); the log-odds
    pairs compare the models' linear predictors (log-odds computed here directly)."""
    from sklearn.metrics import brier_score_loss, log_loss

    d = session.design
    ag = session.agreement()
    assert ag.scale == "probability" and set(ag.log_loss) == set(ag.models)
    held = session.heldout()
    for k, m in session.models().items():
        p = m.predict(d.X)
        assert ag.own_error[k]["training"] ** 2 == pytest.approx(brier_score_loss(d.y, p, sample_weight=d.weights),
                                                                 rel=1e-10)
        assert ag.log_loss[k]["training"] == pytest.approx(log_loss(d.y, p, sample_weight=d.weights), rel=1e-10)
        assert ag.log_loss[k]["held_out"] == pytest.approx(log_loss(d.y, held[k], sample_weight=d.weights),
                                                           rel=1e-10)
    models = session.models()
    a, b = "logistic", "lasso"
    diff = models[a].linear_predictor(d.X) - models[b].linear_predictor(d.X)
    pair = next(p for p in ag.log_odds_pairs if p.split == "training" and {p.a, p.b} == {a, b})
    sign = 1.0 if pair.a == a else -1.0
    assert pair.rmse == pytest.approx(float(np.sqrt(d.weights @ diff ** 2 / d.weights.sum())), rel=1e-9)
    assert pair.mean_diff == pytest.approx(sign * float(d.weights @ diff / d.weights.sum()), rel=1e-9, abs=1e-12)
    assert any("log-odds" in s for s in ag.sentences) and any("root Brier" in s for s in ag.sentences)
    out = ag.to_dict()
    assert out["scale"] == "probability" and len(out["log_odds_pairs"]) == len(ag.log_odds_pairs)

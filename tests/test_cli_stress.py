"""`regbench stress` on the greenhouse sample: JSON keys, the text summary, and bad input."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from regbench.cli import main
from regbench.demo import GREENHOUSE_ROLES

pytest.importorskip("regbench.models.engine")

SAMPLE = Path(__file__).resolve().parents[1] / "sample_projects" / "greenhouse.csv"
BASE = ["stress", str(SAMPLE), "--target", GREENHOUSE_ROLES["target"], "--weights", "plants_per_bed",
        "--groups", "glasshouse", "--predictors", ",".join(GREENHOUSE_ROLES["predictors"]), "--penalties", "30"]
MODEL_KEYS = {"shift_rmse", "mean_shift", "moved_share", "error_clean", "error_damaged"}


def run(capsys, *extra):
    code = main([*BASE, *extra])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_one_column_json(capsys):
    code, out, err = run(capsys, "--column", "mean_temp_c", "--kind", "shuffle", "--json", "-")
    assert code == 0, err
    js = json.loads(out)
    assert {"column", "kind", "strength", "tolerance", "models", "sentences"} <= set(js)
    assert js["column"] == "mean_temp_c" and js["kind"] == "shuffle" and js["strength"] == 1.0
    assert list(js["models"]) == ["ols", "ridge", "lasso", "elastic_net"]
    for m in js["models"].values():
        assert MODEL_KEYS <= set(m)
    # OLS set mean_temp_c aside (an exact alias in the sample), so it cannot move.
    assert js["models"]["ols"]["shift_rmse"] == 0.0
    assert js["models"]["ridge"]["shift_rmse"] > 0.0
    assert js["sentences"] and "mean_temp_c is shuffled" in js["sentences"][0]


def test_categorical_column_text_summary(capsys):
    code, out, err = run(capsys, "--column", "variety", "--kind", "rescale", "--strength", "2")
    assert code == 0, err
    assert "variety" in out and "RMS shift" in out and "Elastic net" in out


def test_all_columns_ranking(capsys):
    code, out, err = run(capsys, "--all-columns", "--kind", "noise", "--json", "-")
    assert code == 0, err
    js = json.loads(out)
    assert "ranking" in js and "models" not in js
    rk = js["ranking"]
    assert rk["columns"][0] == "variety" and "mean_temp_c" in rk["columns"]
    assert rk["models"]["ols"]["shift_rmse"]["day_temp_f"] == 0.0
    assert set(rk["models"]["lasso"]["order"]) == set(rk["columns"])


@pytest.mark.parametrize("extra,fragment", [
    (["--column", "soil_ph", "--kind", "shuffle"], "'soil_ph' is not a predictor of this design; choose one of: variety"),
    (["--kind", "shuffle"], "--column is required"),
    (["--column", "co2_ppm", "--all-columns", "--kind", "noise"], "not both"),
    (["--column", "co2_ppm", "--kind", "wild", "--strength", "3"], "share of rows"),
    (["--column", "co2_ppm", "--kind", "noise", "--tolerance", "-1"], "tolerance"),
])
def test_bad_input_exits_2_with_one_line(capsys, extra, fragment):
    code, out, err = run(capsys, *extra)
    assert code == 2
    assert err.startswith("regbench stress: ") and err.count("\n") == 1
    assert fragment in err and "Traceback" not in err

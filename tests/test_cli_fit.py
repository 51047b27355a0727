"""`regbench fit` end to end on the greenhouse sample, and `regbench bench --quick`."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from regbench.cli import main
from regbench.demo import GREENHOUSE_ROLES

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_projects" / "greenhouse.csv"
ARGS = ["--target", "yield_kg_m2", "--weights", "plants_per_bed", "--groups", "glasshouse",
        "--predictors", ",".join(GREENHOUSE_ROLES["predictors"])]


def _strict(text):
    def refuse(name):
        raise ValueError(f"non-standard JSON constant {name}")
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def fit_json(tmp_path_factory):
    out = tmp_path_factory.mktemp("fit") / "fit.json"
    assert main(["fit", str(SAMPLE), *ARGS, "--json", str(out)]) == 0
    return _strict(out.read_text(encoding="utf-8"))


def test_fit_json_schema(fit_json):
    d = fit_json
    assert set(d) == {"outcome", "rows_used", "rows_excluded", "unusable", "derived_columns", "read_as_text",
                      "read_notes", "models", "diagnostics", "settings", "ranges"}
    assert d["outcome"] == "numeric"
    # The sample has 576 rows; 3 missing EC readings and 2 missed weighings are left out (demo.py).
    assert d["rows_used"] == 571 and len(d["rows_excluded"]) == 5
    assert all(set(e) == {"row", "column", "reason"} for e in d["rows_excluded"])
    assert list(d["models"]) == ["ols", "ridge", "lasso", "elastic_net"]
    common = {"intercept", "coefficients", "coefficients_standardized"}
    ols = d["models"]["ols"]
    assert set(ols) == common | {"intercept_se", "std_errors", "t_values", "p_values", "kept", "r_squared",
                                 "adj_r_squared", "residual_sd", "df_resid", "observations", "weights_kind",
                                 "inference_note", "cluster_std_errors", "cluster_intercept_se", "n_clusters",
                                 "set_aside"}
    assert {s["column"] for s in ols["set_aside"]} == {"mean_temp_c", "day_temp_f"}
    # A set-aside column has no coefficient: null, never 0.
    assert ols["coefficients"]["mean_temp_c"] is None and ols["coefficients_standardized"]["day_temp_f"] is None
    assert ols["intercept_se"] > 0 and ols["weights_kind"] == "precision" and ols["n_clusters"] == 8
    for s in ols["set_aside"]:
        assert set(s) == {"column", "combination", "intercept", "residual", "alternatives", "reason", "exact",
                          "sentence"}
        assert s["sentence"].startswith(s["column"])
    assert ols["std_errors"]["mean_temp_c"] is None  # NaN for a set-aside column becomes null
    for name in ("ridge", "lasso", "elastic_net"):
        m = d["models"][name]
        assert set(m) == common | {"alpha", "l1_ratio", "alpha_rule", "path", "cv", "convergence", "reference_levels"}
        # Penalized fits weigh every level of the category: its first level has its own coefficient too.
        ref = m["reference_levels"]
        assert len(ref) == 1 and ref[0].startswith("variety=") and ref[0] not in ols["coefficients"]
        assert set(m["coefficients"]) == set(ols["coefficients"]) | set(ref)
        assert m["convergence"]["converged"] is True and m["convergence"]["max_gap"] <= m["convergence"]["tolerance"]
        assert m["alpha_rule"] == "cv_min" and m["alpha"] == m["cv"]["alpha_min"]
        assert set(m["cv"]) == {"alphas", "mean", "se", "alpha_min", "alpha_1se", "folds", "grouped", "at_edge"}
        assert m["cv"]["folds"] == 5 and m["cv"]["grouped"] is True
        assert len(m["path"]["alphas"]) == 100
        assert set(m["path"]["coefficients"]) == set(m["coefficients"])
        assert all(len(v) == 100 for v in m["path"]["coefficients"].values())
    assert [m["l1_ratio"] for m in list(d["models"].values())[1:]] == [0.0, 1.0, 0.5]
    assert set(d["diagnostics"]) == {"vif", "condition_indices", "near_dependencies"}
    assert d["settings"]["folds"] == 5 and d["settings"]["l1_ratios"] == [0.5]


def test_fit_json_agrees_with_the_exact_aliases(fit_json):
    ols = fit_json["models"]["ols"]
    comb = {s["column"]: s for s in ols["set_aside"]}
    # Mathematical fact (demo.py builds them so): mean = (day + night)/2 and °F = 32 + 1.8·°C.
    assert comb["mean_temp_c"]["combination"] == pytest.approx({"day_temp_c": 0.5, "night_temp_c": 0.5}, abs=1e-9)
    assert comb["day_temp_f"]["combination"] == pytest.approx({"day_temp_c": 1.8}, abs=1e-9)
    assert comb["day_temp_f"]["intercept"] == pytest.approx(32.0, abs=1e-7)


def test_fit_text_summary(capsys):
    assert main(["fit", str(SAMPLE), *ARGS]) == 0
    out = capsys.readouterr().out
    for fragment in ("571 rows used", "set aside", "Ridge", "Lasso", "Elastic net", "grouped cross-validation",
                     "(1/(2W))", "associations, not causes"):
        assert fragment in out


def test_fit_extra_l1_ratio_and_fixed_alpha(tmp_path):
    out = tmp_path / "f.json"
    assert main(["fit", str(SAMPLE), *ARGS, "--l1-ratio", "0.5,0.9", "--alpha", "0.01", "--penalties", "20",
                 "--json", str(out)]) == 0
    d = _strict(out.read_text())
    assert list(d["models"]) == ["ols", "ridge", "lasso", "elastic_net", "elastic_net_0.9"]
    assert all(d["models"][n]["alpha_rule"] == "fixed" and d["models"][n]["alpha"] == 0.01
               for n in ("ridge", "lasso", "elastic_net", "elastic_net_0.9"))


@pytest.mark.parametrize("extra,fragment", [
    (["--weights", "plant_count"], "plant_count"),
    (["--groups", "house"], "house"),
    (["--folds", "12"], "only 8 groups for 12 folds"),
])
def test_fit_bad_input_exits_2_with_one_line(capsys, extra, fragment):
    args = list(ARGS)
    for opt in ("--weights", "--groups"):
        if opt in extra:
            i = args.index(opt)
            del args[i:i + 2]
    code = main(["fit", str(SAMPLE), *args, *extra])
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("regbench fit: ") and err.count("\n") == 1 and fragment in err


def test_fit_as_a_whole_process(tmp_path):
    out = tmp_path / "p.json"
    proc = subprocess.run([sys.executable, "-m", "regbench", "fit", str(SAMPLE), *ARGS, "--json", "-"],
                          capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    d = _strict(proc.stdout)
    assert d["rows_used"] == 571
    assert np.isfinite(d["models"]["lasso"]["alpha"])


def test_bench_targets_refuses_an_unknown_target_by_name(tmp_path, capsys):
    from regbench.cli import main

    assert main(["bench", "--targets", "--only", "startup,speed"]) == 2
    assert "unknown target speed" in capsys.readouterr().err


def test_bench_quick_runs(tmp_path):
    env = dict(os.environ, REGBENCH_BENCH_DIR=str(tmp_path))
    proc = subprocess.run([sys.executable, "-m", "regbench", "bench", "--quick"], capture_output=True, text=True,
                          timeout=300, cwd=tmp_path, env=env)
    assert proc.returncode == 0, proc.stderr
    assert "faster" in proc.stdout and "peak memory" in proc.stdout
    assert "stress test over all 10 columns" in proc.stdout

"""Count rows against the expanded table; precision weights as before.

Sources: the diabetes data shipped with scikit-learn (Efron et al. 2004), made into a
compact table by writing some rows several times and compressing the duplicates into a
count column; statsmodels GLM (Gaussian) with ``freq_weights`` on the compact table and
statsmodels OLS on the expanded rows are the references; scikit-learn ElasticNet on the
expanded rows for the penalized fit at a fixed α.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, design_from_arrays, table_from_frame
from regbench.errors import DataError
from regbench.models.ols import fit_ols


@pytest.fixture(scope="module")
def compact():
    from sklearn.datasets import load_diabetes

    data = load_diabetes(scaled=False)
    X = data.data[:47, [0, 2, 3, 4, 8]]  # age, bmi, bp, s1, s5
    y = data.target[:47]
    counts = np.random.default_rng(7).integers(1, 7, size=47).astype(float)  # whole counts 1..6
    expanded_X = np.repeat(X, counts.astype(int), axis=0)
    expanded_y = np.repeat(y, counts.astype(int))
    # The compact table is what compressing the duplicated rows of the expanded one gives.
    uniq, inv, cnt = np.unique(np.column_stack([expanded_X, expanded_y]), axis=0, return_inverse=True,
                               return_counts=True)
    assert cnt.sum() == counts.sum() and len(uniq) == 47
    return X, y, counts, expanded_X, expanded_y


def test_count_rows_give_the_expanded_tables_inference(compact):
    import statsmodels.api as sm

    X, y, counts, eX, ey = compact
    r = fit_ols(design_from_arrays(X, y, weights=counts, weights_kind="counts"))
    ols = sm.OLS(ey, sm.add_constant(eX)).fit()  # statsmodels OLS on the expanded rows
    glm = sm.GLM(y, sm.add_constant(X), family=sm.families.Gaussian(), freq_weights=counts).fit()
    for ref in (ols, glm):
        np.testing.assert_allclose(r.coef, ref.params[1:], rtol=1e-9)
        np.testing.assert_allclose(r.intercept, ref.params[0], rtol=1e-9)
        np.testing.assert_allclose(r.std_errors, ref.bse[1:], rtol=1e-9)
        np.testing.assert_allclose(r.intercept_se, ref.bse[0], rtol=1e-9)
    np.testing.assert_allclose(r.p_values, ols.pvalues[1:], rtol=1e-7)
    assert r.df_resid == ols.df_resid == counts.sum() - 6
    assert r.residual_sd == pytest.approx(np.sqrt(ols.scale), rel=1e-10)
    assert r.r_squared == pytest.approx(ols.rsquared, rel=1e-10)
    assert r.adj_r_squared == pytest.approx(ols.rsquared_adj, rel=1e-10)
    assert r.observations == counts.sum() and r.n_obs == 47 and r.weights_kind == "counts"


def test_precision_weights_keep_row_counting_inference(compact):
    import statsmodels.api as sm

    X, y, counts, *_ = compact
    r = fit_ols(design_from_arrays(X, y, weights=counts))
    ref = sm.WLS(y, sm.add_constant(X), weights=counts).fit()  # statsmodels WLS: one observation per row
    np.testing.assert_allclose(r.std_errors, ref.bse[1:], rtol=1e-9)
    assert r.df_resid == ref.df_resid == 47 - 6 and r.weights_kind == "precision"


def test_penalized_fit_of_count_rows_is_the_expanded_fit(compact):
    from sklearn.linear_model import ElasticNet

    from regbench.models.engine import fit_models_at
    from regbench.models.results import FitSettings

    X, y, counts, eX, ey = compact
    models = fit_models_at(design_from_arrays(X, y, weights=counts, weights_kind="counts"),
                           FitSettings(alpha=0.05))
    # scikit-learn ElasticNet on the expanded rows, standardized by their mean and population SD:
    # the same objective at the same α (our α = sklearn's alpha; l1_ratio the same).
    mu, sd = eX.mean(axis=0), eX.std(axis=0)
    ref = ElasticNet(alpha=0.05, l1_ratio=0.5, tol=1e-14, max_iter=1_000_000).fit((eX - mu) / sd, ey)
    np.testing.assert_allclose(models["elastic_net"].coef_std, ref.coef_, atol=1e-6)


def test_counts_on_the_command_line_and_fractional_counts_refused(compact, tmp_path, capsys):
    from regbench.cli import main

    X, y, counts, eX, ey = compact
    frame = pd.DataFrame(X, columns=["age", "bmi", "bp", "s1", "s5"]).assign(y=y, n=counts)
    path = tmp_path / "compact.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(path), "--target", "y", "--weights", "n", "--weights-kind", "counts",
                 "--alpha", "0.1", "--json", str(out)]) == 0
    ols = json.loads(out.read_text())["models"]["ols"]
    assert ols["weights_kind"] == "counts" and ols["df_resid"] == counts.sum() - 6
    frame.loc[4, "n"] = 2.5
    frame.to_csv(path, index=False)
    assert main(["fit", str(path), "--target", "y", "--weights", "n", "--weights-kind", "counts"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "row 5" in err[0] and "'n'" in err[0] and "whole number" in err[0]


def test_weights_kind_is_kept_in_roles_and_old_roles_read_as_precision():
    roles = Roles(target="y", weights="n", weights_kind="counts")
    assert Roles.from_dict(roles.to_dict()) == roles
    old = {k: v for k, v in roles.to_dict().items() if k != "weights_kind"}
    assert Roles.from_dict(old).weights_kind == "precision"
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": [1.0, 3.0, 2.0, 5.0], "n": [1.0, 2.0, 1.0, 3.0]})
    with pytest.raises(DataError, match="weights kind 'often'"):
        build_design(table_from_frame(frame), Roles(target="y", weights="n", weights_kind="often"))

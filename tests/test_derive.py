"""Derived columns: log, log1p, sqrt, square, standardize and product, without code.

References: numpy's elementwise functions for the values; statsmodels OLS on the
same columns built by hand, on the Longley data that statsmodels ships (NIST StRD
"Longley"), for the fit; the set-aside combination of a standardized column is
the exact affine map x -> (x - mean) / sd (a mathematical fact).
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, table_from_frame
from regbench.data.derive import OPERATIONS, apply_derived, make_derived, parse_derive
from regbench.errors import DataError
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings
from regbench.session import Session


def _longley():
    sm_data = pytest.importorskip("statsmodels.datasets.longley")
    frame = sm_data.load_pandas().data
    return frame[["TOTEMP", "GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]].astype(float)


def _table(frame):
    return table_from_frame(frame, source="test table")


def test_every_operation_matches_numpy():
    # Reference: numpy's log, log1p, sqrt, square, and mean/std (population SD).
    x = np.array([0.5, 1.0, 2.0, 4.0, np.nan, 9.0])
    z = np.array([1.0, -2.0, 3.0, 0.5, 2.0, np.nan])
    table = _table(pd.DataFrame({"x": x, "z": z}))
    want = {
        "log(x)": np.log(x), "log(1+x)": np.log1p(x), "sqrt(x)": np.sqrt(x), "square(x)": x ** 2,
        "standardized(x)": (x - np.nanmean(x)) / np.nanstd(x), "x*z": x * z,
    }
    specs = [make_derived(op, ["x", "z"] if op == "product" else ["x"]) for op in OPERATIONS]
    out = apply_derived(table, specs)
    for d in specs:
        got = out.frame[d.name].to_numpy(dtype=float)
        np.testing.assert_array_equal(np.isnan(got), np.isnan(want[d.name]))
        np.testing.assert_allclose(got[~np.isnan(got)], want[d.name][~np.isnan(got)], rtol=1e-15)
        assert out.columns[d.name].kind == "numeric"
    assert "log(x)" not in table.frame  # the loaded table is never changed


@pytest.mark.parametrize("text, fragment", [
    ("log", "is not operation:column"),
    ("exp:x", "'exp' is not an operation"),
    ("__import__('os').system('true'):x", "is not an operation"),
    ("product:x", "takes two columns"),
    ("log:x,z", "takes one column"),
    ("log:", "takes one column"),
])
def test_parse_refuses_with_one_line(text, fragment):
    with pytest.raises(DataError) as err:
        parse_derive(text)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_log_of_zeros_or_negatives_is_refused_with_the_count():
    table = _table(pd.DataFrame({"price": [3.0, 0.0, 2.0, -1.0, 5.0, 0.0], "y": [1.0, 2, 3, 4, 5, 7]}))
    with pytest.raises(DataError) as err:
        apply_derived(table, [parse_derive("log:price")])
    msg = str(err.value)
    assert "3 rows of 'price' hold 0 or less" in msg and "first: row 2" in msg and "log1p" in msg
    with pytest.raises(DataError, match="1 row of 'price' holds a negative value"):
        apply_derived(table, [parse_derive("sqrt:price")])
    # log(1 + x) takes the zeros
    out = apply_derived(table, [parse_derive("log1p:price")]) if (table.frame["price"] > -1).all() else None
    assert out is None  # -1 is refused: log(1 + x) needs values above -1


def test_name_clash_unknown_and_text_columns_are_refused():
    table = _table(pd.DataFrame({"x": [1.0, 2, 3], "log(x)": [0.0, 1, 2], "kind": ["a", "b", "a"]}))
    with pytest.raises(DataError, match="already exists"):
        apply_derived(table, [parse_derive("log:x")])
    with pytest.raises(DataError, match="'nope' is not a column"):
        apply_derived(table, [parse_derive("square:nope")])
    with pytest.raises(DataError, match="'kind' is categorical, not numeric"):
        apply_derived(table, [parse_derive("product:x,kind")])


def test_fit_with_derived_columns_matches_statsmodels_on_longley():
    # Reference: statsmodels OLS on log(GNP) and GNP*POP built by hand (NIST StRD Longley data).
    sm = pytest.importorskip("statsmodels.api")
    frame = _longley()
    table = _table(frame)
    roles = Roles(target="TOTEMP", predictors=("GNPDEFL", "UNEMP", "ARMED", "YEAR", "log(GNP)", "GNP*POP"),
                  derived=(parse_derive("log:GNP"), parse_derive("product:GNP,POP")))
    design = build_design(table, roles)
    res = fit_all(design, FitSettings(folds=4, n_penalties=20))
    X = frame[["GNPDEFL", "UNEMP", "ARMED", "YEAR"]].assign(**{"log(GNP)": np.log(frame["GNP"]),
                                                               "GNP*POP": frame["GNP"] * frame["POP"]})
    # statsmodels solves by pseudo-inverse on the columns it is given; on Longley's raw columns
    # (YEAR ~ 1950 beside an intercept, GNP*POP ~ 1e7) that loses digits, so it gets the
    # columns centered and scaled, and its slopes are mapped back to the original units.
    mean, sd = X.mean(), X.std(ddof=0)
    ref = sm.OLS(frame["TOTEMP"], sm.add_constant((X - mean) / sd)).fit()
    for c in X.columns:
        j = design.columns.index(c)
        assert res.ols.coef[j] == pytest.approx(ref.params[c] / sd[c], rel=1e-8)
        assert res.ols.std_errors[j] == pytest.approx(ref.bse[c] / sd[c], rel=1e-8)
    np.testing.assert_allclose(res.ols.model.predict(design.X), ref.fittedvalues.to_numpy(), rtol=1e-11)


def test_a_derived_column_takes_part_in_the_set_aside_explanations():
    # standardized(x) = -mean/sd + x/sd exactly, so OLS must set one of the two aside and say how.
    rng = np.random.default_rng(7)
    x = rng.normal(10, 3, 60)
    frame = pd.DataFrame({"x": x, "u": rng.normal(size=60), "y": 2 * x + rng.normal(size=60)})
    roles = Roles(target="y", derived=(parse_derive("standardize:x"),))
    design = build_design(_table(frame), roles)
    assert "standardized(x)" in design.columns
    res = fit_all(design, FitSettings(folds=3, n_penalties=10))
    aside = {s.column: s for s in res.ols.set_aside}
    assert len(aside) == 1
    (col, s), = aside.items()
    other = "x" if col == "standardized(x)" else "standardized(x)"
    slope = 1 / x.std() if col == "standardized(x)" else x.std()
    assert s.combination[other] == pytest.approx(slope, rel=1e-9)


def test_cli_fit_new_and_reopen_keep_derived_columns(tmp_path):
    rng = np.random.default_rng(3)
    n = 80
    frame = pd.DataFrame({"price": rng.uniform(1, 9, n), "income": rng.uniform(2, 5, n),
                          "group": np.repeat(np.arange(8), 10)})
    frame["sales"] = 3 * np.log(frame["price"]) + frame["price"] * frame["income"] + rng.normal(size=n)
    csv = tmp_path / "shop.csv"
    frame.to_csv(csv, index=False)
    base = [sys.executable, "-m", "regbench"]
    args = ["--target", "sales", "--predictors", "price,income", "--derive", "log:price",
            "--derive", "product:price,income", "--groups", "group", "--folds", "4", "--penalties", "20"]
    out = subprocess.run(base + ["fit", str(csv), *args, "--json", "-"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert set(doc["models"]["ols"]["coefficients"]) == {"price", "income", "log(price)", "price*income"}
    assert [d["name"] for d in doc["derived_columns"]] == ["log(price)", "price*income"]

    project = tmp_path / "shop.regbench"
    out = subprocess.run(base + ["new", str(csv), *args, "--bootstrap", "0", "-o", str(project)],
                         capture_output=True, text=True, timeout=180)
    assert out.returncode == 0, out.stderr
    from regbench.project import load_project

    session = load_project(str(project))
    assert [d.spec for d in session.roles.derived] == ["log:price", "product:price,income"]
    assert "log(price)" not in session.table.names  # the stored table holds only what was loaded
    j = session.design.columns.index("log(price)")
    np.testing.assert_array_equal(session.design.X[:, j], np.log(frame["price"].to_numpy()))

    bad = subprocess.run(base + ["fit", str(csv), "--target", "sales", "--derive", "log:group,price"],
                         capture_output=True, text=True, timeout=60)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr
    assert len(bad.stderr.strip().splitlines()) == 1 and "takes one column" in bad.stderr


def test_session_adds_and_removes_derived_columns_with_undo():
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"a": rng.uniform(1, 2, 40), "b": rng.normal(size=40)})
    frame["y"] = frame["a"] + rng.normal(size=40)
    session = Session(_table(frame), Roles(target="y", predictors=("a", "b")), FitSettings(folds=3))
    name = session.add_derived("square", ["a"])
    assert name == "square(a)" and "square(a)" in session.design.columns
    assert "square(a)" in session.columns_table.names
    session.add_derived("product", ["square(a)", "b"])  # built on a derived column
    assert "square(a)*b" in session.design.columns
    session.remove_derived("square(a)")  # takes the product built on it too
    assert session.roles.derived == () and session.design.columns == ("a", "b")
    session.undo()
    assert [d.name for d in session.roles.derived] == ["square(a)", "square(a)*b"]
    with pytest.raises(DataError, match="0 or less"):
        session.add_derived("log", ["b"])
    assert len(session.roles.derived) == 2  # nothing changed


def test_damaging_a_column_spoils_the_columns_derived_from_it():
    # A feed that goes bad spoils what is computed from it: the derived columns follow the damage
    # as fixed transforms (a mathematical fact checked against numpy on the damaged values).
    from regbench.analysis.stress import StressConfig, damaged_design, run_stress

    rng = np.random.default_rng(9)
    n = 120
    frame = pd.DataFrame({"price": rng.uniform(1, 9, n), "income": rng.uniform(2, 5, n)})
    frame["sales"] = 3 * np.log(frame["price"]) + frame["income"] + rng.normal(size=n)
    roles = Roles(target="sales", derived=(parse_derive("log:price"), parse_derive("product:price,income"),
                                           parse_derive("standardize:price"), parse_derive("square:log(price)")))
    design = build_design(_table(frame), roles)
    col = {c: design.X[:, j] for j, c in enumerate(design.columns)}
    price = col["price"]

    bad = damaged_design(design, StressConfig("price", "rescale", 1.8))
    got = {c: bad.X[:, j] for j, c in enumerate(design.columns)}
    np.testing.assert_allclose(got["price"], 1.8 * price, rtol=1e-15)
    np.testing.assert_allclose(got["log(price)"], np.log(1.8 * price), rtol=1e-13)
    np.testing.assert_allclose(got["price*income"], 1.8 * price * col["income"], rtol=1e-13)
    np.testing.assert_allclose(got["standardized(price)"], (1.8 * price - price.mean()) / price.std(), rtol=1e-9)
    np.testing.assert_allclose(got["square(log(price))"], np.log(1.8 * price) ** 2, rtol=1e-12)
    np.testing.assert_array_equal(got["income"], col["income"])

    shuffled = damaged_design(design, StressConfig("price", "shuffle", None, seed=4))
    sp = shuffled.X[:, design.columns.index("price")]
    assert not np.array_equal(sp, price)
    np.testing.assert_allclose(shuffled.X[:, design.columns.index("log(price)")], np.log(sp), rtol=1e-13)

    # A model that uses only log(price) moves when price breaks.
    from regbench.models.results import LinearModel

    coef = np.zeros(design.p)
    coef[design.columns.index("log(price)")] = 3.0
    only_log = LinearModel("ols", design.columns, 0.0, coef, coef)
    res = run_stress(design, {"ols": only_log}, StressConfig("price", "rescale", 1.8))
    assert "log(price)" in res.columns
    assert any("Computed from price, log(price), price*income" in t for t in res.sentences)
    assert res.shifts["ols"].mean_shift == pytest.approx(3 * np.log(1.8), rel=1e-12)


def test_cli_stress_takes_derived_columns_and_damages_them_with_their_source(tmp_path):
    """`regbench stress --derive …` fits with the derived columns and damages them with their source:
    the command's shifts are the ones run_stress gives on the session built with the same choices
    (the same engine through its Python entry point), and they differ from a fit without them."""
    from regbench.analysis.stress import StressConfig, run_stress
    from regbench.models.results import FitSettings
    from regbench.session import Session

    rng = np.random.default_rng(21)
    n = 90
    frame = pd.DataFrame({"price": rng.uniform(1, 9, n), "income": rng.uniform(2, 5, n)})
    frame["sales"] = 3 * np.log(frame["price"]) + frame["income"] + rng.normal(scale=0.3, size=n)
    csv = tmp_path / "shop.csv"
    frame.to_csv(csv, index=False)
    args = ["--target", "sales", "--predictors", "price,income", "--folds", "4", "--penalties", "15",
            "--column", "price", "--kind", "rescale", "--strength", "1.5"]
    base = [sys.executable, "-m", "regbench", "stress", str(csv)]
    out = subprocess.run(base + args + ["--derive", "log:price", "--json", "-"], capture_output=True, text=True,
                         timeout=120)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    s = Session.from_table_file(str(csv), Roles(target="sales", predictors=("price", "income", "log(price)"),
                                                derived=(parse_derive("log:price"),)),
                                FitSettings(folds=4, n_penalties=15))
    s.set_bootstrap(0)
    s.compute()
    want = run_stress(s.design, s.models(), StressConfig("price", "rescale", 1.5))
    for name, m in doc["models"].items():
        assert m["shift_rmse"] == pytest.approx(want.shifts[name].shift_rmse, rel=1e-9)
    assert "log(price)" in want.columns   # the derived column was damaged with its source
    plain = subprocess.run(base + args + ["--json", "-"], capture_output=True, text=True, timeout=120)
    assert plain.returncode == 0, plain.stderr
    assert json.loads(plain.stdout)["models"]["ols"]["shift_rmse"] != doc["models"]["ols"]["shift_rmse"]

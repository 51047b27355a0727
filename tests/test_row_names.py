"""The ranges sentence names the row it points at the way the table does, on the command line and in the report.

Source for the names: the sample's own CSV file read by pandas (``pandas.read_csv``), whose line N
below the header is "row N" (README: how a table is read); the grading sample's ``batch`` column
holds a different code on every row, the greenhouse sample's ``bed`` repeats every week.
"""

from __future__ import annotations

import pathlib
import re

import pandas as pd
import pytest

from regbench.cli import main
from regbench.data import read_table
from regbench.data.identifiers import row_label_column, with_row_names

ROOT = pathlib.Path(__file__).resolve().parents[1]
GRADING_CSV = ROOT / "sample_projects" / "grading.csv"
GRADING = ROOT / "sample_projects" / "grading.regbench"
GREENHOUSE_CSV = ROOT / "sample_projects" / "greenhouse.csv"
POINTED = re.compile(r"\(most on row (\d+)(?:, (\w+) ([^)]*))?\)")


def _pointed(text: str):
    hits = POINTED.findall(text)
    assert len(hits) == 1, text
    row, column, name = hits[0]
    return int(row), column, name


def test_the_fit_summary_names_the_row_by_the_tables_identifier(capsys):
    assert main(["fit", str(GRADING_CSV), "--target", "top_grade", "--groups", "glasshouse", "--folds", "4",
                 "--penalties", "12"]) == 0
    row, column, name = _pointed(capsys.readouterr().out)
    file = pd.read_csv(GRADING_CSV)
    assert column == "batch" and name == file["batch"].iloc[row - 1]


def test_the_fit_summary_says_only_the_row_number_when_no_column_names_every_row(capsys):
    assert file_has_no_row_label(GREENHOUSE_CSV)
    assert main(["fit", str(GREENHOUSE_CSV), "--target", "yield_kg_m2", "--groups", "glasshouse", "--folds", "4",
                 "--penalties", "12"]) == 0
    row, column, name = _pointed(capsys.readouterr().out)
    assert row >= 1 and column == "" and name == ""


def file_has_no_row_label(path) -> bool:
    frame = pd.read_csv(path)
    # Outside check (pandas): every text column of the greenhouse sample repeats some value.
    return all(frame[c].nunique() < len(frame) for c in frame.columns if frame[c].dtype == object)


def test_the_report_names_the_row_by_the_tables_identifier(tmp_path, capsys):
    out = tmp_path / "r.html"
    assert main(["report", str(GRADING), "-o", str(out)]) == 0
    row, column, name = _pointed(out.read_text(encoding="utf-8"))
    file = pd.read_csv(GRADING_CSV)
    assert column == "batch" and name == file["batch"].iloc[row - 1]


def test_a_row_outside_the_table_or_no_table_leaves_the_sentence_as_it_is():
    table = read_table(GRADING_CSV)
    assert row_label_column(table) == "batch"
    s = "They differ by at most 0.5 on any row (most on row 999999)."
    assert with_row_names(s, table) == s
    assert with_row_names("on any row (most on row 3).", None) == "on any row (most on row 3)."
    named = with_row_names("on any row (most on row 3).", table)
    assert named == f"on any row (most on row 3, batch {pd.read_csv(GRADING_CSV)['batch'].iloc[2]})."


def test_the_reports_rows_table_names_each_row_by_the_tables_identifier(tmp_path):
    out = tmp_path / "r.html"
    assert main(["report", str(GRADING), "-o", str(out)]) == 0
    html = out.read_text(encoding="utf-8")
    part = html.split("Rows where equally good models disagree most", 1)[1].split("</table>", 1)[0]
    file = pd.read_csv(GRADING_CSV)
    named = re.findall(r"<td[^>]*>([^<]*) \(row (\d+)\)</td>", part)
    assert named and "<th class=t>batch</th>" in part
    assert all(name == file["batch"].iloc[int(row) - 1] for name, row in named)


def test_rows_after_blank_lines_are_named_by_their_line_not_their_position(tmp_path):
    # Row numbers count lines below the header, blank ones too (README); the third data line is row 4.
    path = tmp_path / "t.csv"
    path.write_text("code,x,y\nA1,1,2\n\nB2,2,3\nC3,3,5\nD4,4,4\n", encoding="utf-8")
    table = read_table(path)
    assert list(table.row_numbers) == [1, 3, 4, 5]
    from regbench.data.identifiers import row_names

    assert row_names(table, [3, 4], column="code") == ["B2", "C3"]
    assert row_names(table, [2], column="code") == ["row 2"]   # the blank line holds no row
    assert with_row_names("(most on row 4)", table, column="code") == "(most on row 4, code C3)"
    assert with_row_names("(most on row 2)", table, column="code") == "(most on row 2)"

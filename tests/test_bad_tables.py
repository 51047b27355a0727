"""A catalogue of bad tables and bad options: each one ends `regbench fit` with exit status 2 and
one line on stderr that names the file, column, row or setting and what to do; never a traceback.

Each case is (id, file name, content, extra arguments, expected fragment of the line).  Content is
bytes, or a function of the folder that writes the file and returns its name.  Cases that need a
real process (a pipe, a file-size limit, a file the user may not read) are at the end.
"""

from __future__ import annotations

import gzip
import io
import os
import resource
import subprocess
import sys
import zipfile

import numpy as np
import pandas as pd
import pytest

from regbench.cli import main
from regbench.data import Roles, build_design, read_table

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def rows(n=20, fmt="{i},{x}", head="y,x"):
    return (head + "\n" + "".join(fmt.format(i=i, x=(i * i) % 7, g="ab"[i % 2]) + "\n" for i in range(1, n + 1))).encode()


def xlsx(build):
    def write(folder):
        import openpyxl

        wb = openpyxl.Workbook()
        name = build(wb)
        path = os.path.join(folder, name)
        wb.save(path)
        return name
    return write


def formula_book(wb):
    ws = wb.active
    ws.append(["y", "x", "z"])
    for i in range(1, 15):
        ws.append([i, (i * i) % 7, f"=A{i + 1}*2"])  # openpyxl stores formulas without a computed value
    return "formula.xlsx"


def empty_first_sheet(wb):
    wb.active.title = "Notes"
    ws = wb.create_sheet("Data")
    ws.append(["y", "x"])
    for i in range(1, 15):
        ws.append([i, i % 3])
    return "sheets.xlsx"


def entity_book(folder):
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["y", "x"])
    for i in range(1, 15):
        ws.append([i, i % 3])
    buf = io.BytesIO()
    wb.save(buf)
    out = os.path.join(folder, "entity.xlsx")
    with zipfile.ZipFile(io.BytesIO(buf.getvalue())) as zin, zipfile.ZipFile(out, "w") as zout:
        for info in zin.infolist():
            data = zin.read(info)
            if info.filename == "xl/worksheets/sheet1.xml":
                # A nested entity (the start of an expansion bomb); a workbook never needs one.
                data = b'<!DOCTYPE x [<!ENTITY a "aaaaaaaaaa"><!ENTITY b "&a;&a;&a;&a;&a;&a;&a;">]>' + data
            zout.writestr(info, data)
    return "entity.xlsx"


def parquet_dup(folder):
    import pyarrow as pa
    import pyarrow.parquet as pq

    t = pa.Table.from_arrays([pa.array([1.0, 2, 3, 4]), pa.array([1.0, 3, 2, 5]), pa.array([2.0, 1, 2, 1])],
                             names=["y", "x", "x"])
    pq.write_table(t, os.path.join(folder, "dup.parquet"))
    return "dup.parquet"


def parquet_as_csv(folder):
    pd.DataFrame({"y": [1.0, 2, 3], "x": [1.0, 3, 2]}).to_parquet(os.path.join(folder, "data.csv"))
    return "data.csv"


def folder_table(folder):
    os.mkdir(os.path.join(folder, "dir.csv"))
    return "dir.csv"


def _cell(i, opened=None, closed=None):
    if i == opened:
        return '"open'
    if i == closed:
        return 'shut"'
    return "a" + str(i % 3)


QUOTE = ("y,x,c\n" + "".join(f"{i},{(i * 2) % 7},{_cell(i, 30)}\n" for i in range(1, 41))).encode()
QUOTE_CLOSED_LATER = ("y,x,c\n" + "".join(f"{i},{(i * 2) % 7},{_cell(i, 30, 34)}\n" for i in range(1, 41))).encode()

CASES = [
    # -- the file itself
    ("empty", "empty.csv", b"", [], "empty.csv: the file is empty"),
    ("blank", "blank.csv", b"\n \n\n", [], "the file holds no text"),
    ("header-only", "h.csv", b"y,x\n", [], "the header is there but no data rows follow"),
    ("missing", "nope.csv", None, [], "nope.csv: no such file"),
    ("folder", None, folder_table, [], "dir.csv: the folder holds no .parquet file"),
    ("unknown-ending", "t.json", b"{}", [], "unknown table type '.json'"),
    ("gzip-as-csv", "g.csv", gzip.compress(rows()), [], "g.csv: is gzip-compressed data, not text; unpack it first"),
    ("parquet-as-csv", None, parquet_as_csv, [], "data.csv: is a Parquet file, not text; give it the .parquet ending"),
    ("zip-as-csv", "z.csv", b"PK\x03\x04" + b"\x00" * 40, [], "z.csv: is a zip archive"),
    ("xls-as-csv", "old.csv", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 40, [], "old-style Excel (.xls)"),
    ("csv-as-xlsx", "t.xlsx", rows(), [], "t.xlsx: does not start like an .xlsx workbook"),
    ("csv-as-parquet", "t.parquet", rows(), [], "t.parquet: does not start like a Parquet file"),
    ("nul-bytes", "nul.csv", b"y,x\n1,\x002\n2,3\n", [], "holds NUL bytes"),
    ("cp1252", "enc.csv", "y,place\n1,K\xf6ln\n".encode("cp1252"), [],
     "not UTF-8 text (byte 11, line 2); re-save the file as UTF-8, or choose its text encoding (for example cp1252) "
     "(--encoding NAME)"),
    ("wrong-encoding-name", "e.csv", rows(), ["--encoding", "nope-42"], "'nope-42' is not a text encoding"),
    ("damaged-utf16", "u.csv", b"\xff\xfey\x00,\x00x\x00\n", [], "damaged UTF-16 text"),
    # -- rows and quoting
    ("unclosed-quote", "q.csv", QUOTE, [],
     'q.csv: a quote (") opened on line 31 is not closed until the end of line 41, so lines 31–41 would be read as '
     "one cell; close or remove that quote"),
    ("quote-closed-rows-later", "q2.csv", QUOTE_CLOSED_LATER, [], "opened on line 31 is not closed until the end of line 35"),
    ("ragged-row", "r.csv", b"y,x\n1,2\n3,4,5,6\n", [], "r.csv: data row 2 (line 3) has 4 cells but the header has 2"),
    ("ragged-after-blank-lines", "rb.csv", b"y,x\n1,2\n\n\n3,4,5,6\n", [], "data row 4 (line 5) has 4 cells"),
    # -- the header
    ("duplicate-names", "dup.csv", b"y,x,x\n1,2,3\n", [], "duplicate column names 'x'"),
    ("nameless-column", "nn.csv", b"y,,x\n1,2,3\n", [], "column 2 has no name in the header row"),
    ("control-characters", "cc.csv", b"y,x\x1b[31m,x\x1b[31m\n1,2,3\n", [], "duplicate column names 'x\\x1b[31m'"),
    ("parquet-duplicate-names", None, parquet_dup, [], "dup.parquet: duplicate column names 'x'"),
    ("parquet-damaged", "bad.parquet", b"PAR1garbage", [], "bad.parquet: not a readable Parquet file"),
    # -- how numbers are written
    ("decimal-comma-target", "dc.csv", rows(fmt="{i},5;{x}", head="y;x"), [],
     "target 'y' is categorical, not numeric (it looks numeric but was read as text because rows 1, 2, 3, 4, 5 "
     "(and 15 more) hold numbers written with a comma ('1,5', '2,5', '3,5'); read the file with a decimal comma "
     "(--decimal ,))"),
    ("thousands", "th.csv", rows(fmt='{i},{x},"{i}1,000"', head="y,x,z"), ["--target", "z"],
     "target 'z' is categorical, not numeric (it looks numeric but was read as text because rows 1, 2, 3, 4, 5 (and "
     "15 more) hold numbers written with a comma ('11,000', '21,000', '31,000'); read the file with ',' as the "
     "thousands separator (--thousands ,) if these are thousands"),
    ("huge-value", "big.csv", rows(fmt="{i},{x},{g}", head="y,x,g").replace(b"5,4,b", b"5,1e308,b"), [],
     "column 'x' row 5 holds 1e+308, too large to compute with (its square overflows); check that cell"),
    ("huge-target", "bigy.csv", rows().replace(b"\n7,0\n", b"\n-1e200,0\n"), [], "target 'y' row 7 holds -1e+200"),
    # -- roles
    ("indicator-name-clash", "clash.csv", rows(fmt="{i},{g},{x}", head="y,c,c=b"), [],
     "design column 'c=b' would come from both column 'c' and column 'c=b'"),
    ("target-among-predictors", "tp.csv", rows(), ["--predictors", "x,y"],
     "column 'y' is the target and is also named among the predictors; remove it from the predictors"),
    ("groups-among-predictors", "gp.csv", rows(fmt="{i},{x},{g}", head="y,x,g"), ["--groups", "g", "--predictors", "x,g"],
     "column 'g' is the groups and is also named among the predictors"),
    # Three names: a two-valued text target would be a yes/no outcome.
    ("categorical-target", "text.csv", b"name,c\nann,red\nbo,blue\ncy,red\n", ["--target", "name"],
     "target 'name' is categorical, not numeric"),
    ("unknown-column", "unk.csv", rows(), ["--predictors", "nope"], "column 'nope' is not in the table"),
    ("weights-text", "w.csv", rows(fmt="{i},{x},{g}", head="y,x,w"), ["--weights", "w"], "weights column 'w' is categorical"),
    ("one-group", "g1.csv", rows(fmt="{i},{x},a", head="y,x,g"), ["--groups", "g"],
     "'g' has only one group among the rows used, so no group can be held out"),
    ("every-row-excluded", "all.csv", b"y,x,z\n1,1,\n2,2,\n3,,5\n", ["--predictors", "x,z"], "every row was excluded"),
    # -- settings: the same limits as a project and the window
    ("negative-seed", "s.csv", rows(), ["--seed", "-1"], "--seed: -1 is out of range; use a whole number from 0 to 9223372036854775807"),
    ("seed-too-large", "s2.csv", rows(), ["--seed", str(2**63)], f"--seed: {2**63} is out of range; use a whole number from 0 to"),
    ("penalties-too-many", "p.csv", rows(), ["--penalties", "100000000"], "--penalties: 100000000 is too many; a path takes at most 10000 α values"),
    ("penalties-too-few", "p1.csv", rows(), ["--penalties", "1"], "--penalties: 1 is too few"),
    ("l1-ratio-repeated", "l.csv", rows(), ["--l1-ratio", "0.5,0.5"], "--l1-ratio: lists 0.5 twice; give each L1 ratio once"),
    ("l1-ratio-too-many", "l2.csv", rows(), ["--l1-ratio", ",".join(f"0.{k:02d}" for k in range(1, 23))],
     "--l1-ratio: lists 22 L1 ratios; give from 1 to 20 L1 ratios"),
    ("l1-ratio-outside", "l3.csv", rows(), ["--l1-ratio", "1.5"], "--l1-ratio: 1.5 is outside (0, 1)"),
    ("folds-too-few", "f.csv", rows(), ["--folds", "1"], "--folds: 1 is too few"),
    # -- workbooks
    ("formula-without-value", None, xlsx(formula_book), [],
     "formula.xlsx: sheet 'Sheet' cells C2, C3, C4 (and 11 more) hold a formula saved without its computed value"),
    ("empty-first-sheet", None, xlsx(empty_first_sheet), [],
     "sheets.xlsx: the first sheet 'Notes' is empty; sheets with data: 'Data'; choose the sheet (--sheet NAME)"),
    ("no-such-sheet", None, xlsx(empty_first_sheet), ["--sheet", "Summary"],
     "no sheet 'Summary'; sheets are: Notes, Data; choose the sheet (--sheet NAME)"),
    ("xml-entities", None, entity_book, [], "declares XML entities, which a spreadsheet never needs (refused for safety)"),
    ("damaged-xlsx", "bad.xlsx", b"PK\x03\x04garbage", [], "bad.xlsx: not a readable .xlsx workbook"),
]


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_bad_table_exits_2_with_one_line(tmp_path, capsys, case):
    _, name, content, extra, fragment = case
    if callable(content):
        name = content(str(tmp_path))
    elif content is not None:
        (tmp_path / name).write_bytes(content)
    args = ["fit", str(tmp_path / name)] + (["--target", "y"] if "--target" not in extra else []) + extra
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.count("\n") == 1 and err.startswith("regbench fit: "), err
    assert "Traceback" not in err
    assert fragment in err, err


def test_case_count():
    """The catalogue above stays large: each case is one defect that must stay fixed."""
    assert len(CASES) >= 45
    print(f"bad tables: {len(CASES)} cases, each exit 2 with one named line")


# -- read correctly instead of refused ----------------------------------------------------------


def test_old_mac_line_ends_read_like_any_other(tmp_path):
    p = tmp_path / "cr.csv"
    p.write_bytes(b"y,x\r1,2\r2,3\r3,5\r4,4\r")
    t = read_table(p)
    assert t.names == ("y", "x") and t.frame["x"].tolist() == [2.0, 3.0, 5.0, 4.0]


def test_percentages_read_as_numbers_of_percent_with_a_note(tmp_path):
    p = tmp_path / "pct.csv"
    p.write_text("y,share\n" + "".join(f"{i},{i * 1.5:.1f}%\n" for i in range(1, 21)))
    t = read_table(p)
    assert t.columns["share"].kind == "numeric"
    assert t.frame["share"].tolist()[:2] == [1.5, 3.0]
    assert "read as numbers of percent ('1.5%' is read as 1.5)" in t.columns["share"].note
    d = build_design(t, Roles(target="y"))
    assert d.columns == ("share",)
    assert [c for c, _, as_text in d.column_notes if not as_text] == ["share"]


def test_decimal_comma_and_thousands_read_when_chosen(tmp_path):
    p = tmp_path / "de.csv"
    p.write_text("y;x;z\n" + "".join(f"{i},5;{i % 3},25;{i}.000,5\n" for i in range(1, 21)))
    t = read_table(p, decimal=",", thousands=".")
    assert t.frame["y"].tolist()[:2] == [1.5, 2.5]
    assert t.frame["z"].tolist()[:2] == [1000.5, 2000.5]
    careful = read_table(p, decimal=",", thousands=".", encoding="utf-8")
    assert careful.frame["z"].tolist() == t.frame["z"].tolist()


def test_blank_lines_counted_in_row_numbers(tmp_path):
    p = tmp_path / "b.csv"
    p.write_text("y,x\n1,1\n\n2,oops\n3,3\n\n\n4,\n5,5\n6,2\n")
    t = read_table(p)
    d = build_design(t, Roles(target="y"))
    # Counted by hand: the header is line 1, 'oops' is on line 4 (row 3), the empty x on line 8 (row 7).
    assert [(e.row, e.reason) for e in d.excluded] == [(3, "text 'oops' where a number was expected"),
                                                       (7, "value is missing")]
    assert d.row_numbers.tolist() == [1, 4, 8, 9]


def test_empty_and_constant_columns_are_reported_in_unusable(tmp_path, capsys):
    import json

    p = tmp_path / "u.csv"
    p.write_text("y,x,empty,same,label\n" + "".join(f"{i},{(i * i) % 7},,3,k\n" for i in range(1, 21)))
    out = tmp_path / "fit.json"
    assert main(["fit", str(p), "--target", "y", "--json", str(out)]) == 0
    d = json.loads(out.read_text())
    got = {u["column"]: u["reason"] for u in d["unusable"]}
    assert got == {"empty": "every cell is empty", "same": "constant (3) on every usable row",
                   "label": "only one level ('k') on every usable row"}
    assert main(["fit", str(p), "--target", "y"]) == 0
    text = capsys.readouterr().out
    assert "Columns not used" in text and "empty: every cell is empty" in text


def test_half_numeric_column_is_not_used_by_default_and_says_why(tmp_path):
    p = tmp_path / "half.csv"
    p.write_text("y,x,h\n" + "".join(f"{i},{(i * i) % 7},{'n/k' if i % 3 == 0 else i}\n" for i in range(1, 31)))
    d = build_design(read_table(p), Roles(target="y"))
    assert d.columns == ("x",)
    (u,) = d.unusable
    assert u.column == "h" and u.reason.startswith(
        "looks numeric (20 of 30 cells are numbers) but was read as text because rows 3, 6, 9, 12, 15 (and 5 more) "
        "hold 'n/k', 'n/k', 'n/k'")
    assert u.reason.endswith("not used by default (name it among the predictors to use its values as categories)")
    # Named, it is used as categories.
    d2 = build_design(read_table(p), Roles(target="y", predictors=("x", "h")))
    assert sum(c.startswith("h=") for c in d2.columns) == 20


def test_read_as_text_named_in_json_text_and_report(tmp_path, capsys):
    import json

    from regbench.report import report_html
    from regbench.session import Session

    p = tmp_path / "m.csv"
    lines = ["y,x,code"]
    for i in range(1, 41):
        lines.append(f"{i},{(i * 3) % 11},{'n/a-' + str(i) if i % 4 == 0 else i % 5}")
    p.write_text("\n".join(lines) + "\n")
    out = tmp_path / "fit.json"
    assert main(["fit", str(p), "--target", "y", "--predictors", "x", "--json", str(out)]) == 0
    d = json.loads(out.read_text())
    (entry,) = d["read_as_text"]
    assert entry["column"] == "code"
    assert entry["reason"].startswith("looks numeric (30 of 40 cells are numbers) but was read as text because rows "
                                      "4, 8, 12, 16, 20 (and 5 more) hold 'n/a-4', 'n/a-8', 'n/a-12'")
    assert main(["fit", str(p), "--target", "y", "--predictors", "x"]) == 0
    assert "How columns were read" in capsys.readouterr().out
    assert main(["new", str(p), "--target", "y", "--predictors", "x", "--bootstrap", "0", "--penalties", "5",
                 "-o", str(tmp_path / "m.regbench")]) == 0
    assert "  column 'code': looks numeric (30 of 40 cells are numbers)" in capsys.readouterr().out
    s = Session.from_table_file(p, Roles(target="y", predictors=("x",)))
    s.compute(bootstrap=0)
    assert "looks numeric (30 of 40 cells are numbers)" in report_html(s)


def test_inf_in_group_and_category_columns_fits(tmp_path):
    p = tmp_path / "inf.csv"
    p.write_text("y,x,g,c\n" + "".join(f"{i},{(i * i) % 7},{'inf' if i == 3 else i % 4},{'-inf' if i == 5 else 'ab'[i % 2]}\n"
                                       for i in range(1, 31)))
    t = read_table(p)
    d = build_design(t, Roles(target="y", predictors=("x", "c"), categorical=("c",), groups="g"))
    assert "inf" in d.group_labels
    assert main(["fit", str(p), "--target", "y", "--predictors", "x,c", "--categorical", "c", "--groups", "g"]) == 0


# -- cases that need a real process ----------------------------------------------------------------


def run_cli(args, timeout=120, **kw):
    env = dict(os.environ, PYTHONPATH=ROOT)
    return subprocess.run([sys.executable, "-m", "regbench", *args], capture_output=True, text=True,
                          timeout=timeout, env=env, **kw)


def test_pipe_named_like_a_table_or_project_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "x.csv"
    os.mkfifo(fifo)
    proj = tmp_path / "x.regbench"
    os.mkfifo(proj)
    r = run_cli(["fit", str(fifo), "--target", "y"], timeout=60)
    assert r.returncode == 2 and r.stderr.strip() == (
        "regbench fit: x.csv: is not a regular file (a pipe, socket or device); save the table to a file first")
    r = run_cli(["inspect", str(proj)], timeout=60)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "x.regbench: is not a regular file" in r.stderr


def test_unreadable_file_is_named(tmp_path, capsys, monkeypatch):
    """A file the user may not read (root reads every file, so the refusal is simulated at open())."""
    import regbench.data.reader as reader

    p = tmp_path / "secret.csv"
    p.write_bytes(rows())

    def refuse(*a, **k):
        raise PermissionError(13, "Permission denied", str(p))

    monkeypatch.setattr(reader, "open", refuse, raising=False)
    assert main(["fit", str(p), "--target", "y"]) == 2
    assert capsys.readouterr().err == (
        "regbench fit: secret.csv: cannot be read (Permission denied); check the file's permissions\n")


@pytest.mark.parametrize("command", ["fit-json", "report"])
def test_file_size_limit_gives_one_line_and_no_partial_file(tmp_path, command):
    """RLIMIT_FSIZE stands in for a full disk: the write fails part-way, the old file stays whole."""
    csv = os.path.join(ROOT, "sample_projects", "greenhouse.csv")
    if command == "fit-json":
        out = tmp_path / "fit.json"
        args = ["fit", csv, "--target", "yield_kg_m2", "--penalties", "20", "--json", str(out)]
    else:
        out = tmp_path / "report.html"
        args = ["report", os.path.join(ROOT, "sample_projects", "greenhouse.regbench"), "-o", str(out)]
    out.write_bytes(b"previous")

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (4096, 4096))

    r = run_cli(args, preexec_fn=limit, timeout=300)
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr and r.stderr.count("\n") == 1
    assert "File too large" in r.stderr and "the previous file (if any) is unchanged" in r.stderr
    assert out.read_bytes() == b"previous"
    assert [n for n in os.listdir(tmp_path) if n.endswith(".tmp")] == []

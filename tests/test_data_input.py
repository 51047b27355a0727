"""Reading tables and building the design: typing, exclusions, and every bad-input case.

Each bad input must give a clear message naming the file, column or row and
what to do; nothing is dropped silently.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regbench.data import Roles, build_design, read_table, table_from_frame
from regbench.demo import GREENHOUSE_ROLES
from regbench.errors import DataError


def write(tmp_path, name, text, encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


# -- typing -------------------------------------------------------------------------------


def test_kinds_numeric_boolean_categorical_and_coded(tmp_path):
    rows = ["y,x,flag,kind,code"]
    for i in range(30):
        rows.append(f"{i * 0.5},{i},{'yes' if i % 2 else 'no'},{'ab'[i % 2]},{i % 3 + 1}")
    t = read_table(write(tmp_path, "t.csv", "\n".join(rows)))
    kinds = {c: t.columns[c].kind for c in t.names}
    assert kinds == {"y": "numeric", "x": "numeric", "flag": "boolean", "kind": "categorical", "code": "numeric"}
    # An integer column with three distinct values is flagged, not changed.
    assert t.columns["code"].coded_categories
    assert not t.columns["x"].coded_categories
    assert t.frame["code"].dtype == np.float64
    assert t.frame["flag"].tolist()[:2] == [0.0, 1.0]


def test_categorical_one_hot_against_first_sorted_level(tmp_path):
    rows = ["y,colour,x"] + [f"{i},{['red', 'blue', 'green'][i % 3]},{i * i}" for i in range(12)]
    t = read_table(write(tmp_path, "c.csv", "\n".join(rows)))
    d = build_design(t, Roles(target="y"))
    # Levels sorted: blue, green, red -> blue is the reference level.
    assert d.columns == ("colour=green", "colour=red", "x")
    assert d.sources == ("colour", "colour", "x")
    green = d.X[:, 0]
    assert green.tolist() == [1.0 if i % 3 == 2 else 0.0 for i in range(12)]


def test_marked_categorical_numeric_codes(tmp_path):
    rows = ["y,code,x"] + [f"{i},{i % 3 + 1},{(i * 7) % 5}" for i in range(15)]
    t = read_table(write(tmp_path, "m.csv", "\n".join(rows)))
    d = build_design(t, Roles(target="y", categorical=("code",)))
    assert d.columns == ("code=2", "code=3", "x")


def test_standardized_view_uses_weighted_population_sd():
    frame = pd.DataFrame({"y": [1.0, 2.0, 4.0, 3.0], "x": [1.0, 2.0, 3.0, 5.0], "w": [1.0, 2.0, 1.0, 4.0]})
    d = build_design(table_from_frame(frame), Roles(target="y", weights="w"))
    Xs, mean, sd = d.standardized()
    # Direct computation with numpy.average (weighted mean, population variance).
    m = np.average(frame.x, weights=frame.w)
    s = np.sqrt(np.average((frame.x - m) ** 2, weights=frame.w))
    assert mean[0] == pytest.approx(m, rel=1e-15)
    assert sd[0] == pytest.approx(s, rel=1e-15)
    assert np.average(Xs[:, 0], weights=frame.w) == pytest.approx(0.0, abs=1e-15)


def test_greenhouse_sample_reads_aliases_as_ordinary_columns():
    t = read_table("sample_projects/greenhouse.csv")
    d = build_design(t, Roles.from_dict(GREENHOUSE_ROLES))
    # Aliases are ordinary columns here; detecting them belongs to the engine.
    for col in ("day_temp_c", "night_temp_c", "mean_temp_c", "day_temp_f", "light_hours", "light_sum_mol_m2"):
        assert col in d.columns
        assert t.columns[col].kind == "numeric"
    assert d.columns[:2] == ("variety=Ledger", "variety=Sunberry")
    assert d.n + len(d.excluded) == t.n_rows
    assert {e.column for e in d.excluded} == {"ec_ms_cm", "yield_kg_m2"}
    assert d.groups is not None and len(d.group_labels) == 8
    assert d.weights_column == "plants_per_bed"


def test_excel_and_parquet_read_like_csv(tmp_path):
    frame = pd.DataFrame({"y": [1.5, 2.5, 3.0, 4.0], "x": [1, 2, 3, 4], "g": ["a", "b", "a", "b"]})
    xlsx = tmp_path / "t.xlsx"
    frame.to_excel(xlsx, index=False)
    pq = tmp_path / "t.parquet"
    frame.to_parquet(pq)
    tsv = write(tmp_path, "t.tsv", frame.to_csv(sep="\t", index=False))
    for p in (xlsx, pq, tsv):
        t = read_table(p)
        assert t.names == ("y", "x", "g")
        assert t.frame["y"].tolist() == [1.5, 2.5, 3.0, 4.0]
        assert t.columns["g"].kind == "categorical"


def test_every_excluded_row_is_reported(tmp_path):
    text = "y,x,w\n1,1,1\n,2,1\n3,oops,1\n4,4,-2\n5,5,\n6,6,1\n7,8,1\n8,7,2\n9,11,1\n"
    t = read_table(write(tmp_path, "e.csv", text))
    d = build_design(t, Roles(target="y", weights="w"))
    got = [(e.row, e.column, e.reason) for e in d.excluded]
    assert got == [
        (2, "y", "target is missing"),
        (3, "x", "text 'oops' where a number was expected"),
        (4, "w", "weight is negative (-2)"),
        (5, "w", "weight is missing"),
    ]
    assert d.n == 5 and d.row_numbers.tolist() == [1, 6, 7, 8, 9]


# -- bad input: each case names what is wrong and what to do -------------------------------


def test_empty_file(tmp_path):
    with pytest.raises(DataError, match=r"empty\.csv: the file is empty; it needs a header row"):
        read_table(write(tmp_path, "empty.csv", ""))


def test_header_only(tmp_path):
    with pytest.raises(DataError, match=r"h\.csv: the header is there but no data rows follow"):
        read_table(write(tmp_path, "h.csv", "a,b,c\n"))


def test_no_numeric_target(tmp_path):
    t = read_table(write(tmp_path, "s.csv", "name,colour\nann,red\nbo,blue\ncy,red\n"))
    with pytest.raises(DataError, match=r"target 'name' is categorical, not numeric.*no numeric column"):
        build_design(t, Roles(target="name"))


def test_unknown_column(tmp_path):
    t = read_table(write(tmp_path, "u.csv", "y,x\n1,2\n2,3\n3,5\n"))
    with pytest.raises(DataError, match=r"column 'z' is not in the table u\.csv; its columns are: y, x"):
        build_design(t, Roles(target="y", predictors=("z",)))
    with pytest.raises(DataError, match=r"column 'yy' is not in the table"):
        build_design(t, Roles(target="yy"))


def test_duplicate_column_names(tmp_path):
    with pytest.raises(DataError, match=r"d\.csv: duplicate column names 'x'; rename them"):
        read_table(write(tmp_path, "d.csv", "y,x,x\n1,2,3\n"))


def test_constant_target(tmp_path):
    # x out of order: 1, 2, 3 down the rows would be a row number, which the default inputs leave out.
    t = read_table(write(tmp_path, "k.csv", "y,x\n2,1\n2,3\n2,2\n"))
    with pytest.raises(DataError, match=r"target 'y' has the same value \(2\) on every usable row.*choose another target"):
        build_design(t, Roles(target="y"))


def test_constant_and_all_missing_predictors_set_aside_with_reason(tmp_path):
    text = "y,x,c,m\n" + "".join(f"{i * 1.5},{i},7,\n" for i in range(6))
    t = read_table(write(tmp_path, "cm.csv", text))
    assert t.columns["m"].kind == "empty"
    d = build_design(t, Roles(target="y", predictors=("x", "c", "m")))
    assert d.columns == ("x",)
    assert [(u.column, u.reason) for u in d.unusable] == [
        ("m", "every cell is missing"),
        ("c", "constant (7) on every usable row"),
    ]
    assert d.excluded == ()


@pytest.mark.parametrize("bad,reason", [("-1", "weight is negative (-1)"), ("NaN", "weight is missing"),
                                        ("inf", "weight is infinite")])
def test_bad_weights_exclude_the_row_with_reason(tmp_path, bad, reason):
    text = f"y,x,w\n1,1,1\n2,3,{bad}\n3,2,1\n4,5,2\n5,4,1\n"
    t = read_table(write(tmp_path, "w.csv", text))
    d = build_design(t, Roles(target="y", weights="w"))
    assert [(e.row, e.column, e.reason) for e in d.excluded] == [(2, "w", reason)]


def test_weights_all_zero(tmp_path):
    t = read_table(write(tmp_path, "z.csv", "y,x,w\n1,1,0\n2,3,0\n3,2,0\n"))
    with pytest.raises(DataError, match=r"weights column 'w' is zero on every usable row"):
        build_design(t, Roles(target="y", weights="w"))


def test_text_weights_column(tmp_path):
    t = read_table(write(tmp_path, "tw.csv", "y,x,w\n1,1,a\n2,3,b\n3,2,c\n"))
    with pytest.raises(DataError, match=r"weights column 'w' is categorical; weights must be numbers >= 0"):
        build_design(t, Roles(target="y", weights="w"))


def test_text_in_numeric_column_is_reported_by_row(tmp_path):
    text = "y,x\n" + "".join(f"{i},{i * 2}\n" for i in range(1, 10)) + "10,twelve\n"
    t = read_table(write(tmp_path, "tx.csv", text))
    assert t.columns["x"].kind == "numeric"
    assert t.columns["x"].bad_cells == ((10, "twelve"),)
    d = build_design(t, Roles(target="y"))
    assert [(e.row, e.column, e.reason) for e in d.excluded] == [(10, "x", "text 'twelve' where a number was expected")]


def test_unreadable_encoding(tmp_path):
    raw = "y,place\n1,K\xf6ln\n2,Z\xfcrich\n".encode("cp1252")
    p = write(tmp_path, "enc.csv", raw)
    with pytest.raises(DataError, match=r"enc\.csv: not UTF-8 text \(byte \d+, line 2\); re-save the file as UTF-8"):
        read_table(p)
    # Naming the encoding reads it.
    assert read_table(p, encoding="cp1252").frame["place"].tolist() == ["Köln", "Zürich"]


def test_more_predictors_than_rows_is_a_wide_design(tmp_path):
    text = "y,a,b,c,d\n1,1,2,3,5\n2,3,1,4,4\n3,2,5,1,1\n"
    t = read_table(write(tmp_path, "wide.csv", text))
    d = build_design(t, Roles(target="y"))  # wide tables are fitted (OLS sets aside for want of rows)
    assert (d.n, d.p) == (3, 4)


def test_missing_file_and_unknown_type(tmp_path):
    with pytest.raises(DataError, match=r"nope\.csv: no such file"):
        read_table(tmp_path / "nope.csv")
    with pytest.raises(DataError, match=r"unknown table type '\.json'"):
        read_table(write(tmp_path, "t.json", "{}"))


def test_ragged_row_is_named(tmp_path):
    with pytest.raises(DataError, match=r"r\.csv: data row 2 \(line 3\) has 4 cells but the header has 2"):
        read_table(write(tmp_path, "r.csv", "y,x\n1,2\n3,4,5,6\n"))


def test_damaged_xlsx_and_parquet(tmp_path):
    with pytest.raises(DataError, match=r"bad\.xlsx: not a readable \.xlsx workbook"):
        read_table(write(tmp_path, "bad.xlsx", b"PK\x03\x04garbage"))
    with pytest.raises(DataError, match=r"bad\.parquet: not a readable Parquet file"):
        read_table(write(tmp_path, "bad.parquet", b"PAR1garbage"))


def test_every_row_excluded(tmp_path):
    t = read_table(write(tmp_path, "all.csv", "y,x,z\n1,1,\n2,2,\n3,,5\n"))
    with pytest.raises(DataError, match=r"all\.csv: every row was excluded \(first reason: row 1, column 'z': value is missing\)"):
        build_design(t, Roles(target="y", predictors=("x", "z")))


def test_empty_target_column(tmp_path):
    t = read_table(write(tmp_path, "et.csv", "y,x\n,1\n,2\n"))
    with pytest.raises(DataError, match=r"et\.csv: target 'y' is empty, not numeric; choose a numeric target \(numeric columns: x\)"):
        build_design(t, Roles(target="y"))


def test_fast_and_careful_csv_readers_agree(tmp_path, monkeypatch):
    """pandas' C parser route must type every cell exactly as the csv-module route does."""
    import regbench.data.reader as reader

    text = (
        "y,x,flag,kind,note,code\n"
        '1.5,2,yes,a,"quoted, text",1\n'
        "2.5, 3 ,no,b,,2\n"
        "\n"
        "3.5,n/a,yes,a,plain,1\n"
        "4.5,oops,no,c,x,2\n"
        "5.5,−7,no,a,y,1\n"
        "6.5,1e3,yes,b,z,2\n"
    )
    p = write(tmp_path, "mix.csv", text)
    fast = read_table(p)
    monkeypatch.setattr(reader, "_read_text_direct", lambda *a: None)
    from_text = read_table(p)
    monkeypatch.setattr(reader, "_read_text_fast", lambda *a: None)
    careful = read_table(p)
    for got in (fast, from_text):
        assert got.columns == careful.columns
        pd.testing.assert_frame_equal(got.frame, careful.frame)
        assert got.line_numbers == careful.line_numbers
    assert fast.names == careful.names
    assert fast.columns == careful.columns
    pd.testing.assert_frame_equal(fast.frame, careful.frame)
    # Row numbers count the blank line (row 5 is the fifth line under the header), as a spreadsheet shows it.
    assert fast.columns["x"].bad_cells == ((5, "oops"),)
    assert fast.line_numbers == careful.line_numbers == (1, 2, 4, 5, 6, 7)
    assert fast.frame["x"].tolist()[:2] == [2.0, 3.0] and fast.frame["x"].iat[4] == -7.0


def test_fast_reader_parses_numbers_bit_for_bit_like_python(tmp_path):
    """Numbers read by pandas' C parser equal Python's float() of the same text (correct rounding)."""
    rng = np.random.default_rng(3)
    vals = rng.normal(0, 1, 5000) * 10.0 ** rng.integers(-300, 300, 5000)
    texts = [repr(float(v)) for v in vals] + [f"{v:.17g}" for v in vals[:500]] + ["0.1", "1e-5", "-0", "7"]
    p = write(tmp_path, "num.csv", "x,y\n" + "".join(f"{t},{i}\n" for i, t in enumerate(texts)))
    got = read_table(p).frame["x"].to_numpy()
    want = np.array([float(t) for t in texts])
    assert np.array_equal(got.view(np.int64), want.view(np.int64))


def test_identifier_like_text_column_left_out_by_default_and_reported():
    t = read_table("sample_projects/greenhouse.csv")
    d = build_design(t, Roles(target="yield_kg_m2", weights="plants_per_bed", groups="glasshouse"))
    assert not any(c.startswith("bed=") for c in d.columns)
    assert "variety=Ledger" in d.columns and "week" in d.columns
    (u,) = [u for u in d.unusable if u.column == "bed"]
    assert u.rule == "identifier" and "looks like an identifier: text with 96 different values" in u.reason
    # Named explicitly, it is used.
    d2 = build_design(t, Roles(target="yield_kg_m2", predictors=("bed", "co2_ppm")))
    assert sum(c.startswith("bed=") for c in d2.columns) == 95


def test_frame_text_columns_typed_like_cells(tmp_path):
    """The vectorized route for text columns of a frame agrees with the per-cell rules."""
    import regbench.data.reader as reader

    frame = pd.DataFrame({
        "y": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
        "flag": ["yes", "no", None, "YES", "no", "n/a"],
        "kind": [" a", "b", "a ", None, "c", "b"],
        "mostly": ["1", "2", "x", "4", "5", "6"],
        "blank": [None, "", "NA", None, "", None],
    })
    fast = table_from_frame(frame)
    slow = {h: reader._type_column(h, frame[h].astype(object).where(pd.notna(frame[h]), None).tolist(), 6)
            for h in frame.columns[1:]}
    for h, (values, info) in slow.items():
        assert fast.columns[h] == info
        got = fast.frame[h].to_numpy()
        if info.kind in ("numeric", "boolean", "empty"):
            np.testing.assert_array_equal(got.astype(float), values)
        else:
            norm = lambda seq: [None if pd.isna(v) else v for v in seq]  # noqa: E731
            assert norm(got) == norm(values)
    assert fast.columns["mostly"].bad_cells == ((3, "x"),)

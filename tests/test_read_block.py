"""Tables read straight into one float64 block, and designs that share it.

The direct routes (Parquet column groups into a block, CSV through pandas' C parser from the
file) must give the same Table and the same Design as the routes they replace: the Parquet file
through ``pyarrow.parquet.read_table(...).to_pandas()`` typed like any frame, and the CSV file
through the careful csv-module reader.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import regbench.data.reader as reader
from regbench.data import Roles, build_design, read_table, table_from_frame
from regbench.data.table import column_block, frame_of, side_by_side


def _mixed(n=600, seed=5):
    """An invented table with every kind of column: numbers, whole numbers with gaps, text
    categories, yes/no words, true/false, weights, groups, an empty column, a number column with
    a few text cells."""
    rng = np.random.default_rng(seed)
    x1 = rng.normal(0, 1, n)
    x2 = rng.normal(5, 2, n)
    frame = pd.DataFrame({
        "site": rng.choice(["north", "south", "east"], n),
        "x1": x1,
        "x2": x2,
        "count": pd.array(rng.integers(0, 9, n), dtype="Int64"),
        "flag": rng.choice(["Yes", "No"], n),
        "ok": rng.choice([True, False], n),
        "w": rng.uniform(0.5, 2.0, n),
        "batch": rng.choice([f"B{k:02d}" for k in range(12)], n),
        "nothing": pd.array([None] * n, dtype="Float64"),
        "y": 1.0 + 2.0 * x1 - x2 + rng.normal(0, 0.5, n),
    })
    frame.loc[[3, 40], "x2"] = np.nan
    frame.loc[[7], "count"] = pd.NA
    frame.loc[[11, n - 100], "site"] = None
    return frame


def _same_design(a, b):
    for f in ("X", "y", "weights", "row_numbers"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f))
    assert (a.groups is None) == (b.groups is None)
    if a.groups is not None:
        np.testing.assert_array_equal(a.groups, b.groups)
    for f in ("columns", "sources", "excluded", "unusable", "group_labels", "reference_levels", "outcome",
              "levels", "column_notes"):
        assert getattr(a, f) == getattr(b, f), f


ROLES = (
    Roles(target="y"),
    Roles(target="y", weights="w", groups="batch"),
    Roles(target="y", predictors=("x1", "x2", "site", "flag", "ok"), groups="batch"),
    Roles(target="y", predictors=("x1", "count"), categorical=("count",)),
    Roles(target="flag", predictors=("x1", "x2")),
)


@pytest.mark.parametrize("row_group", [50, 600])
def test_parquet_block_route_equals_the_frame_route(tmp_path, row_group):
    frame = _mixed()
    path = tmp_path / "mixed.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path, row_group_size=row_group)
    assert pq.ParquetFile(path).metadata.num_row_groups == 600 // row_group
    new = read_table(path)
    old = table_from_frame(pq.read_table(path).to_pandas(), "mixed.parquet")
    assert new.names == old.names
    assert dict(new.columns) == dict(old.columns)
    pd.testing.assert_frame_equal(new.frame, old.frame, check_dtype=False)
    for roles in ROLES:
        _same_design(build_design(new, roles), build_design(old, roles))


def test_parquet_columns_in_groups_of_a_few(tmp_path, monkeypatch):
    """Columns decoded a few at a time land in the same places as when read all at once."""
    frame = _mixed(n=300)
    path = tmp_path / "m.parquet"
    frame.to_parquet(path, index=False)
    whole = read_table(path)
    monkeypatch.setattr(reader, "PARQUET_GROUP_BYTES", 8 * 300 * 2)  # two columns per group
    assert len(reader.column_groups(frame.columns, 300)) == 5
    parts = read_table(path)
    pd.testing.assert_frame_equal(parts.frame, whole.frame)
    assert dict(parts.columns) == dict(whole.columns)


def test_design_shares_the_table_block_when_every_row_is_usable(tmp_path):
    rng = np.random.default_rng(2)
    n = 400
    data = {"g": rng.choice(["a", "b", "c", "d"], n)}
    for j in range(6):
        data[f"s{j}"] = rng.normal(j, 1, n)
    data["y"] = rng.normal(0, 1, n)
    path = tmp_path / "wide.parquet"
    pd.DataFrame(data).to_parquet(path, index=False)
    table = read_table(path)
    d = build_design(table, Roles(target="y", groups="g"))
    assert d.columns == tuple(f"s{j}" for j in range(6))
    assert np.shares_memory(d.X, table.frame["s0"].to_numpy())
    assert not d.X.flags.writeable  # a fit cannot change the table under the design
    with pytest.raises(ValueError):
        d.X[0, 0] = 1.0
    np.testing.assert_array_equal(d.X, np.column_stack([data[f"s{j}"] for j in range(6)]))
    # A missing cell excludes its row: the design is then a copy on the usable rows.
    data["s3"][17] = np.nan
    path2 = tmp_path / "gap.parquet"
    pd.DataFrame(data).to_parquet(path2, index=False)
    table2 = read_table(path2)
    d2 = build_design(table2, Roles(target="y", groups="g"))
    assert not np.shares_memory(d2.X, table2.frame["s0"].to_numpy())
    keep = np.arange(n) != 17
    np.testing.assert_array_equal(d2.X, np.column_stack([data[f"s{j}"][keep] for j in range(6)]))
    assert [e.row for e in d2.excluded] == [18]


def test_side_by_side_takes_only_evenly_spaced_columns_of_one_block():
    M = column_block(5, 4)
    M[:] = np.arange(20.0).reshape(4, 5).T
    f = frame_of(["a", "b", "c", "d"], {c: M[:, j] for j, c in enumerate("abcd")}, 5)
    col = {c: f[c].to_numpy(dtype=float) for c in "abcd"}
    np.testing.assert_array_equal(side_by_side([col["b"], col["c"]]), M[:, 1:3])
    np.testing.assert_array_equal(side_by_side([col["a"], col["c"]]), M[:, [0, 2]])
    assert side_by_side([col["b"], col["a"]]) is None           # out of order
    assert side_by_side([col["a"], col["b"], col["d"]]) is None  # uneven gap
    assert side_by_side([col["a"], np.arange(5.0)]) is None      # another allocation


def _csv_text():
    rng = np.random.default_rng(9)
    lines = ["site,x1,x2,flag,ok,batch,y"]
    for i in range(300):
        x1, x2 = rng.normal(0, 1), rng.normal(5, 2)
        cells = [rng.choice(["north", "south", " east "]), repr(x1), f"{x2:.6g}", rng.choice(["Yes", "No"]),
                 rng.choice(["TRUE", "FALSE"]), f"B{rng.integers(0, 7)}", repr(1 + 2 * x1 - x2)]
        if i == 20:
            cells[2] = "NA"
        if i == 33:
            cells[1] = "12%"
        if i == 50:
            cells[2] = "broken"
        lines.append(",".join(cells))
        if i in (100, 101):
            lines.append("")  # blank lines: rows keep the number of their line
    return "\r\n".join(lines) + "\r\n"


def test_csv_direct_route_equals_the_careful_reader(tmp_path, monkeypatch):
    path = tmp_path / "mixed.csv"
    path.write_bytes(_csv_text().encode("utf-8"))
    direct = read_table(path)
    monkeypatch.setattr(reader, "_read_text_direct", lambda *a: None)
    monkeypatch.setattr(reader, "_read_text_fast", lambda *a: None)
    careful = read_table(path)
    assert direct.names == careful.names
    assert dict(direct.columns) == dict(careful.columns)
    assert direct.columns["x2"].bad_cells == ((51, "broken"),)
    assert direct.columns["ok"].kind == "boolean" and direct.columns["ok"].words == careful.columns["ok"].words
    assert direct.line_numbers == careful.line_numbers and direct.line_numbers[-1] == 302
    pd.testing.assert_frame_equal(direct.frame, careful.frame, check_dtype=False)
    for roles in (Roles(target="y", groups="batch"), Roles(target="flag", predictors=("x1", "site"))):
        _same_design(build_design(direct, roles), build_design(careful, roles))


def test_csv_direct_route_is_taken_only_for_plain_files(tmp_path, monkeypatch):
    """The cheap check sends NUL bytes, lone carriage returns and quoted headers to the other readers."""
    taken = []
    real = reader._parse_direct
    monkeypatch.setattr(reader, "_parse_direct", lambda *a, **k: taken.append(1) or real(*a, **k))
    cases = {
        "plain.csv": b"y,x\n1,2\n3,5\n4,4\n",
        "cr.csv": b"y,x\r1,2\r3,5\r4,4\r",
        "quoted.csv": b'"y","x"\n1,2\n3,5\n4,4\n',
    }
    for name, raw in cases.items():
        (tmp_path / name).write_bytes(raw)
        taken.clear()
        t = read_table(tmp_path / name)
        assert t.frame["x"].tolist() == [2.0, 5.0, 4.0], name
        assert bool(taken) == (name == "plain.csv"), name


def test_csv_direct_route_leaves_other_encodings_to_the_text_readers(tmp_path):
    """A header in Windows-1252 is not UTF-8: the reader says so (and a named encoding reads it)."""
    from regbench.errors import DataError

    path = tmp_path / "café.csv"
    path.write_bytes("températ,yield\n20,1.5\n21,1.7\n".encode("cp1252"))
    with pytest.raises(DataError, match=r"café\.csv: not UTF-8 text \(byte 4, line 1\)"):
        read_table(path)
    assert read_table(path, encoding="cp1252").names == ("températ", "yield")
    body = tmp_path / "body.csv"
    body.write_bytes("t,y\n20,1.5\n21,caf\xe9\n".encode("latin-1"))
    with pytest.raises(DataError, match=r"body\.csv: not UTF-8 text \(byte \d+, line 3\)"):
        read_table(body)


def test_number_columns_count_empty_cells_and_distinct_values_as_numpy_does():
    """Empty cells, distinct finite values and the coded-category rule of a number column, found from
    one sort, against numpy's isnan and unique (reference library) over columns mixing NaN, ±inf,
    ±0, whole numbers and fractions."""
    rng = np.random.default_rng(11)
    for _ in range(500):
        n = int(rng.integers(1, 60))
        x = rng.integers(-3, 4, n).astype(float) if rng.random() < 0.5 else np.round(rng.normal(size=n), 1)
        for v in (np.nan, np.inf, -np.inf, -0.0):
            x[rng.random(n) < 0.3 * rng.random()] = v
        _, info = reader._type_numeric_column("c", x.copy(), n)
        missing = int(np.isnan(x).sum())
        assert info.missing == missing
        if missing == n:
            assert info.kind == "empty" and info.distinct == 0
            continue
        finite = x[np.isfinite(x)]
        distinct = np.unique(finite).size  # -0.0 and 0.0 are one value to numpy too
        assert info.distinct == distinct
        assert info.coded_categories == bool(
            finite.size and 2 <= distinct <= reader.CODED_MAX_LEVELS and np.all(finite == np.round(finite))
            and finite.size >= 2 * distinct)

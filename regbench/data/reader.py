"""Reading CSV, TSV, Excel (.xlsx) and Parquet files into a typed :class:`Table`.

Reading never executes anything from the file: text formats are parsed as
text, Excel through openpyxl's data-only reader, Parquet through pyarrow.
"""

from __future__ import annotations

import io
import os
from collections import Counter
from typing import Optional

import numpy as np
import pandas as pd

from regbench.data.table import BOOLEAN, CATEGORICAL, EMPTY, NUMERIC, ColumnInfo, Table
from regbench.errors import DataError

#: Cell texts read as "no value".
MISSING_TEXTS = frozenset({"", "na", "n/a", "nan", "null", "none", "-", "?", "missing"})
_TRUE = frozenset({"true", "yes", "t", "y"})
_FALSE = frozenset({"false", "no", "f", "n"})
#: An integer column with at most this many distinct values is flagged as possibly coded.
CODED_MAX_LEVELS = 10
#: A column is numeric when at least this share of its non-missing cells are numbers;
#: the other cells are then reported as bad text rather than turning the column into text.
NUMERIC_SHARE = 0.8

SUPPORTED = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".txt": "csv", ".xlsx": "xlsx", ".parquet": "parquet", ".pq": "parquet"}


def read_table(path, *, encoding: Optional[str] = None, sheet: Optional[str] = None) -> Table:
    """Read a table file.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.csv``, ``.tsv``, ``.xlsx`` or ``.parquet`` file.
    encoding : str, optional
        Text encoding for CSV/TSV.  By default UTF-8 (with or without BOM) or
        UTF-16 with a BOM; anything else must be named.
    sheet : str, optional
        Excel sheet; the first sheet by default.

    Returns
    -------
    Table

    Raises
    ------
    DataError
        With a message naming the file (and column or row) and what to do.
    """
    path = os.fspath(path)
    name = os.path.basename(path)
    if not os.path.exists(path):
        raise DataError(f"{name}: no such file ({path}); check the path")
    if os.path.isdir(path):
        raise DataError(f"{name}: is a folder, not a table file")
    ext = os.path.splitext(path)[1].lower()
    fmt = SUPPORTED.get(ext)
    if fmt is None:
        raise DataError(
            f"{name}: unknown table type '{ext or '(none)'}'; use one of "
            + ", ".join(sorted(set(SUPPORTED)))
        )
    if os.path.getsize(path) == 0:
        raise DataError(f"{name}: the file is empty; it needs a header row and at least one data row")
    if fmt in ("csv", "tsv"):
        return _read_text(path, name, "\t" if fmt == "tsv" else None, encoding)
    if fmt == "xlsx":
        header, rows = _read_xlsx(path, name, sheet)
        return _typed(header, rows, name)
    return _read_parquet(path, name)


def table_from_frame(frame: pd.DataFrame, source: str = "data frame") -> Table:
    """Type an in-memory DataFrame the same way a file is typed."""
    header = [str(c) for c in frame.columns]
    return _typed_frame(frame, header, source)


# -- raw readers -------------------------------------------------------------------------


def _decode(raw: bytes, name: str, encoding: Optional[str]) -> str:
    if encoding:
        try:
            return raw.decode(encoding)
        except (UnicodeDecodeError, LookupError) as exc:
            raise DataError(f"{name}: cannot be read as {encoding} ({exc}); name the file's real encoding") from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise DataError(f"{name}: damaged UTF-16 text at byte {exc.start}") from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DataError(
            f"{name}: not UTF-8 text (byte {exc.start}, line {line}); re-save the file as UTF-8, "
            "or name its encoding (for example --encoding cp1252)"
        ) from None


def _read_text(path, name, sep, encoding):
    import csv

    with open(path, "rb") as fh:
        raw = fh.read()
    text = _decode(raw, name, encoding)
    if not text.strip():
        raise DataError(f"{name}: the file holds no text; it needs a header row and at least one data row")
    if "\x00" in text:
        raise DataError(f"{name}: holds NUL bytes, so it is not a text table; export it again as CSV")
    if sep is None:
        try:
            sep = csv.Sniffer().sniff(text[:20000], delimiters=",;\t").delimiter
        except csv.Error:
            sep = ","
    fast = _read_text_fast(text, name, sep)
    if fast is not None:
        return fast
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    try:
        all_rows = [r for r in reader]
    except csv.Error as exc:
        raise DataError(f"{name}: line {reader.line_num}: {exc}; fix the quoting on that line") from None
    all_rows = [r for r in all_rows if any(c.strip() for c in r)]
    if not all_rows:
        raise DataError(f"{name}: the file holds no rows")
    header = [h.strip() for h in all_rows[0]]
    body = all_rows[1:]
    width = len(header)
    for i, r in enumerate(body, start=1):
        if len(r) != width:
            # Trailing empty cells are harmless; anything else shifts columns.
            if len(r) > width and not any(c.strip() for c in r[width:]):
                body[i - 1] = r[:width]
                continue
            if len(r) < width:
                body[i - 1] = r + [""] * (width - len(r))
                continue
            raise DataError(
                f"{name}: data row {i} has {len(r)} cells but the header has {width}; "
                "check for an unquoted separator in that row"
            )
    _check_header(header, name)
    if not body:
        raise DataError(f"{name}: the header is there but no data rows follow")
    frame = pd.DataFrame(body, columns=range(width), dtype=object)
    return _typed_text_frame(frame, header, name)


def _read_text_fast(text, name, sep):
    """pandas' C parser; None when the file needs the careful reader.

    The careful reader (Python's csv module) gives exact row numbers for ragged rows and bad
    quoting; this route only has to agree with it on well-formed files, and is many times
    faster. Columns the parser reads as plain numbers skip the per-cell pass (pandas' default
    float parsing agrees bit for bit with Python's ``float``: measured on 350k values spanning
    1e-300..1e300; the test below keeps that honest); any other
    column is typed from its text by the same rules as the careful reader.
    """
    import csv

    first = next(csv.reader(io.StringIO(text.split("\n", 1)[0]), delimiter=sep), None)
    if not first:
        return None
    header = [h.strip() for h in first]
    _check_header(header, name)
    na = sorted({v for t in MISSING_TEXTS for v in (t, t.upper(), t.title())})
    try:
        frame = pd.read_csv(
            io.StringIO(text), sep=sep, header=None, skiprows=1, names=range(len(header)),
            keep_default_na=False, na_values=na, skip_blank_lines=True, engine="c",
            index_col=False, dtype_backend="numpy_nullable",
        )
    except Exception:  # any parser complaint: let the careful reader name the row
        return None
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        frame = frame.loc[~blank].reset_index(drop=True)
    if len(frame) == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    n = len(frame)
    data, infos = {}, {}
    for j, h in enumerate(header):
        col = frame.iloc[:, j]
        if pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
            values, info = _type_numeric_column(h, col.to_numpy(dtype=float, na_value=np.nan), n)
        else:
            # Text (or what the parser took for booleans): back to the cell texts.
            raw = pd.read_csv(io.StringIO(text), sep=sep, header=None, skiprows=1, usecols=[j], dtype=str,
                              keep_default_na=False, na_filter=False, skip_blank_lines=True,
                              engine="c", index_col=False).iloc[:, 0]
            if blank.any():
                raw = raw.loc[~blank].reset_index(drop=True)
            values, info = _type_text_series(h, raw, n)
        data[h] = values
        infos[h] = info
    return Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)


def _typed_text_frame(frame, header, name) -> Table:
    """Type columns of text cells, vectorized per column (the rules of :func:`_type_column`)."""
    n = len(frame)
    data, infos = {}, {}
    for j, h in enumerate(header):
        values, info = _type_text_series(h, frame.iloc[:, j], n)
        data[h] = values
        infos[h] = info
    return Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)


def _type_text_series(name, col, n):
    stripped = col.astype(object).where(col.notna(), None).str.strip()
    lowered = stripped.str.lower()
    present = ~(stripped.isna() | lowered.isin(MISSING_TEXTS)).to_numpy()
    missing = int(n - present.sum())
    if not present.any():
        return np.full(n, np.nan), ColumnInfo(name, EMPTY, missing, 0)
    uniq = set(lowered[present].unique())
    if uniq <= (_TRUE | _FALSE):
        vals = np.full(n, np.nan)
        vals[present] = lowered[present].isin(_TRUE).to_numpy().astype(float)
        return vals, ColumnInfo(name, BOOLEAN, missing, len(uniq))
    texts = stripped.where(present, None)
    nums = pd.to_numeric(texts.str.replace("\u2212", "-", regex=False), errors="coerce").to_numpy(dtype=float)
    bad = present & np.isnan(nums)
    n_num = int(present.sum() - bad.sum())
    if n_num and n_num >= NUMERIC_SHARE * present.sum():
        nums = np.where(present, nums, np.nan)
        _, info = _type_numeric_column(name, nums, n)
        bad_idx = np.flatnonzero(bad)
        bad_cells = tuple((int(i) + 1, texts.iat[i]) for i in bad_idx)
        return nums, ColumnInfo(name, NUMERIC, missing, info.distinct, info.coded_categories, bad_cells)
    vals = texts.to_numpy(dtype=object, copy=True)
    vals[~present] = None  # the Table's convention for a missing category (not NaN)
    return vals, ColumnInfo(name, CATEGORICAL, missing, len(set(vals[present])))


def _read_xlsx(path, name, sheet):
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - declared dependency
        raise DataError("reading .xlsx needs the openpyxl package; reinstall regbench") from None
    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many kinds for a damaged file
        raise DataError(f"{name}: not a readable .xlsx workbook ({type(exc).__name__}); open and re-save it in a spreadsheet program") from None
    try:
        if sheet is None:
            ws = wb.worksheets[0]
        elif sheet in wb.sheetnames:
            ws = wb[sheet]
        else:
            raise DataError(f"{name}: no sheet '{sheet}'; sheets are: {', '.join(wb.sheetnames)}")
        rows = [list(r) for r in ws.iter_rows(values_only=True)]
    finally:
        wb.close()
    rows = [r for r in rows if any(c is not None and str(c).strip() for c in r)]
    if not rows:
        raise DataError(f"{name}: the first sheet is empty; it needs a header row and data rows")
    header = ["" if c is None else str(c).strip() for c in rows[0]]
    while header and header[-1] == "" and all(len(r) < len(header) or r[len(header) - 1] is None for r in rows[1:]):
        header.pop()
    width = len(header)
    body = [(list(r) + [None] * width)[:width] for r in rows[1:]]
    return header, body


def _read_parquet(path, name):
    try:
        import pyarrow.parquet as pq
    except ImportError:  # pragma: no cover - declared dependency
        raise DataError("reading Parquet needs the pyarrow package; reinstall regbench") from None
    try:
        tab = pq.read_table(path)
    except Exception as exc:
        raise DataError(f"{name}: not a readable Parquet file ({type(exc).__name__}: {exc})") from None
    header = [str(c) for c in tab.column_names]
    _check_header(header, name)
    frame = tab.to_pandas()
    return _typed_frame(frame, header, name)


# -- typing ------------------------------------------------------------------------------


def _check_header(header, name):
    if not header:
        raise DataError(f"{name}: no header row; the first row must name the columns")
    for i, h in enumerate(header, start=1):
        if h == "":
            raise DataError(f"{name}: column {i} has no name in the header row; give it one")
    dup = [h for h, c in Counter(header).items() if c > 1]
    if dup:
        raise DataError(
            f"{name}: duplicate column names {', '.join(repr(d) for d in dup)}; "
            "rename them so each column has its own name"
        )


def _typed(header, rows, name) -> Table:
    _check_header(header, name)
    if not rows:
        raise DataError(f"{name}: the header is there but no data rows follow")
    n = len(rows)
    data = {}
    infos = {}
    cols = list(zip(*rows)) if rows else [() for _ in header]
    for j, h in enumerate(header):
        values, info = _type_column(h, cols[j], n)
        data[h] = values
        infos[h] = info
    frame = pd.DataFrame(data, index=pd.RangeIndex(n))
    return Table(frame=frame, columns=infos, source=name)


def _typed_frame(frame: pd.DataFrame, header, name) -> Table:
    """Type a frame column by column; columns already stored as numbers skip the per-cell pass."""
    _check_header(header, name)
    n = len(frame)
    if n == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    data = {}
    infos = {}
    for j, h in enumerate(header):
        col = frame.iloc[:, j]
        if pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
            values, info = _type_numeric_column(h, col.to_numpy(dtype=float, na_value=np.nan), n)
        elif pd.api.types.infer_dtype(col, skipna=True) in ("string", "empty"):
            # Text only: the vectorized text rules, as for a CSV column.
            values, info = _type_text_series(h, col.astype(object).where(pd.notna(col), None), n)
        else:
            cells = col.astype(object).where(pd.notna(col), None).tolist()
            values, info = _type_column(h, cells, n)
        data[h] = values
        infos[h] = info
    return Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)


def _type_numeric_column(name, nums, n):
    """The numeric branch of :func:`_type_column` for a column stored as numbers (same result, vectorized)."""
    missing = int(np.isnan(nums).sum())
    if missing == n:
        return np.full(n, np.nan), ColumnInfo(name, EMPTY, missing, 0)
    finite = nums[np.isfinite(nums)]
    distinct = len(np.unique(finite))
    coded = bool(
        finite.size
        and distinct <= CODED_MAX_LEVELS
        and distinct >= 2
        and np.all(finite == np.round(finite))
        and finite.size >= 2 * distinct
    )
    return nums.copy(), ColumnInfo(name, NUMERIC, missing, distinct, coded, ())


def _cell_text(v):
    if v is None:
        return None
    if isinstance(v, float) and np.isnan(v):
        return None
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    s = str(v).strip()
    return None if s.lower() in MISSING_TEXTS else s


def _to_number(v):
    if isinstance(v, (bool, np.bool_)):
        return None
    if isinstance(v, (int, float, np.integer, np.floating)):
        return float(v)
    s = str(v).strip().replace("\u2212", "-")
    try:
        return float(s)
    except ValueError:
        return None


def _type_column(name, cells, n):
    texts = [_cell_text(v) for v in cells]
    present = [i for i, t in enumerate(texts) if t is not None]
    missing = n - len(present)
    if not present:
        return np.full(n, np.nan), ColumnInfo(name, EMPTY, missing, 0)
    lowered = {texts[i].lower() for i in present}
    if lowered <= (_TRUE | _FALSE):
        vals = np.full(n, np.nan)
        for i in present:
            vals[i] = 1.0 if texts[i].lower() in _TRUE else 0.0
        return vals, ColumnInfo(name, BOOLEAN, missing, len(lowered))
    nums = np.full(n, np.nan)
    bad = []
    for i in present:
        x = _to_number(cells[i])
        if x is None:
            bad.append(i)
        else:
            nums[i] = x
    n_num = len(present) - len(bad)
    if n_num and n_num >= NUMERIC_SHARE * len(present):
        _, info = _type_numeric_column(name, nums, n)
        bad_cells = tuple((i + 1, texts[i]) for i in bad)
        return nums, ColumnInfo(name, NUMERIC, missing, info.distinct, info.coded_categories, bad_cells)
    vals = np.array([texts[i] if texts[i] is not None else None for i in range(n)], dtype=object)
    return vals, ColumnInfo(name, CATEGORICAL, missing, len({texts[i] for i in present}))

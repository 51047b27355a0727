"""Reading CSV, TSV, Excel (.xlsx) and Parquet files into a typed :class:`Table`.

Reading never executes anything from the file: text formats are parsed as
text, Excel through openpyxl's data-only reader, Parquet through pyarrow.
"""

from __future__ import annotations

import io
import os
import re
import stat
from collections import Counter
from dataclasses import dataclass, replace
from typing import Optional

import numpy as np
import pandas as pd

from regbench.data.table import BOOLEAN, CATEGORICAL, EMPTY, NUMERIC, ColumnInfo, Table, column_block, frame_of
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

#: A text column with at least this share of number cells "looks numeric": its note says why it is text.
LOOKS_NUMERIC_SHARE = 0.3
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_PERCENT = re.compile(r"\s*(" + _NUMBER + r")\s*%\s*")
_DECIMAL_COMMA = re.compile(r"\s*[-+]?\d{1,3}(?:[.\s\u00a0']\d{3})*,\d+\s*|\s*[-+]?\d+,\d+\s*")
_THOUSANDS_COMMA = re.compile(r"\s*[-+]?\d{1,3}(?:,\d{3})+(?:\.\d+)?\s*")


@dataclass(frozen=True)
class NumberStyle:
    """How numbers are written in a file's text cells.

    Attributes
    ----------
    decimal : {".", ","}
        The decimal mark.
    thousands : str or None
        A thousands separator to remove (",", ".", " " or "'"), or None.
    """

    decimal: str = "."
    thousands: Optional[str] = None

    def check(self) -> "NumberStyle":
        if self.decimal not in (".", ","):
            raise DataError(f"decimal mark '{self.decimal}' is not known; use '.' or ','")
        if self.thousands is not None and (self.thousands not in (",", ".", " ", "'")
                                           or self.thousands == self.decimal):
            raise DataError(f"thousands separator '{self.thousands}' is not known or equals the decimal mark; "
                            "use ',', '.', ' ' or \"'\" (not the decimal mark)")
        return self

    @property
    def plain(self) -> bool:
        return self.decimal == "." and self.thousands is None


PLAIN = NumberStyle()

#: First bytes of files that are not text tables, so a wrong name gets a message that says what they are.
_MAGIC = (
    (b"\x1f\x8b", "gzip-compressed data, not text; unpack it first"),
    (b"PAR1", "a Parquet file, not text; give it the .parquet ending"),
    (b"PK\x03\x04", "a zip archive (an .xlsx workbook is one), not text; give a workbook the .xlsx ending, "
                     "or unpack the archive"),
    (b"\xd0\xcf\x11\xe0", "an old-style Excel (.xls) or other binary office file; save it as .xlsx or CSV"),
    (b"BZh", "bzip2-compressed data, not text; unpack it first"),
    (b"\xfd7zXZ", "xz-compressed data, not text; unpack it first"),
    (b"\x28\xb5\x2f\xfd", "zstd-compressed data, not text; unpack it first"),
)

SUPPORTED = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".txt": "csv", ".xlsx": "xlsx", ".parquet": "parquet", ".pq": "parquet"}


def read_table(path, *, encoding: Optional[str] = None, sheet: Optional[str] = None,
               decimal: str = ".", thousands: Optional[str] = None) -> Table:
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
    decimal : {".", ","}
        Decimal mark of numbers written as text (CSV/TSV cells, text cells of a workbook).
    thousands : str, optional
        Thousands separator to remove from numbers written as text.

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
    style = NumberStyle(decimal, thousands).check()
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise DataError(f"{name}: no such file ({path}); check the path") from None
    except OSError as exc:
        raise DataError(f"{name}: cannot be read ({exc.strerror}); check the path and its permissions") from None
    if stat.S_ISDIR(st.st_mode):
        raise DataError(f"{name}: is a folder, not a table file")
    if not stat.S_ISREG(st.st_mode):
        # A pipe or a device would block or never end; never open one.
        raise DataError(f"{name}: is not a regular file (a pipe, socket or device); save the table to a file first")
    ext = os.path.splitext(path)[1].lower()
    fmt = SUPPORTED.get(ext)
    if fmt is None:
        raise DataError(
            f"{name}: unknown table type '{ext or '(none)'}'; use one of "
            + ", ".join(sorted(set(SUPPORTED)))
        )
    if st.st_size == 0:
        raise DataError(f"{name}: the file is empty; it needs a header row and at least one data row")
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise DataError(f"{name}: cannot be read ({exc.strerror}); check the file's permissions") from None
    if fmt in ("csv", "tsv"):
        return _read_text(path, name, "\t" if fmt == "tsv" else None, encoding, style)
    if fmt == "xlsx":
        if not head.startswith(b"PK\x03\x04"):
            _refuse_foreign(head, name, "an .xlsx workbook")
        header, rows, line_rows = _read_xlsx(path, name, sheet)
        return _typed(header, rows, name, style, line_rows)
    if not head.startswith(b"PAR1"):
        _refuse_foreign(head, name, "a Parquet file")
    return _read_parquet(path, name)


def _refuse_foreign(head: bytes, name: str, expected: str) -> None:
    for magic, what in _MAGIC:
        if head.startswith(magic):
            raise DataError(f"{name}: is {what.split(';')[0]}, not {expected}; give the file the ending of what it "
                            "holds")
    if expected != "text":
        raise DataError(f"{name}: does not start like {expected}; check that the file ending matches what it holds "
                        "(a CSV file needs the .csv ending)")


def table_from_frame(frame: pd.DataFrame, source: str = "data frame") -> Table:
    """Type an in-memory DataFrame the same way a file is typed."""
    header = [str(c) for c in frame.columns]
    return _typed_frame(frame, header, source)


# -- raw readers -------------------------------------------------------------------------


def _decode(raw: bytes, name: str, encoding: Optional[str]) -> str:
    if encoding:
        try:
            return raw.decode(encoding)
        except UnicodeDecodeError as exc:
            line = raw[: exc.start].count(b"\n") + 1
            raise DataError(f"{name}: cannot be read as {encoding} (byte {exc.start}, line {line}); "
                            "choose the file's real text encoding") from None
        except LookupError:
            raise DataError(f"{name}: '{encoding}' is not a text encoding this program knows; choose another "
                            "(for example utf-8, cp1252 or latin-1)") from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise DataError(f"{name}: damaged UTF-16 text at byte {exc.start}; export the table again") from None
    for magic, what in _MAGIC:
        if raw.startswith(magic):
            raise DataError(f"{name}: is {what}")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DataError(
            f"{name}: not UTF-8 text (byte {exc.start}, line {line}); re-save the file as UTF-8, "
            "or choose its text encoding (for example cp1252)"
        ) from None


def _line_ends(text: str) -> str:
    """Old-Mac files end lines with CR alone; read them like any other."""
    if "\r" not in text:
        return text
    text = text.replace("\r\n", "\n")
    if "\r" in text and text.count("\r") >= text.count("\n"):
        text = text.replace("\r", "\n")
    return text


def _read_text(path, name, sep, encoding, style=PLAIN):
    import csv

    fast = _read_text_direct(path, name, sep, encoding, style)
    if fast is not None:
        return fast
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise DataError(f"{name}: cannot be read ({exc.strerror}); check the file's permissions") from None
    text = _decode(raw, name, encoding)
    if not text.strip():
        raise DataError(f"{name}: the file holds no text; it needs a header row and at least one data row")
    if "\x00" in text:
        raise DataError(f"{name}: holds NUL bytes, so it is not a text table; export it again as CSV")
    text = _line_ends(text)
    # Lines above the header that are blank are not part of the table; row numbers count from the header.
    stripped = text.lstrip("\n \t")
    lead = text[: len(text) - len(stripped)].count("\n")
    text = text[len(text) - len(stripped):] if lead else text
    if sep is None:
        try:
            sep = csv.Sniffer().sniff(text[:20000], delimiters=",;\t").delimiter
        except csv.Error:
            sep = ","
    fast = _read_text_fast(text, name, sep, style)
    if fast is not None:
        return fast
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
    records = []  # (first line, last line, cells); line 1 is the header line
    prev = 0
    try:
        for r in reader:
            records.append((prev + 1, reader.line_num, r))
            prev = reader.line_num
    except csv.Error as exc:
        raise DataError(f"{name}: line {reader.line_num + lead}: {exc}; fix the quoting on that line") from None
    _check_quotes(records, name, sep, lead)
    records = [rec for rec in records if any(c.strip() for c in rec[2])]
    if not records:
        raise DataError(f"{name}: the file holds no rows")
    header = [h.strip() for h in records[0][2]]
    head_line = records[0][0]
    body = [rec[2] for rec in records[1:]]
    rows = [rec[0] - head_line for rec in records[1:]]
    width = len(header)
    for i, r in enumerate(body):
        if len(r) != width:
            # Trailing empty cells are harmless; anything else shifts columns.
            if len(r) > width and not any(c.strip() for c in r[width:]):
                body[i] = r[:width]
                continue
            if len(r) < width:
                body[i] = r + [""] * (width - len(r))
                continue
            raise DataError(
                f"{name}: data row {rows[i]} (line {rows[i] + head_line + lead}) has {len(r)} cells but the header "
                f"has {width}; check for an unquoted separator in that row"
            )
    _check_header(header, name)
    if not body:
        raise DataError(f"{name}: the header is there but no data rows follow")
    frame = pd.DataFrame(body, columns=range(width), dtype=object)
    if rows == list(range(1, len(rows) + 1)):
        rows = None
    table = _typed_text_frame(frame, header, name, style, rows)
    return _with_line_numbers(table, rows)


_UTF8_NAMES = frozenset({"utf-8", "utf8", "utf-8-sig", "utf_8", "utf_8_sig"})


def _plain_bytes(path):
    """The file's first bytes when it holds no NUL byte and no carriage return outside CR LF, else None."""
    import mmap

    with open(path, "rb") as fh, mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) as mm:
        if mm.find(b"\x00") >= 0:
            return None
        if mm.find(b"\r") >= 0 and re.search(rb"\r(?!\n)", mm):
            return None  # an old-Mac line end: the text readers turn it into a line end first
        return mm[:65536]


def _read_text_direct(path, name, sep, encoding, style=PLAIN):
    """pandas' C parser straight from the file; None when the file needs the readers below.

    Taken for UTF-8 files with plain numbers (no decimal comma or thousands separator), no NUL
    bytes, no lone carriage returns, no blank lines above the header and an unquoted header — a
    cheap scan of the bytes decides.  Numeric columns stay in the parser's float64 block, which
    the table shares (pandas' float parsing equals Python's ``float`` of the text; a test keeps
    that honest); every other column is typed from its cell texts by the careful reader's rules.
    Blank lines are read as empty rows, so each row keeps the number of its line.  Anything the
    parser refuses (ragged rows, bad quoting, bad UTF-8) goes to the careful reader, which names
    the line.
    """
    import csv

    if not style.plain or (encoding is not None and encoding.lower() not in _UTF8_NAMES):
        return None
    try:
        head = _plain_bytes(path)
    except (OSError, ValueError):
        return None
    if head is None or head.startswith((b"\xff\xfe", b"\xfe\xff")) or any(head.startswith(m) for m, _ in _MAGIC):
        return None
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 3:
            return None  # not UTF-8: the text readers name the byte and line, or ask for the encoding
        text = head[:exc.start].decode("utf-8")  # a character cut at the end of the look
    text = text.lstrip("\ufeff")
    first_line = text.split("\n", 1)[0].rstrip("\r")
    if not text[:1].strip() or '"' in first_line or "\n" not in text:
        return None
    if sep is None:
        try:
            sep = csv.Sniffer().sniff(text[:20000], delimiters=",;\t").delimiter
        except csv.Error:
            sep = ","
    first = next(csv.reader(io.StringIO(first_line), delimiter=sep), None)
    if not first:
        return None
    header = [h.strip() for h in first]
    _check_header(header, name)
    frame = _parse_direct(path, sep, len(header))
    if frame is None:
        return None
    return _typed_direct(frame, header, name, path, sep)


def _parse_direct(path, sep, width, only=None):
    """The rows under the header as pandas parses them (blank lines as empty rows), or None."""
    na = sorted({v for t in MISSING_TEXTS for v in (t, t.upper(), t.title())})
    texts = {} if only is None else {"usecols": only, "dtype": str, "na_filter": False}
    try:
        return pd.read_csv(path, sep=sep, header=None, skiprows=1, names=range(width), keep_default_na=False,
                           na_values=na, skip_blank_lines=False, engine="c", index_col=False, encoding="utf-8",
                           **texts)
    except Exception:  # any parser complaint: the careful reader names the row
        return None


def _typed_direct(frame, header, name, path, sep):
    """Type the parsed columns; rows with every cell missing are dropped like blank lines."""
    empty = None
    for j in range(len(header)):  # column by column, stopping once no row is empty throughout
        gap = frame[j].isna().to_numpy()
        empty = gap if empty is None else empty & gap
        if not empty.any():
            break
    keep = None
    if empty.any():
        keep = np.flatnonzero(~empty)
        frame = frame.iloc[keep].reset_index(drop=True)
    n = len(frame)
    if n == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    # Row k of the parse is line k under the header, unless a quoted cell spans lines (refused below).
    rows = None if keep is None or np.array_equal(keep, np.arange(n)) else keep + 1
    kinds = [_parsed_kind(frame[j]) for j in range(len(header))]
    other = [j for j, k in enumerate(kinds) if k == "other"]
    raw = _parse_direct(path, sep, len(header), other) if other else None
    if other and (raw is None or len(raw) != len(empty)):
        return None
    data, infos = {}, {}
    for j, h in enumerate(header):
        col = frame[j]
        if kinds[j] == "number":
            # A float64 column is the parser's own memory (no copy); whole numbers become floats.
            nums = col.to_numpy() if col.dtype == np.float64 else col.to_numpy(dtype=np.float64, na_value=np.nan)
            data[h], infos[h] = _type_numeric_column(h, nums, n, copy=False)
            continue
        if kinds[j] == "other":
            col = raw[j] if keep is None else raw[j].iloc[keep].reset_index(drop=True)
        if col.str.contains("\n", regex=False).any():
            return None  # a quoted cell over several lines: the careful reader checks its quotes
        data[h], infos[h] = _type_text_series(h, col, n, PLAIN, rows)
    return _with_line_numbers(Table(frame=frame_of(header, data, n), columns=infos, source=name), rows)


def _parsed_kind(col: pd.Series) -> str:
    """'number' (kept as parsed), 'text' (typed from its texts) or 'other' (booleans or a column of
    mixed cells: parsed again as texts, so the file's spelling is kept)."""
    if pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
        return "number"
    if pd.api.types.is_string_dtype(col) and pd.api.types.infer_dtype(col, skipna=True) in ("string", "empty"):
        return "text"
    return "other"


def _check_quotes(records, name, sep, lead):
    """A quote left open swallows the rows after it into one cell: refuse, naming the lines."""
    for first, last, cells in records:
        if last > first and any("\n" in c and sep in c for c in cells):
            where = f"lines {first + lead}–{last + lead}"
            raise DataError(
                f"{name}: a quote (\") opened on line {first + lead} is not closed until the end of line "
                f"{last + lead}, so {where} would be read as one cell; close or remove that quote"
            )


def _with_line_numbers(table: Table, rows) -> Table:
    """Give a table the row numbers of its file when blank lines made them differ from 1..n
    (its cells were typed with the same ``rows``)."""
    if rows is None:
        return table
    return replace(table, line_numbers=tuple(int(r) for r in rows))


def _read_text_fast(text, name, sep, style=PLAIN):
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
    if not first or '"' in text.split("\n", 1)[0]:
        return None
    header = [h.strip() for h in first]
    _check_header(header, name)
    na = sorted({v for t in MISSING_TEXTS for v in (t, t.upper(), t.title())})
    numbers = {} if style.plain else {"decimal": style.decimal, "thousands": style.thousands}
    try:
        frame = pd.read_csv(
            io.StringIO(text), sep=sep, header=None, skiprows=1, names=range(len(header)),
            keep_default_na=False, na_values=na, skip_blank_lines=True, engine="c",
            index_col=False, dtype_backend="numpy_nullable", **numbers,
        )
    except Exception:  # any parser complaint: let the careful reader name the row
        return None
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        frame = frame.loc[~blank].reset_index(drop=True)
    if len(frame) == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    n = len(frame)
    rows = _fast_row_numbers(text, sep, n)
    if rows is None:
        return None
    rows = None if rows is True else rows
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
            if raw.str.contains("\n", regex=False).any():
                return None  # a quoted cell over several lines: the careful reader checks its quotes
            if blank.any():
                raw = raw.loc[~blank].reset_index(drop=True)
            values, info = _type_text_series(h, raw, n, style, rows)
        data[h] = values
        infos[h] = info
    table = Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)
    return _with_line_numbers(table, rows)


def _fast_row_numbers(text, sep, n):
    """True when the n rows are the n lines under the header; else each row's line below the
    header (blank lines counted); None when that cannot be told without the careful reader."""
    body = text.split("\n")[1:]
    while body and not body[-1].strip():
        body.pop()
    if len(body) == n:
        return True
    rows = []
    for k, line in enumerate(body, start=1):
        if not line.strip():
            continue
        if all(c.strip().lower() in MISSING_TEXTS for c in line.split(sep)):
            continue  # the parser's all-missing rows, dropped above
        rows.append(k)
    return rows if len(rows) == n else None


def _typed_text_frame(frame, header, name, style=PLAIN, rows=None) -> Table:
    """Type columns of text cells, vectorized per column (the rules of :func:`_type_column`)."""
    n = len(frame)
    data, infos = {}, {}
    for j, h in enumerate(header):
        values, info = _type_text_series(h, frame.iloc[:, j], n, style, rows)
        data[h] = values
        infos[h] = info
    return Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)


def _parse_numbers(texts: pd.Series, style=PLAIN) -> np.ndarray:
    s = texts.str.replace("\u2212", "-", regex=False)
    if style.thousands is not None:
        s = s.str.replace(style.thousands, "", regex=False)
    if style.decimal == ",":
        s = s.str.replace(",", ".", regex=False)
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)


def _percentages(texts: pd.Series, bad: np.ndarray, style=PLAIN):
    """Values of the cells among ``bad`` written as percentages ('12.3%' -> 12.3), NaN elsewhere."""
    out = np.full(len(texts), np.nan)
    idx = np.flatnonzero(bad)
    if not idx.size:
        return out
    sub = texts.iloc[idx]
    if style.thousands is not None:
        sub = sub.str.replace(style.thousands, "", regex=False)
    if style.decimal == ",":
        sub = sub.str.replace(",", ".", regex=False)
    got = sub.str.fullmatch(_PERCENT.pattern)
    ok = got.fillna(False).to_numpy(dtype=bool)
    if ok.any():
        out[idx[ok]] = pd.to_numeric(sub[ok].str.replace("%", "", regex=False).str.strip(), errors="coerce").to_numpy()
    return out


def _why_text(texts: pd.Series, present: np.ndarray, bad: np.ndarray, rows=None, with_comma=None) -> str:
    """The note for a column that looks numeric but is read as text, naming rows and cells.

    ``with_comma``: how many of the ``bad`` cells hold a comma, when the caller counted them already
    (over each distinct text once)."""
    idx = np.flatnonzero(bad)
    n_num = int(present.sum() - bad.sum())
    if n_num + idx.size < LOOKS_NUMERIC_SHARE * int(present.sum()):
        return ""
    if n_num < LOOKS_NUMERIC_SHARE * int(present.sum()):
        # Only cells written with a comma can add to the numbers; counting commas is cheap.
        if with_comma is None:
            with_comma = int(texts.iloc[idx].astype(str).str.contains(",", regex=False).sum())
        if n_num + with_comma < LOOKS_NUMERIC_SHARE * int(present.sum()) or n_num + with_comma == 0:
            return ""
    cells = [str(texts.iat[i]) for i in idx]
    comma = [bool(_DECIMAL_COMMA.fullmatch(c) or _THOUSANDS_COMMA.fullmatch(c)) for c in cells]
    looks = n_num + sum(comma)
    total = int(present.sum())
    if looks == 0 or looks < LOOKS_NUMERIC_SHARE * total:
        return ""
    rown = [int(rows[i]) if rows is not None else int(i) + 1 for i in idx]
    if all(comma):
        shown = _rows_text(rown)
        sample = ", ".join(repr(c) for c in cells[:3])
        if all(_THOUSANDS_COMMA.fullmatch(c) for c in cells):
            todo = ("read the file with ',' as the thousands separator if these are thousands, or with a decimal "
                    "comma if they are decimals")
        else:
            todo = "read the file with a decimal comma"
        return (f"looks numeric but was read as text because rows {shown} hold numbers written with a comma "
                f"({sample}); {todo}")
    other = [(r, c) for r, c, k in zip(rown, cells, comma) if not k]
    shown = _rows_text([r for r, _ in other])
    sample = ", ".join(repr(c) for _, c in other[:3])
    return (f"looks numeric ({looks} of {total} cells are numbers) but was read as text because rows {shown} "
            f"hold {sample}; make those cells numbers or leave them empty, or keep the column as text")


def _rows_text(rows) -> str:
    return ", ".join(str(r) for r in rows[:5]) + (f" (and {len(rows) - 5} more)" if len(rows) > 5 else "")


def _boolean_words(texts) -> tuple:
    """(false word, true word) as the file most often spells them, or () unless both occur."""
    counts = texts if isinstance(texts, Counter) else Counter(str(t) for t in texts)
    false = [t for t, _ in counts.most_common() if t.lower() in _FALSE]
    true = [t for t, _ in counts.most_common() if t.lower() in _TRUE]
    return (false[0], true[0]) if false and true else ()


def _type_text_series(name, col, n, style=PLAIN, rows=None):
    """Type a column of cell texts (None or NaN where empty) by the rules of :func:`_type_column`.

    Every rule looks at one cell at a time, so each distinct text is looked at once and the
    answers are spread over the rows by their codes: a column of a few hundred labels over a
    million rows costs one hashing pass, not a million string operations.
    """
    codes, uniq = pd.factorize(col, use_na_sentinel=True)
    m = len(uniq)
    codes = np.where(codes < 0, m, codes)  # the empty cells share one extra slot
    u = pd.Series(list(uniq) + [None], dtype=object)
    stripped_u = u.where(u.notna(), None).str.strip()
    lowered_u = stripped_u.str.lower()
    present_u = ~(stripped_u.isna() | lowered_u.isin(MISSING_TEXTS)).to_numpy()
    present = present_u[codes]
    missing = int(n - present.sum())
    if not present.any():
        return np.full(n, np.nan), ColumnInfo(name, EMPTY, missing, 0)
    words_u = set(lowered_u[present_u])
    if words_u <= (_TRUE | _FALSE):
        truth_u = np.where(present_u, lowered_u.isin(_TRUE).to_numpy().astype(float), np.nan)
        counts = np.bincount(codes, minlength=m + 1)
        spelled = Counter()
        for k in np.flatnonzero(present_u):
            spelled[stripped_u.iat[k]] += int(counts[k])
        return truth_u[codes], ColumnInfo(name, BOOLEAN, missing, len(words_u), words=_boolean_words(spelled))
    texts_u = stripped_u.where(present_u, None)
    nums_u = _parse_numbers(texts_u, style)
    bad_u = present_u & np.isnan(nums_u)
    note = ""
    if bad_u.any():
        pct_u = _percentages(texts_u, bad_u, style)
        if np.isfinite(pct_u).any():
            nums_u = np.where(np.isfinite(pct_u), pct_u, nums_u)
            bad_u = present_u & np.isnan(nums_u)
            hit = np.flatnonzero(np.isfinite(pct_u)[codes])
            k = hit.size
            note = (f"{k} cell{'s' if k > 1 else ''} written as percentages read as numbers of percent "
                    f"('{texts_u.iat[codes[hit[0]]]}' is read as {pct_u[codes[hit[0]]]:g})")
    nums, bad = nums_u[codes], bad_u[codes]
    n_num = int(present.sum() - bad.sum())
    if n_num and n_num >= NUMERIC_SHARE * present.sum():
        nums = np.where(present, nums, np.nan)
        _, info = _type_numeric_column(name, nums, n)
        bad_idx = np.flatnonzero(bad)
        bad_cells = tuple((int(rows[i]) if rows is not None else int(i) + 1, texts_u.iat[codes[i]]) for i in bad_idx)
        return nums, ColumnInfo(name, NUMERIC, missing, info.distinct, info.coded_categories, bad_cells, note)
    vals = texts_u.to_numpy(dtype=object)[codes]  # None where missing: the Table's convention for a category
    distinct = len(set(texts_u[present_u]))
    # Commas among the text cells, counted once per distinct text (a comma test of every cell of a
    # 100,000-row label column was most of its typing).
    comma_u = bad_u & texts_u.astype(str).str.contains(",", regex=False).to_numpy(dtype=bool)
    with_comma = int(np.bincount(codes, minlength=m + 1)[comma_u].sum())
    return vals, ColumnInfo(name, CATEGORICAL, missing, distinct,
                            note=_why_text(pd.Series(vals, dtype=object), present, bad, rows, with_comma))


def _read_xlsx(path, name, sheet):
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - declared dependency
        raise DataError("reading .xlsx needs the openpyxl package; reinstall regbench") from None
    _check_xlsx_xml(path, name)
    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many kinds for a damaged file
        raise DataError(f"{name}: not a readable .xlsx workbook ({type(exc).__name__}); open and re-save it in a "
                        "spreadsheet program") from None
    try:
        if sheet is None:
            if not wb.worksheets:
                raise DataError(f"{name}: the workbook has no worksheet; save the table on a sheet")
            ws = wb.worksheets[0]
        elif sheet in wb.sheetnames:
            ws = wb[sheet]
        else:
            raise DataError(f"{name}: no sheet '{sheet}'; sheets are: {', '.join(wb.sheetnames)}; choose the sheet")
        label = ws.title
        try:
            rows = [list(r) for r in ws.iter_rows(values_only=True)]
        except DataError:
            raise
        except Exception as exc:  # damaged sheet XML, refused entities, ...
            raise DataError(f"{name}: sheet '{label}' cannot be read ({type(exc).__name__}); open and re-save the "
                            "workbook in a spreadsheet program") from None
        others = [w.title for w in wb.worksheets if w.title != label and _sheet_has_data(w)]
    finally:
        wb.close()
    keep = [i for i, r in enumerate(rows) if any(c is not None and str(c).strip() for c in r)]
    if not keep:
        where = "the first sheet" if sheet is None else "sheet"
        hint = (f"sheets with data: {', '.join(repr(o) for o in others)}; choose the sheet" if others
                else "no sheet of the workbook holds data")
        raise DataError(f"{name}: {where} '{label}' is empty; {hint}")
    _check_formulas(path, name, label, rows)
    head_at = keep[0]
    header = ["" if c is None else str(c).strip() for c in rows[head_at]]
    body_idx = keep[1:]
    body_rows = [rows[i] for i in body_idx]
    while header and header[-1] == "" and all(len(r) < len(header) or r[len(header) - 1] is None for r in body_rows):
        header.pop()
    width = len(header)
    body = [(list(r) + [None] * width)[:width] for r in body_rows]
    line_rows = [i - head_at for i in body_idx]
    return header, body, (None if line_rows == list(range(1, len(body) + 1)) else line_rows)


def _sheet_has_data(ws) -> bool:
    try:
        for r in ws.iter_rows(values_only=True, max_row=200):
            if any(c is not None and str(c).strip() for c in r):
                return True
    except Exception:
        return False
    return False


def _check_xlsx_xml(path, name):
    """Refuse XML with a document type (entity definitions: expansion bombs or external files)
    before any parser sees it.  openpyxl's own files never carry one."""
    import zipfile

    try:
        with zipfile.ZipFile(path) as zf:
            for info in zf.infolist():
                if not info.filename.endswith((".xml", ".rels", ".vml")):
                    continue
                with zf.open(info) as fh:
                    head = fh.read(4096)
                if b"<!DOCTYPE" in head or b"<!ENTITY" in head or b"<!doctype" in head:
                    raise DataError(f"{name}: part '{info.filename}' of the workbook declares XML entities, which "
                                    "a spreadsheet never needs (refused for safety); save the table again from a "
                                    "spreadsheet program")
    except DataError:
        raise
    except Exception as exc:
        raise DataError(f"{name}: not a readable .xlsx workbook ({type(exc).__name__}); open and re-save it in a "
                        "spreadsheet program") from None


def _check_formulas(path, name, label, rows):
    """A formula cell saved without its computed value reads as empty: name it instead of losing it."""
    import openpyxl
    from openpyxl.utils import get_column_letter

    if not any(c is None for r in rows for c in r):
        return
    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=False)
        try:
            formulas = [list(r) for r in wb[label].iter_rows(values_only=True)]
        finally:
            wb.close()
    except Exception:
        return
    found = []
    for i, (vr, fr) in enumerate(zip(rows, formulas)):
        for j, (v, f) in enumerate(zip(vr, fr)):
            if v is None and f is not None and (isinstance(f, str) and f.startswith("=") or "Formula" in type(f).__name__):
                found.append(f"{get_column_letter(j + 1)}{i + 1}")
    if found:
        more = f" (and {len(found) - 3} more)" if len(found) > 3 else ""
        raise DataError(f"{name}: sheet '{label}' cell{'s' if len(found) > 1 else ''} {', '.join(found[:3])}{more} "
                        "hold a formula saved without its computed value (the program that wrote the file did not "
                        "compute it); open the workbook in a spreadsheet program and save it, or replace the "
                        "formulas by their values")


def _read_parquet(path, name):
    """Numeric columns straight into one float64 block, a few columns at a time.

    Each group of columns is decoded by pyarrow, copied into its place in the block and
    released before the next, so the read holds the table's numbers once plus one group
    (compare ``pq.read_table`` + ``to_pandas``, which holds them three times).  Other columns
    (text, booleans, dates, decimals) are typed from their cells as before.
    """
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:  # pragma: no cover - declared dependency
        raise DataError("reading Parquet needs the pyarrow package; reinstall regbench") from None

    def unreadable(exc):
        return DataError(f"{name}: not a readable Parquet file ({type(exc).__name__}: {str(exc)[:200]}); export "
                         "it again")

    try:
        pf = pq.ParquetFile(path)
        schema = pf.schema_arrow
    except Exception as exc:
        raise unreadable(exc) from None
    header = [str(n) for n in schema.names]
    _check_header(header, name)
    n = pf.metadata.num_rows
    if n == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    numeric = [f.name for f in schema if pa.types.is_integer(f.type) or pa.types.is_floating(f.type)]
    block = column_block(n, len(numeric))
    slot = {c: k for k, c in enumerate(numeric)}
    data, infos = {}, {}
    for group in column_groups(schema.names, n):
        try:
            tab = pf.read(columns=group, use_threads=True)
        except Exception as exc:
            raise unreadable(exc) from None
        if tab.num_rows != n:
            raise DataError(f"{name}: holds {tab.num_rows} rows where its description says {n}; export it again")
        for c in group:
            h = str(c)
            col = tab.column(c)
            if c in slot:
                out = block[:, slot[c]]
                _fill(out, col)
                values, info = _type_numeric_column(h, out, n, copy=False)
            else:
                values, info = _type_cells(h, col.to_pandas(), n)
            data[h], infos[h] = values, info
        del tab
    return Table(frame=frame_of(header, data, n), columns=infos, source=name)


#: Bytes of decoded columns held at once while a Parquet file is read into its block.
PARQUET_GROUP_BYTES = 64 * 2**20


def column_groups(names, n):
    """The columns in file order, in groups of about :data:`PARQUET_GROUP_BYTES` of float64."""
    per = max(1, PARQUET_GROUP_BYTES // (8 * n))
    names = list(names)
    return [names[i:i + per] for i in range(0, len(names), per)]


def _fill(out: np.ndarray, col) -> None:
    """Copy a pyarrow numeric column (nulls as NaN) into ``out`` chunk by chunk."""
    a = 0
    for chunk in col.chunks:
        b = a + len(chunk)
        out[a:b] = chunk.to_numpy(zero_copy_only=False)
        a = b


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


def _typed(header, rows, name, style=PLAIN, line_rows=None) -> Table:
    _check_header(header, name)
    if not rows:
        raise DataError(f"{name}: the header is there but no data rows follow")
    n = len(rows)
    data = {}
    infos = {}
    cols = list(zip(*rows)) if rows else [() for _ in header]
    for j, h in enumerate(header):
        values, info = _type_column(h, cols[j], n, style, line_rows)
        data[h] = values
        infos[h] = info
    frame = pd.DataFrame(data, index=pd.RangeIndex(n))
    return _with_line_numbers(Table(frame=frame, columns=infos, source=name), line_rows)


def _typed_frame(frame: pd.DataFrame, header, name) -> Table:
    """Type a frame column by column; columns already stored as numbers skip the per-cell pass."""
    _check_header(header, name)
    n = len(frame)
    if n == 0:
        raise DataError(f"{name}: the header is there but no data rows follow")
    data = {}
    infos = {}
    for j, h in enumerate(header):
        data[h], infos[h] = _type_cells(h, frame.iloc[:, j], n)
    return Table(frame=pd.DataFrame(data, index=pd.RangeIndex(n)), columns=infos, source=name)


def _type_cells(h, col: pd.Series, n):
    """One column of a frame typed: numbers as they are, text by the text rules, anything else cell by cell."""
    if pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
        return _type_numeric_column(h, col.to_numpy(dtype=float, na_value=np.nan), n)
    if pd.api.types.infer_dtype(col, skipna=True) in ("string", "empty"):
        # Text only: the vectorized text rules, as for a CSV column.
        return _type_text_series(h, col.astype(object).where(pd.notna(col), None), n)
    cells = col.astype(object).where(pd.notna(col), None).tolist()
    return _type_column(h, cells, n)


def _type_numeric_column(name, nums, n, copy: bool = True):
    """The numeric branch of :func:`_type_column` for a column stored as numbers (same result, vectorized).

    ``copy=False`` returns ``nums`` itself as the column's values (a column of a reader's block).
    """
    # One sort answers everything: NaN sorts last and ±inf at the ends, so the empty cells and the
    # finite values are found by bisection instead of two more passes over the column.
    ordered = np.sort(nums)
    filled = int(np.searchsorted(ordered, np.nan))
    missing = n - filled
    if missing == n:
        return np.full(n, np.nan), ColumnInfo(name, EMPTY, missing, 0)
    finite = ordered[int(np.searchsorted(ordered[:filled], -np.inf, side="right")):
                     int(np.searchsorted(ordered[:filled], np.inf, side="left"))]
    # Distinct values of a sorted column: one more than its steps (as np.unique counts, -0 equal to 0).
    distinct = int(np.count_nonzero(finite[1:] != finite[:-1])) + 1 if finite.size else 0
    coded = bool(
        finite.size
        and distinct <= CODED_MAX_LEVELS
        and distinct >= 2
        and np.all(finite == np.round(finite))
        and finite.size >= 2 * distinct
    )
    return (nums.copy() if copy else nums), ColumnInfo(name, NUMERIC, missing, distinct, coded, ())


def _cell_text(v):
    if v is None:
        return None
    if isinstance(v, float) and np.isnan(v):
        return None
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    s = str(v).strip()
    return None if s.lower() in MISSING_TEXTS else s


def _to_number(v, style=PLAIN):
    if isinstance(v, (bool, np.bool_)):
        return None
    if isinstance(v, (int, float, np.integer, np.floating)):
        try:
            return float(v)
        except OverflowError:  # a whole number beyond float range
            return None
    s = str(v).strip().replace("\u2212", "-")
    if style.thousands is not None:
        s = s.replace(style.thousands, "")
    if style.decimal == ",":
        s = s.replace(",", ".")
    try:
        return float(s)
    except ValueError:
        return None


def _type_column(name, cells, n, style=PLAIN, rows=None):
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
        return vals, ColumnInfo(name, BOOLEAN, missing, len(lowered), words=_boolean_words([texts[i] for i in present]))
    nums = np.full(n, np.nan)
    bad = []
    for i in present:
        x = _to_number(cells[i], style)
        if x is None:
            bad.append(i)
        else:
            nums[i] = x
    note = ""
    series = pd.Series(texts, dtype=object)
    pmask = np.zeros(n, dtype=bool)
    pmask[present] = True
    if bad:
        bmask = np.zeros(n, dtype=bool)
        bmask[bad] = True
        pct = _percentages(series, bmask, style)
        if np.isfinite(pct).any():
            hit = np.flatnonzero(np.isfinite(pct))
            nums[hit] = pct[hit]
            bad = [i for i in bad if not np.isfinite(pct[i])]
            note = (f"{hit.size} cell{'s' if hit.size > 1 else ''} written as percentages read as numbers of "
                    f"percent ('{texts[hit[0]]}' is read as {pct[hit[0]]:g})")
    n_num = len(present) - len(bad)
    if n_num and n_num >= NUMERIC_SHARE * len(present):
        _, info = _type_numeric_column(name, nums, n)
        bad_cells = tuple((int(rows[i]) if rows is not None else i + 1, texts[i]) for i in bad)
        return nums, ColumnInfo(name, NUMERIC, missing, info.distinct, info.coded_categories, bad_cells, note)
    bmask = np.zeros(n, dtype=bool)
    bmask[bad] = True
    vals = np.array([texts[i] if texts[i] is not None else None for i in range(n)], dtype=object)
    return vals, ColumnInfo(name, CATEGORICAL, missing, len({texts[i] for i in present}),
                            note=_why_text(series, pmask, bmask, rows))

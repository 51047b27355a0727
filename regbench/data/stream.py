"""Tables larger than memory: the one pass over the rows, read batch by batch.

A Parquet file, a folder of Parquet files, or a CSV file (through pyarrow's
streaming CSV reader) is cut into *parts* (a Parquet row group or file; the
whole CSV) and each part is read in batches of a bounded number of rows.  Two
passes run over the parts, each with memory bounded by the batch:

1. *Rows*: which rows can be used (the reasons of the in-memory route: a
   missing or non-finite target, predictor or weight, a negative weight, a
   missing group), each group's weight and row count, and each predictor's
   range on the usable rows (a constant column is set aside, as in memory).
2. *Statistics*: the cross-products of every CV fold, merged as centred
   co-moments, and the triangular factor of the rows for OLS
   (:class:`regbench.models.gram.FoldAccumulator`,
   :class:`~regbench.models.gram.FactorAccumulator`), plus a seeded sample of
   rows for the views that need rows (scatter plots, residuals, per-row stress).
   With a group column, each group's cross-products too (:class:`GroupSums`):
   OLS's cluster-robust standard errors and grouped bootstrap stability follow
   from them without the rows.

Before them, a survey (:mod:`regbench.data.survey`) reads only the columns that fix the
design: the levels of text predictors (coded as in memory: against the first level for
OLS, one indicator per level for the penalized fits), a yes/no target (refused before the
full pass), the identifier rule's facts and what derived columns need.  Each batch then
computes its derived columns and codes its categories the same way (:func:`prepare_batch`).

Only statistics of size p×p (and per-group sums) leave a part, so the same
functions run as tasks on a cluster (:mod:`regbench.cluster`).  The folds
are those of the in-memory route (same seed, same groups, same row order), so
the fit equals the in-memory fit to round-off.

What the streamed route does not do: yes/no outcomes (a logistic fit needs a pass over
the rows per step) and text columns holding mostly numbers are refused with one line (a
text column of yes/no words is read as 1 and 0, as in memory); a CSV with text in a numeric column is refused with one line naming the
column, the row and the text of the first such cell, where the in-memory route sets the
column aside.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Optional

import numpy as np

from regbench.errors import DataError

#: Rows kept for row-level views when the table is streamed (seeded sample).
SAMPLE_ROWS = 20_000
#: The in-memory route needs about this many times the table's float64 size (measured:
#: reading, typing, the design and the fit's temporaries; 4.7 GB for an 800 MB table).
IN_MEMORY_FACTOR = 6.0
#: Excluded rows listed one by one; beyond this they are counted.
MAX_LISTED_EXCLUSIONS = 1000

_SIZE = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*([kmgt]?i?b?)\s*$", re.IGNORECASE)
_UNITS = {"": 1, "b": 1, "k": 10**3, "kb": 10**3, "kib": 2**10, "m": 10**6, "mb": 10**6, "mib": 2**20,
          "g": 10**9, "gb": 10**9, "gib": 2**30, "t": 10**12, "tb": 10**12, "tib": 2**40}


def parse_size(text, what: str = "--memory-budget") -> int:
    """Bytes in ``'500MB'``, ``'2GB'``, ``'1.5GiB'``, ``'800000000'``."""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        m = _SIZE.match(str(text))
        unit = m.group(2).lower() if m else None
        if not m or unit not in _UNITS:
            raise DataError(f"{what}: '{text}' is not a size; write e.g. 500MB, 2GB or 1.5GiB")
        value = float(m.group(1)) * _UNITS[unit]
    if not value >= 1e6:
        raise DataError(f"{what}: {text} is below 1 MB; give at least a few hundred MB, e.g. 500MB")
    return int(value)


@dataclass(frozen=True)
class Part:
    """One piece of the table read as a whole by one task: a Parquet row group or file, or a CSV file."""

    path: str
    kind: str  # "parquet" or "csv"
    row_group: Optional[int]
    rows: Optional[int]  # known for Parquet
    first_row: int  # 0-based table row of its first row (Parquet); CSV parts come one per file


def _is_csv(path: Path) -> bool:
    return path.suffix.lower() in (".csv", ".txt", ".tsv")


def parts_of(path) -> list:
    """The parts of a Parquet file, a folder of Parquet files or a CSV file, in row order."""
    import pyarrow.parquet as pq

    path = Path(path)
    if not path.exists():
        raise DataError(f"{path}: no such file or folder")
    if path.is_dir():
        files = sorted(p for p in path.rglob("*.parquet") if p.is_file())
        if not files:
            raise DataError(f"{path}: the folder holds no .parquet file; give a Parquet file, a folder of them or a CSV")
    elif _is_csv(path):
        return [Part(str(path), "csv", None, None, 0)]
    else:
        files = [path]
    out = []
    first = 0
    for f in files:
        try:
            meta = pq.ParquetFile(f).metadata
        except Exception as exc:  # pyarrow raises several kinds for a damaged file
            raise DataError(f"{f}: not a readable Parquet file ({exc}); export it again") from None
        for g in range(meta.num_row_groups):
            n = meta.row_group(g).num_rows
            out.append(Part(str(f), "parquet", g, n, first))
            first += n
    return out


def table_columns(path) -> list:
    """Column names of the table (from the Parquet schema or the CSV header)."""
    parts = parts_of(path)
    if parts[0].kind == "csv":
        import pyarrow.csv as pacsv

        with pacsv.open_csv(parts[0].path) as reader:
            return list(reader.schema.names)
    import pyarrow.parquet as pq

    return list(pq.ParquetFile(parts[0].path).schema_arrow.names)


def table_rows(path) -> Optional[int]:
    """Row count from the Parquet metadata (None for CSV, which must be read to know)."""
    parts = parts_of(path)
    if any(p.rows is None for p in parts):
        return None
    return sum(p.rows for p in parts)


def estimate_in_memory_bytes(path, n_columns: Optional[int] = None) -> Optional[int]:
    """What reading the table in memory would take, roughly (None when unknown in advance)."""
    p = Path(path)
    rows = table_rows(p)
    if rows is None:
        # A CSV of numbers holds about 10-20 characters per cell, a float64 8 bytes.
        size = p.stat().st_size if p.is_file() else 0
        return int(IN_MEMORY_FACTOR * size * 0.6)
    cols = n_columns or len(table_columns(p))
    return int(IN_MEMORY_FACTOR * rows * cols * 8)


def batch_rows_for(budget: Optional[int], n_columns: int) -> int:
    """Rows per batch: a batch of float64 cells takes a thirty-second of the budget.

    Measured at 3M × 100 under 500 MB: the interpreter and libraries take about
    200 MB, the Parquet reader's own buffers (a dictionary page and a data page
    per column) 300-400 MB whatever the batch, and the batch with its
    temporaries (the cells, the kept rows, the factor's block) about four copies.
    """
    if budget is None:
        return 65_536
    return int(max(4096, min(262_144, budget / 32 / (8 * max(n_columns, 1)))))


def read_batches(part: Part, columns, batch_rows: int, numeric=(), text=()):
    """Batches of ``part`` as dicts of column name -> numpy array (float64 for ``numeric``, else object);
    the columns in ``text`` stay pyarrow arrays (category predictors, coded by :func:`prepare_batch`)."""
    import pyarrow as pa

    if part.kind == "parquet":
        import pyarrow.parquet as pq

        # Without pre-buffering the reader holds one page per column rather than the part's
        # whole compressed bytes (measured: 110 MB less at 200k-row row groups of 101 columns).
        f = pq.ParquetFile(part.path, pre_buffer=False, buffer_size=1 << 20)
        it = f.iter_batches(batch_size=batch_rows, row_groups=[part.row_group], columns=list(columns))
    else:
        import pyarrow.csv as pacsv

        types = {c: pa.float64() for c in numeric}
        types.update({c: pa.string() for c in columns if c not in numeric})
        block = max(1 << 20, batch_rows * 12 * max(len(columns), 1))
        try:
            reader = pacsv.open_csv(part.path, read_options=pacsv.ReadOptions(block_size=block),
                                    convert_options=pacsv.ConvertOptions(column_types=types,
                                                                         include_columns=list(columns)))
        except pa.ArrowInvalid as exc:
            raise _bad_cell(part.path, exc, numeric) from None
        it = _csv_batches(reader, part.path, numeric)
    for batch in it:
        yield {name: batch.column(i) if name in text else _to_numpy(batch.column(i), name in numeric, part.path, name)
               for i, name in enumerate(batch.schema.names)}
    # The reader's pages go back to the system between parts rather than staying in the pool.
    pa.default_memory_pool().release_unused()


def _csv_batches(reader, path, numeric):
    import pyarrow as pa

    while True:
        try:
            batch = reader.read_next_batch()
        except StopIteration:
            return
        except pa.ArrowInvalid as exc:
            raise _bad_cell(path, exc, numeric) from None
        yield batch


_CSV_COLUMN = re.compile(r"CSV column #(\d+)")


def _bad_cell(path, exc, numeric) -> DataError:
    """One line naming the file, column, row and text of the first cell of a numeric column that is
    not a number (found by reading that column again as text, batch by batch)."""
    m = _CSV_COLUMN.search(str(exc))
    names = table_columns(path)
    column = names[int(m.group(1))] if m and int(m.group(1)) < len(names) else None
    if column is None or column not in numeric:
        return DataError(f"{path}: cannot be read as a table of numbers ({exc}); read it in memory (without "
                         "--memory-budget) to have bad cells listed row by row")
    found = _first_text_cell(path, column)
    where = f"row {found[0]} holds '{found[1]}'" if found else "a cell holds text"
    return DataError(f"{path}: column '{column}', {where}, not a number; the streamed route needs numbers in the "
                     "target, weights and predictors: make the cell a number or leave it empty, leave the column out "
                     "of the predictors, or read the table in memory (without --memory-budget), which sets such a "
                     "column aside")


def _first_text_cell(path, column):
    """(1-based data row, text) of the first cell of ``column`` that is neither empty nor a number."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    from regbench.data.reader import MISSING_TEXTS

    opts = pacsv.ConvertOptions(column_types={column: pa.string()}, include_columns=[column],
                                strings_can_be_null=True)
    row = 0
    with pacsv.open_csv(path, convert_options=opts) as reader:
        for batch in reader:
            for i, v in enumerate(batch.column(0).to_pylist()):
                if v is not None and v.strip().lower() not in MISSING_TEXTS and not _is_number(v):
                    return row + i + 1, v
            row += batch.num_rows
    return None


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _to_numpy(arr, numeric: bool, path, name):
    import pyarrow as pa
    import pyarrow.compute as pc

    if numeric:
        t = arr.type
        if pa.types.is_boolean(t):
            arr = pc.cast(arr, pa.int8())
        elif not (pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)):
            raise DataError(f"{path}: column '{name}' holds {t}, not numbers; the streamed route needs numeric "
                            "predictors, target and weights (name other predictors, or read the table in memory)")
        return arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
    return arr.to_numpy(zero_copy_only=False)


# --------------------------------------------------------------------------- the two passes


@dataclass
class RowsInfo:
    """What the first pass learns from one part (or several, merged)."""

    n_rows: int = 0
    n_kept: int = 0
    excluded: list = field(default_factory=list)  # (table row 1-based, column, reason)
    n_excluded: int = 0
    #: label text -> [weight, rows, rows with weight, lowest and highest target on those rows]
    groups: dict = field(default_factory=dict)
    y_range: tuple = (np.inf, -np.inf)
    x_min: Optional[np.ndarray] = None
    x_max: Optional[np.ndarray] = None
    w_pos: int = 0
    x_count: Optional[np.ndarray] = None  # column sums over the usable rows (a level's rows, for indicators)

    def merge(self, other: "RowsInfo") -> "RowsInfo":
        out = RowsInfo(n_rows=self.n_rows + other.n_rows, n_kept=self.n_kept + other.n_kept,
                       excluded=(self.excluded + other.excluded)[:MAX_LISTED_EXCLUSIONS],
                       n_excluded=self.n_excluded + other.n_excluded, groups=dict(self.groups),
                       y_range=(min(self.y_range[0], other.y_range[0]), max(self.y_range[1], other.y_range[1])),
                       w_pos=self.w_pos + other.w_pos)
        for k, (gw, gn, gp, lo, hi) in other.groups.items():
            a = out.groups.get(k, [0.0, 0, 0, np.inf, -np.inf])
            out.groups[k] = [a[0] + gw, a[1] + gn, a[2] + gp, min(a[3], lo), max(a[4], hi)]
        mins = [m for m in (self.x_min, other.x_min) if m is not None]
        maxs = [m for m in (self.x_max, other.x_max) if m is not None]
        out.x_min = np.minimum.reduce(mins) if mins else None
        out.x_max = np.maximum.reduce(maxs) if maxs else None
        sums = [m for m in (self.x_count, other.x_count) if m is not None]
        out.x_count = np.add.reduce(sums) if sums else None
        return out


@dataclass(frozen=True)
class Plan:
    """What the passes read and how each batch becomes design rows: the roles resolved against the
    table's columns, with what the survey (:mod:`regbench.data.survey`) learnt.

    Attributes
    ----------
    predictors : tuple of str
        Predictors as the roles name them (table columns, or derived columns).
    levels : tuple of (predictor, tuple of level texts)
        Category predictors and every level seen on the table's rows, sorted.  A batch
        codes each against the first level (the in-memory reference coding); the levels
        absent from the usable rows are dropped after the pass.
    number_levels : tuple of (predictor, tuple of (value, level text))
        Numbers marked as categories: each value's level text.
    text : tuple of str
        Category predictors read as text.
    derived : tuple of (Derived, affine)
        Derived columns computed on every batch, in order.
    design : tuple of (design column, predictor, level index or None), optional
        The design columns a batch yields; by default every column the coding gives.
    set_aside : tuple of UnusableColumn
        Columns the default choice of predictors left out (identifiers, empty columns).
    booleans : tuple of str
        Text predictors of yes/no words (also in ``text``), read as 1 and 0 as the in-memory reader does.
    """

    target: str
    predictors: tuple
    weights: Optional[str]
    groups: Optional[str]
    batch_rows: int
    levels: tuple = ()
    number_levels: tuple = ()
    text: tuple = ()
    derived: tuple = ()
    design: Optional[tuple] = None
    set_aside: tuple = ()
    booleans: tuple = ()

    @property
    def design_columns(self) -> tuple:
        if self.design is not None:
            return self.design
        cats = dict(self.levels)
        out = []
        for c in self.predictors:
            if c in cats:
                out += [(f"{c}={lev}", c, i) for i, lev in enumerate(cats[c]) if i > 0]
            else:
                out.append((c, c, None))
        return tuple(out)

    @property
    def names(self) -> tuple:
        """The design columns' names."""
        return tuple(d[0] for d in self.design_columns)

    @property
    def raw(self) -> tuple:
        """Table columns read for the target, weights, predictors and derived columns."""
        made = {d.name for d, _ in self.derived}
        cols = [self.target] + ([self.weights] if self.weights else [])
        cols += [c for c in self.predictors if c not in made]
        cols += [c for d, _ in self.derived for c in d.columns if c not in made]
        return tuple(dict.fromkeys(cols))

    @property
    def numeric(self) -> tuple:
        return tuple(c for c in self.raw if c not in self.text)

    @property
    def columns(self) -> tuple:
        return self.raw + ((self.groups,) if self.groups and self.groups not in self.raw else ())


def prepare_batch(b: dict, plan: Plan) -> dict:
    """A batch with its derived columns computed and each category predictor as its level's
    index (NaN where missing), ready for :func:`_keep_mask` and :func:`_kept_arrays`."""
    from regbench.data.derive import _values

    import pyarrow as pa
    import pyarrow.compute as pc

    from regbench.data.survey import _stripped

    for c in plan.booleans:
        from regbench.data.reader import _FALSE, _TRUE

        low = pc.utf8_lower(_stripped(b[c]))
        yes = pc.is_in(low, value_set=pa.array(sorted(_TRUE))).to_numpy(zero_copy_only=False)
        no = pc.is_in(low, value_set=pa.array(sorted(_FALSE))).to_numpy(zero_copy_only=False)
        b[c] = np.where(yes, 1.0, np.where(no, 0.0, np.nan))
    for d, affine in plan.derived:
        b[d.name] = _values(d, [b[c] for c in d.columns], affine)
    if not plan.levels:
        return b

    numbers = {c: dict(v) for c, v in plan.number_levels}
    for c, levels in plan.levels:
        if c in numbers:
            at = {t: i for i, t in enumerate(levels)}
            x = b[c]
            u, inv = np.unique(x, return_inverse=True)
            code = np.array([at[numbers[c][float(v)]] if np.isfinite(v) else np.nan for v in u], dtype=float)
            b[c] = code[inv.reshape(-1)] if u.size else np.full(x.shape, np.nan)
        else:
            idx = pc.index_in(_stripped(b[c]), value_set=pa.array(levels, type=pa.string()))
            b[c] = idx.to_numpy(zero_copy_only=False).astype(np.float64)
    return b


def _level_texts(values) -> np.ndarray:
    from regbench.data.design import _level_text

    if values.dtype == object and set(map(type, values)) <= {str}:
        return values  # text labels are their own level texts
    out = np.empty(len(values), dtype=object)
    for i, v in enumerate(values):
        out[i] = _level_text(float(v) if isinstance(v, (int, np.integer)) and not isinstance(v, bool) else v)
    return out


def _keep_mask(b: dict, plan: Plan, first_row: int, info: Optional[RowsInfo]):
    """Usable rows of a batch; records the reasons of the others in ``info`` (first reason per row)."""
    y = b[plan.target]
    n = y.shape[0]
    keep = np.ones(n, dtype=bool)
    checks = [(plan.target, ~np.isfinite(y), "target is missing or not finite")]
    if plan.weights:
        w = b[plan.weights]
        checks.append((plan.weights, ~np.isfinite(w) | (w < 0), "weight is missing, infinite or negative"))
    if plan.groups:
        g = b[plan.groups]
        miss = np.array([v is None or (isinstance(v, float) and np.isnan(v)) for v in g], dtype=bool) \
            if g.dtype == object else ~np.isfinite(g.astype(float))
        checks.append((plan.groups, miss, "group is missing"))
    for c in plan.predictors:
        checks.append((c, ~np.isfinite(b[c]), "value is missing or not finite"))
    found = []
    for col, bad, why in checks:
        new = bad & keep
        if new.any():
            if info is not None:
                info.n_excluded += int(new.sum())
                found.extend((first_row + int(i) + 1, col, why) for i in np.flatnonzero(new)[:MAX_LISTED_EXCLUSIONS])
            keep &= ~bad
    if found:
        room = max(MAX_LISTED_EXCLUSIONS - len(info.excluded), 0)
        info.excluded.extend(sorted(found)[:room])
    return keep


def _part_first_row(part: Part, offset: int) -> int:
    """0-based table row of the first row of a batch that starts ``offset`` rows into ``part``."""
    return part.first_row + offset


def _batches(part: Part, plan: Plan):
    """The part's batches, prepared (derived columns, category codes)."""
    for b in read_batches(part, plan.columns, plan.batch_rows, plan.numeric, plan.text):
        yield prepare_batch(b, plan)


def rows_pass(part: Part, plan: Plan, cancel=None) -> RowsInfo:
    """First pass over one part."""
    from regbench.progress import check

    info = RowsInfo()
    offset = 0
    for b in _batches(part, plan):
        check(cancel)
        n = b[plan.target].shape[0]
        keep = _keep_mask(b, plan, _part_first_row(part, offset), info)
        offset += n
        info.n_rows += n
        info.n_kept += int(keep.sum())
        if not keep.any():
            continue
        w = b[plan.weights][keep] if plan.weights else np.ones(int(keep.sum()))
        labels = codes = None
        if plan.groups:
            labels, codes = np.unique(_level_texts(b[plan.groups][keep]).astype(str), return_inverse=True)
        m = int(keep.sum())
        X, y, w = _kept_arrays(b, plan, keep, m, len(plan.design_columns))
        _note_rows(info, X, y, w, labels, codes)
    return info


def group_pass(part: Part, plan: Plan, part_index: int, sample_rate: float, seed: int, cancel=None):
    """The single pass over one part of a grouped table: everything the fit needs.

    Gathers what :func:`rows_pass` learns, each group's cross-products (centred
    co-moments, merged batch by batch), the OLS factor of the part's usable rows,
    and a seeded sample of rows: table row i is kept when a uniform draw of the
    part's own generator falls below ``sample_rate`` (one draw per table row, so
    the sample does not depend on the batch size).  The folds are fixed later,
    from the groups' totals, as sums of whole groups' statistics.

    Returns
    -------
    (RowsInfo, dict of label -> GramStats, FactorAccumulator, dict of sampled columns)
    """
    from regbench.models.gram import FactorAccumulator, _chunk_rows
    from regbench.progress import check

    p = len(plan.design_columns)
    chunk = _chunk_rows(p)
    info = RowsInfo()
    groups = {}
    racc = FactorAccumulator(p)
    got = {"X": [], "y": [], "w": [], "g": [], "row": []}
    rng = np.random.default_rng([int(seed), int(part_index)])
    offset = 0
    for b in _batches(part, plan):
        check(cancel)
        n = b[plan.target].shape[0]
        first = _part_first_row(part, offset)
        keep = _keep_mask(b, plan, first, info)
        u = rng.random(n)
        offset += n
        info.n_rows += n
        m = int(keep.sum())
        info.n_kept += m
        if not m:
            continue
        X, y, w = _kept_arrays(b, plan, keep, m, p)
        gtext = _level_texts(b[plan.groups][keep]).astype(str)
        labels, codes = np.unique(gtext, return_inverse=True)
        _note_rows(info, X, y, w, labels, codes)
        _add_to_groups(groups, X, y, w, labels, codes, chunk)
        racc.add(X, y, w)
        pick = np.flatnonzero(u[keep] < sample_rate)
        if pick.size:
            got["X"].append(X[pick])
            got["y"].append(y[pick])
            got["w"].append(w[pick])
            got["g"].append(gtext[pick])
            got["row"].append(first + np.flatnonzero(keep)[pick] + 1)
    return info, groups, racc, got


def _add_to_groups(groups: dict, X, y, w, labels, codes, chunk: int) -> None:
    """Add a batch's rows to each group's cross-products (``groups``: label text -> GramStats).

    Each group's sums are taken about the group's mean in the batch where it first
    appeared: a reference near its mean, so later batches add without cancelling and
    without a co-moment update per group and batch (parts merge by that update).
    """
    from regbench.models.gram import _accumulate

    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(labels.size + 1))
    for i, lab in enumerate(labels):
        rows = order[bounds[i]:bounds[i + 1]]
        lab = str(lab)
        cur = groups.get(lab)
        if cur is None:
            wk = w[rows]
            Wk = wk.sum()
            Xk, yk = X[rows], y[rows]
            shift = ((wk @ Xk) / Wk, float(wk @ yk) / Wk) if Wk > 0 else (Xk.mean(axis=0), float(yk.mean()))
            groups[lab] = _accumulate(X, y, w, rows, shift[0], shift[1], chunk)
        else:
            groups[lab] = cur + _accumulate(X, y, w, rows, cur.shift_x, cur.shift_y, chunk)


def _kept_arrays(b, plan: Plan, keep, m: int, p: int):
    """The predictors, target and weights of a batch's kept rows."""
    X = np.empty((m, p))
    every = m == keep.shape[0]
    for j, (_, c, level) in enumerate(plan.design_columns):
        x = b[c] if every else b[c][keep]
        X[:, j] = x if level is None else (x == level)
    if every:
        return X, b[plan.target], b[plan.weights] if plan.weights else np.ones(m)
    w = b[plan.weights][keep] if plan.weights else np.ones(m)
    return X, b[plan.target][keep], w


def _note_rows(info: RowsInfo, X, y, w, labels, codes) -> None:
    """Count the rows with weight and each group's weight and rows (labels None: no groups); widen the
    target's and the predictors' ranges over the rows with weight."""
    pos = w > 0
    info.w_pos += int(pos.sum())
    # Every usable row counts for a category's levels (weight 0 included), as in memory.
    info.x_count = X.sum(axis=0) if info.x_count is None else info.x_count + X.sum(axis=0)
    if labels is not None:
        gw = np.bincount(codes, weights=w, minlength=labels.size)
        gn = np.bincount(codes, minlength=labels.size)
        # Rows with weight and their target's range per group: a bootstrap draw of whole groups
        # knows from them whether its rows leave anything to fit (GroupSums).
        gp = np.bincount(codes[pos], minlength=labels.size)
        lo = np.full(labels.size, np.inf)
        hi = np.full(labels.size, -np.inf)
        np.minimum.at(lo, codes[pos], y[pos])
        np.maximum.at(hi, codes[pos], y[pos])
        for lab, a, c, q, l, h in zip(labels, gw, gn, gp, lo, hi):
            cur = info.groups.setdefault(str(lab), [0.0, 0, 0, np.inf, -np.inf])
            cur[0] += float(a)
            cur[1] += int(c)
            cur[2] += int(q)
            cur[3] = min(cur[3], float(l))
            cur[4] = max(cur[4], float(h))
    if pos.any():
        yp = y[pos]
        info.y_range = (min(info.y_range[0], float(yp.min())), max(info.y_range[1], float(yp.max())))
        Xp = X[pos]
        mn, mx = Xp.min(axis=0), Xp.max(axis=0)
        info.x_min = mn if info.x_min is None else np.minimum(info.x_min, mn)
        info.x_max = mx if info.x_max is None else np.maximum(info.x_max, mx)


def _columns_of(st, idx):
    """Gram statistics restricted to the columns ``idx``."""
    from regbench.models.gram import GramStats

    return GramStats(W=st.W, n=st.n, shift_x=st.shift_x[idx], shift_y=st.shift_y, sx=st.sx[idx], sy=st.sy,
                     xx=st.xx[np.ix_(idx, idx)], xy=st.xy[idx], yy=st.yy, xx_scale=st._scale()[idx])


def _factor_columns(racc, idx):
    """The factor of the columns ``idx`` (and the target) from the factor of all of them."""
    from regbench.models.gram import FactorAccumulator
    from regbench.models.ols import r_factor

    cols = list(idx) + [racc.p]
    out = FactorAccumulator(len(idx))
    out.n, out.W, out.mean = racc.n, racc.W, racc.mean[cols].copy()
    # RᵀR = ZᵀZ, so the R of a subset of Z's columns is the R of the same columns of R.
    out.R = r_factor(np.asfortranarray(racc.R[:, cols]))
    return out


def fold_of_groups(group_weight: np.ndarray, group_rows: np.ndarray, K: int, seed: int) -> np.ndarray:
    """Fold of each group (groups in sorted label order), as :func:`regbench.models.cv.fold_ids` assigns it."""
    g = group_weight.size
    rng = np.random.default_rng(seed)
    gw = np.asarray(group_weight, dtype=float)
    gn = np.asarray(group_rows, dtype=float)
    perm = rng.permutation(g)
    order = perm[np.lexsort((-gn[perm], -gw[perm]))]
    load_w = np.zeros(K)
    load_n = np.zeros(K)
    out = np.empty(g, dtype=np.int64)
    for grp in order:
        k = int(np.lexsort((load_n, load_w))[0])
        out[grp] = k
        load_w[k] += gw[grp]
        load_n[k] += gn[grp]
    return out


@dataclass(frozen=True)
class Folds:
    """How pass 2 finds the fold of a usable row: by its group, or by its rank among usable rows."""

    K: int
    group_fold: Optional[dict] = None  # label -> fold
    row_folds: Optional[np.ndarray] = None  # (n_kept,) when there are no groups


def stats_pass(part: Part, plan: Plan, folds: Folds, kept_before: int, sample: np.ndarray, cancel=None):
    """Second pass over one part: fold statistics, the OLS factor and the sampled rows.

    Parameters
    ----------
    kept_before : int
        Usable rows in the parts before this one (``sample`` holds positions among all usable rows).
    folds : Folds
        Without groups, ``row_folds`` holds the folds of this part's usable rows only.
    sample : ndarray of int
        Sorted positions (among all usable rows) of this part's rows to keep for row-level views.

    Returns
    -------
    (FoldAccumulator, FactorAccumulator, dict of sampled columns, dict of label -> GramStats)
        The last holds each group's cross-products (empty without groups).
    """
    from regbench.models.gram import FactorAccumulator, FoldAccumulator, _chunk_rows
    from regbench.progress import check

    p = len(plan.design_columns)
    facc = FoldAccumulator(p, folds.K)
    racc = FactorAccumulator(p)
    got = {"X": [], "y": [], "w": [], "g": [], "row": [], "fold": []}
    groups = {}
    chunk = _chunk_rows(p)
    pos = kept_before
    offset = 0
    for b in _batches(part, plan):
        check(cancel)
        n = b[plan.target].shape[0]
        first = _part_first_row(part, offset)
        keep = _keep_mask(b, plan, first, None)
        offset += n
        m = int(keep.sum())
        if not m:
            continue
        X, y, w = _kept_arrays(b, plan, keep, m, p)
        gtext = _level_texts(b[plan.groups][keep]).astype(str) if plan.groups else None
        if folds.group_fold is not None:
            ids = np.array([folds.group_fold[t] for t in gtext], dtype=np.int64)
        else:
            ids = folds.row_folds[pos - kept_before:pos - kept_before + m]
        facc.add(X, y, w, ids)
        racc.add(X, y, w)
        if gtext is not None:
            labels, codes = np.unique(gtext, return_inverse=True)
            _add_to_groups(groups, X, y, w, labels, codes, chunk)
        lo, hi = np.searchsorted(sample, [pos, pos + m])
        if hi > lo:
            local = sample[lo:hi] - pos
            got["X"].append(X[local])
            got["y"].append(y[local])
            got["w"].append(w[local])
            got["fold"].append(ids[local])
            got["row"].append(first + np.flatnonzero(keep)[local] + 1)
            if gtext is not None:
                got["g"].append(gtext[local])
        pos += m
    return facc, racc, got, groups


# --------------------------------------------------------------------------- driver

#: Share of the memory budget the groups' cross-products may keep after the pass (for stability).
GROUP_SUMS_SHARE = 0.5


@dataclass(frozen=True, eq=False)
class GroupSums:
    """Each group's weighted cross-products over every usable row, kept after the pass.

    A grouped bootstrap draw's cross-products are these added up with the number of
    times each group is drawn (:mod:`regbench.analysis.group_refits`), and each
    group's scores for the cluster-robust standard errors follow from them; neither
    needs a row.

    Attributes
    ----------
    labels : tuple of str
        Group labels, sorted (the design's group codes index them).
    stats : tuple of GramStats
        One per label, all about the whole table's weighted means (one reference
        point, so they add without a co-moment update).
    n_pos : ndarray (G,)
        Rows with weight above 0 in each group.
    y_min, y_max : ndarray (G,)
        The target's range on those rows.
    """

    labels: tuple
    stats: tuple
    n_pos: np.ndarray
    y_min: np.ndarray
    y_max: np.ndarray

    @property
    def nbytes(self) -> int:
        """Memory the statistics take: about groups × (p² + 3p) float64 numbers."""
        return int(sum(st.xx.nbytes + st.sx.nbytes + st.xy.nbytes + st.shift_x.nbytes + st._scale().nbytes
                       for st in self.stats))


def group_sums(groups: dict, info: RowsInfo, labels, full) -> GroupSums:
    """:class:`GroupSums` from the pass's per-group statistics (label -> GramStats) and row counts,
    recentred on the whole table's weighted means (those of ``full``).

    Empties ``groups`` as it goes, so the statistics are held once, not twice.
    """
    sx, sy = full.shift_x, full.shift_y
    rows = [info.groups[lab] for lab in labels]
    return GroupSums(labels=tuple(labels), stats=tuple(groups.pop(lab).recentred(sx, sy) for lab in labels),
                     n_pos=np.array([r[2] for r in rows], dtype=np.float64),
                     y_min=np.array([r[3] for r in rows], dtype=np.float64),
                     y_max=np.array([r[4] for r in rows], dtype=np.float64))


def _kept_sums(sums: Optional[GroupSums], budget: Optional[int]):
    """``(sums, note)``: the groups' statistics when they fit in :data:`GROUP_SUMS_SHARE` of the memory
    budget (or no budget is set), else ``(None, the one line saying why stability is not computed)``."""
    from regbench.formatting import size_text

    if sums is None or budget is None or sums.nbytes <= GROUP_SUMS_SHARE * budget:
        return sums, ""
    need = int(np.ceil(sums.nbytes / GROUP_SUMS_SHARE))
    return None, (f"Stability is not computed: the cross-products of the {len(sums.labels):,} groups take "
                  f"{size_text(sums.nbytes)}, more than half the memory budget ({size_text(budget)}); set the "
                  f"memory budget to at least {size_text(need)} to keep them and see it.")


@dataclass(frozen=True)
class StreamedFit:
    """A fit from a streamed (or distributed) pass.

    Attributes
    ----------
    design : Design
        The seeded sample of usable rows (for row-level views); ``n_table_rows``
        counts every table row.
    results : FitResults
        Fitted on every usable row; ``fold_ids`` are the sample rows' folds.
    rows_used : int
        Usable rows (all of them, not the sample).
    sampled : bool
        True when ``design`` holds a sample rather than every usable row.
    excluded_total : int
        Excluded rows (``design.excluded`` lists at most :data:`MAX_LISTED_EXCLUSIONS`).
    route : str
        ``'streamed'`` or ``'cluster'``.
    """

    design: object
    results: object
    rows_used: int
    sampled: bool
    excluded_total: int
    route: str = "streamed"
    #: Each CV fold's cross-products over every usable row (GramStats, in fold order): held-out
    #: predictions of the sampled rows come from them (the sample's own rows would give other models).
    fold_stats: tuple = field(default=(), compare=False, repr=False)
    #: Each group's cross-products over every usable row (GroupSums), for grouped bootstrap stability;
    #: None without a group column, or when they would take more than half the memory budget
    #: (``group_sums_note`` then says so in one line).
    group_sums: Optional[GroupSums] = field(default=None, compare=False, repr=False)
    group_sums_note: str = field(default="", compare=False)

    def notes(self) -> dict:
        """What the fit JSON and the report say about the route and the sample."""
        return {"route": self.route, "rows_used": int(self.rows_used), "row_sample": {
            "sampled": bool(self.sampled), "rows": int(self.design.n), "seed": int(self.results.settings.seed),
            "note": (f"row-level views use a seeded sample of {self.design.n:,} of the {self.rows_used:,} rows; "
                     "every fitted number uses all rows") if self.sampled else "row-level views use every row"}}


def column_kinds(path) -> dict:
    """Each table column's kind (:mod:`regbench.data.survey`'s), from the Parquet schema or the types
    pyarrow's CSV reader infers from the file's first block."""
    from regbench.data.survey import arrow_kind

    parts = parts_of(path)
    if parts[0].kind == "csv":
        import pyarrow.csv as pacsv

        with pacsv.open_csv(parts[0].path) as reader:
            schema = reader.schema
    else:
        import pyarrow.parquet as pq

        schema = pq.ParquetFile(parts[0].path).schema_arrow
    return {name: arrow_kind(schema.field(name).type) for name in schema.names}


def plan_for(path, roles, budget: Optional[int] = None, run=None, cancel=None) -> Plan:
    """Resolve the roles against the table's columns for the streamed route.

    Runs the survey (:mod:`regbench.data.survey`) over the columns that decide the
    design, through ``run`` (the cluster's runner, or in order here), and refuses what
    the streamed route cannot fit with one line: a yes/no outcome, a derived column
    outside its operation's domain, text it cannot read as categories.
    """
    from regbench.data import survey as sv
    from regbench.progress import check

    run = run or (lambda fn, args: [fn(*a) for a in args])
    src = str(path)
    kinds = column_kinds(path)
    names = list(kinds)
    derived_names = [d.name for d in getattr(roles, "derived", ())]
    for col in (roles.target, roles.weights, roles.groups, *roles.predictors, *roles.categorical):
        if col is not None and col not in names and col not in derived_names:
            raise DataError(f"{src}: no column '{col}'; columns are: {', '.join(names)}")
    # The in-memory route's refusals of one column in two parts (data/design.py), word for word.
    if roles.weights is not None and roles.weights == roles.target:
        raise DataError(f"column '{roles.target}' cannot be both the target and the weights")
    for label, col in (("target", roles.target), ("weights", roles.weights), ("groups", roles.groups)):
        if col is not None and col in roles.predictors:
            raise DataError(f"{src}: column '{col}' is the {label} and is also named among the predictors; "
                            f"remove it from the predictors (or choose another {label})")
    if roles.outcome == "binary" or roles.no_count is not None:
        raise DataError(f"{src}: yes/no outcomes are fitted with the rows in memory, not on the streamed or cluster "
                        "route; read the table in memory (without --memory-budget or --cluster)")
    sv._check_derived_roles(src, roles, kinds)
    parts = parts_of(path)
    default = not roles.predictors
    splan = sv.plan_survey(roles, kinds, parts, default)
    rows = table_rows(path)
    first_plan, survey = splan, None
    for _ in range(len(derived_names) + 1):
        got = sv.Survey()
        if splan.columns:
            batch = batch_rows_for(budget, len(splan.columns))
            outs = run(sv.survey_pass, [(part, splan, kinds, batch) for part in parts])
            check(cancel)
            for o in outs:
                got = got.merge(o)
        if survey is None:
            survey = got
        else:
            survey.derived.update({k: v for k, v in got.derived.items() if v.seen})
        derived = sv.resolve_derived(src, splan, survey)
        if not sv.pending(derived):
            break
        # Another round for a standardized column built on a standardized one: only the sources.
        made = set(derived_names)
        cols = tuple(dict.fromkeys(c for d, _ in derived for c in d.columns if c not in made))
        splan = sv.SurveyPlan(columns=cols, derived=derived)
    found = sv.findings(src, roles, kinds, first_plan, survey, rows if rows is not None else survey.rows, default,
                        derived, parts)
    text = tuple(c for c in found.levels if c not in found.number_levels)
    return Plan(target=roles.target, predictors=found.predictors, weights=roles.weights, groups=roles.groups,
                batch_rows=batch_rows_for(budget, len(found.predictors) + 3),
                levels=tuple(found.levels.items()),
                number_levels=tuple((c, tuple(v.items())) for c, v in found.number_levels.items()),
                text=text + found.booleans, derived=found.derived, set_aside=found.set_aside,
                booleans=found.booleans)


def _folds_by_group(info: RowsInfo, plan: Plan, K: int, seed: int):
    labels = tuple(sorted(info.groups))
    if len(labels) < K:
        raise DataError(f"'{plan.groups}' has only {len(labels)} groups for {K} folds; choose at most "
                        f"{len(labels)} folds (every group must stay inside one fold)")
    gw = np.array([info.groups[k][0] for k in labels])
    gn = np.array([info.groups[k][1] for k in labels])
    return labels, {lab: int(f) for lab, f in zip(labels, fold_of_groups(gw, gn, K, seed))}


@dataclass(frozen=True)
class Columns:
    """The design's columns after the pass: which of the pass's columns stay, and why the others went."""

    keep: np.ndarray  # indices into plan.design_columns
    names: tuple
    sources: tuple
    unusable: tuple
    references: tuple


def _design(plan: Plan, cols: Columns, info: RowsInfo, got: dict, labels, roles, X_cols=None):
    """The Design of the sampled rows, carrying the fit's columns, references and exclusions."""
    from regbench.data.design import Design, ExcludedRow

    cat = lambda k, shape: np.concatenate(got[k]) if got[k] else np.zeros(shape)  # noqa: E731
    gtext = cat("g", 0) if plan.groups else None
    code = {lab: i for i, lab in enumerate(labels)}
    X = cat("X", (0, len(plan.design_columns)))
    if X_cols is not None:
        X = X[:, X_cols]
    return Design(
        X=np.ascontiguousarray(X), y=cat("y", 0), weights=cat("w", 0),
        groups=None if gtext is None else np.array([code[t] for t in gtext], dtype=np.int64),
        columns=cols.names, sources=cols.sources, target=plan.target, row_numbers=cat("row", 0).astype(np.int64),
        excluded=tuple(ExcludedRow(r, c, why) for r, c, why in info.excluded), unusable=tuple(plan.set_aside) + cols.unusable,
        group_labels=tuple(labels), weights_column=plan.weights, groups_column=plan.groups, n_table_rows=info.n_rows,
        derived=tuple(getattr(roles, "derived", ())),
        weights_kind=roles.weights_kind if roles.weights is not None else "precision",
        reference_levels=cols.references)


def _grouped_fit(path, plan, parts, settings, sample_rows, progress, cancel, run, runner, roles,
                 budget=None) -> "StreamedFit":
    """One pass for a grouped Parquet table: per-group statistics, folds as sums of whole groups."""
    from regbench.models.gram import FoldAccumulator, merge
    from regbench.progress import check, report

    total = 3
    n_rows = sum(part.rows for part in parts)
    rate = min(1.0, sample_rows / max(n_rows, 1))
    report(progress, 0, total, f"one pass over {len(parts)} part(s) of {Path(path).name}")
    args = [(part, plan, i, rate, settings.seed) for i, part in enumerate(parts)]
    # In this process each part's per-group statistics (groups × p² numbers) are merged as soon as
    # the part is read rather than held for every part (measured: 800 MB held at 10M × 100 in 50
    # row groups of 200 groups); a cluster runner that reduces merges neighbouring parts on the
    # workers, so only the merged statistics come back.
    if runner is None:
        outs = (group_pass(*a, cancel) for a in args)
    elif getattr(runner, "reduces", False):
        outs = runner(group_pass, args, combine=combine_group_parts)
    else:
        outs = runner(group_pass, args)
    info = groups = racc = got = None
    for out in outs:
        check(cancel)
        if info is None:
            info, groups, racc, got = out
            groups = dict(groups)
        else:
            info, groups, racc, got = combine_group_parts((info, groups, racc, got), out)
        del out
    check(cancel)
    src = str(path)
    cols = _check_rows(info, plan, src)
    idx = cols.keep
    if idx.size < len(plan.design_columns) or np.any(idx != np.arange(idx.size)):
        groups = {lab: _columns_of(st, idx) for lab, st in groups.items()}
        racc = _factor_columns(racc, idx)
    K = int(settings.folds)
    labels, group_fold = _folds_by_group(info, plan, K, settings.seed)
    acc = FoldAccumulator(len(idx), K)
    for lab in labels:
        k = group_fold[lab]
        acc.folds[k] = groups[lab] if acc.folds[k] is None else merge(acc.folds[k], groups[lab])
    full, fold_stats = acc.result()
    design = _design(plan, cols, info, got, labels, roles, X_cols=idx)
    report(progress, 1, total, "fitting every model from the cross-products")
    gtext = np.concatenate(got["g"]) if got["g"] else np.zeros(0)
    ids = np.array([group_fold[t] for t in gtext], dtype=np.int64)
    sums = group_sums(groups, info, labels, full)
    results = fit_from_stats(design, settings, full, fold_stats, racc, ids, info.n_kept, cancel=cancel,
                             group_sums=sums)
    report(progress, total, total, "done")
    sums, note = _kept_sums(sums, budget)
    return StreamedFit(design=design, results=results, rows_used=info.n_kept, sampled=design.n < info.n_kept,
                       excluded_total=info.n_excluded, route="streamed" if runner is None else "cluster",
                       fold_stats=tuple(fold_stats), group_sums=sums, group_sums_note=note)


def combine_group_parts(a, b):
    """What :func:`group_pass` gathered from two neighbouring parts (``a`` before ``b``), merged:
    row counts and exclusions, each group's statistics (co-moment update), the factor and the sample."""
    from regbench.models.gram import merge

    info, groups, racc, got = a
    i2, g2, r2, s2 = b
    groups = dict(groups)
    for lab, st in g2.items():
        groups[lab] = st if lab not in groups else merge(groups[lab], st)
    return info.merge(i2), groups, racc.combine(r2), {k: got[k] + s2[k] for k in got}


def _check_rows(info: RowsInfo, plan: Plan, src: str) -> Columns:
    """The in-memory route's refusals, and the design columns kept: a constant number is set aside,
    a category keeps the levels its usable rows hold, coded against the first of them."""
    if info.n_kept == 0:
        raise DataError(f"{src}: every row was excluded (first reason: row {info.excluded[0][0]}, column "
                        f"'{info.excluded[0][1]}': {info.excluded[0][2]}); check the roles and the missing values"
                        if info.excluded else f"{src}: the table has no rows")
    if info.w_pos == 0:
        raise DataError(f"{src}: weights column '{plan.weights}' is zero on every usable row; weights must add up to "
                        "more than 0")
    if info.y_range[0] == info.y_range[1]:
        raise DataError(f"{src}: target '{plan.target}' has the same value ({info.y_range[0]:g}) on every usable "
                        "row, so there is nothing to explain; choose another target")
    from regbench.data.design import UnusableColumn

    design = plan.design_columns
    cats = dict(plan.levels)
    keep, unusable, references = [], [], []
    for c in plan.predictors:
        at = [j for j, d in enumerate(design) if d[1] == c]
        if c not in cats:
            j = at[0]
            if info.x_min[j] == info.x_max[j]:
                unusable.append(UnusableColumn(c, f"constant ({info.x_min[j]:g}) on every usable row", rule="constant"))
            else:
                keep.append(j)
            continue
        levels = cats[c]
        count = {design[j][2]: info.x_count[j] for j in at}
        count[0] = info.n_kept - sum(count.values())
        present = [i for i in range(len(levels)) if count.get(i, 0) > 0]
        if len(present) < 2:
            unusable.append(UnusableColumn(c, f"only one level ('{levels[present[0]]}') on every usable row",
                                           rule="one_level"))
            continue
        # The first level present is the reference; its column (if the pass made one) goes.
        mine = [j for j in at if design[j][2] in present[1:]]
        keep += mine
        references.append((c, levels[present[0]], tuple(design[j][0] for j in mine)))
    if not keep:
        raise DataError(f"{src}: no usable predictor remains; choose other predictors")
    keep = np.array(keep, dtype=int)
    return Columns(keep=keep, names=tuple(design[j][0] for j in keep), sources=tuple(design[j][1] for j in keep),
                   unusable=tuple(unusable), references=tuple(references))


def stream_fit(path, roles, settings, *, memory_budget: Optional[int] = None, sample_rows: int = SAMPLE_ROWS,
               progress=None, cancel=None, runner=None) -> StreamedFit:
    """Fit every model on a table read in batches (or by cluster workers through ``runner``).

    Parameters
    ----------
    path : path
        A Parquet file, a folder of Parquet files or a CSV file.
    roles : Roles
        Numeric and category predictors, derived columns, weights and groups; a yes/no
        outcome is refused with one line (it is fitted with the rows in memory).
    settings : FitSettings
    memory_budget : int, optional
        Bytes; sets the batch size.
    sample_rows : int
        Usable rows kept (seeded) for row-level views.
    progress, cancel : callables, optional
    runner : callable(function, list of argument tuples) -> list, optional
        Runs one pass over the parts; the default runs them here in order.

    Returns
    -------
    StreamedFit
    """
    from regbench.models.gram import merge
    from regbench.progress import check, report

    run = runner or (lambda fn, args: [fn(*a) for a in args])
    report(progress, 0, 5, f"surveying the columns of {Path(path).name}")
    plan = plan_for(path, roles, memory_budget, run=run, cancel=cancel)
    check(cancel)
    parts = parts_of(path)
    total = 4
    if plan.groups and all(part.rows is not None for part in parts):
        return _grouped_fit(path, plan, parts, settings, sample_rows, progress, cancel, run, runner, roles,
                            memory_budget)
    report(progress, 0, total, f"reading {len(parts)} part(s) of {Path(path).name}: which rows are usable")
    infos = run(rows_pass, [(part, plan) for part in parts])
    check(cancel)
    info = infos[0]
    for other in infos[1:]:
        info = info.merge(other)
    src = str(path)
    cols = _check_rows(info, plan, src)
    plan2 = replace(plan, design=tuple(plan.design_columns[j] for j in cols.keep))
    K = int(settings.folds)
    labels = tuple(sorted(info.groups))
    if plan.groups:
        labels, group_fold = _folds_by_group(info, plan, K, settings.seed)
        folds = Folds(K, group_fold=group_fold)
    else:
        from regbench.models.cv import fold_ids

        folds = Folds(K, row_folds=fold_ids(info.n_kept, K, settings.seed))
    rng = np.random.default_rng(settings.seed)
    sampled = info.n_kept > sample_rows
    sample = np.sort(rng.choice(info.n_kept, sample_rows, replace=False)) if sampled else np.arange(info.n_kept)
    before = np.concatenate([[0], np.cumsum([i.n_kept for i in infos])]).astype(int)
    report(progress, 1, total, "gathering the cross-products of every fold")
    # Each part gets only its own rows' folds and sample positions.
    args = []
    for k, part in enumerate(parts):
        a, b = int(before[k]), int(before[k + 1])
        own = folds if folds.row_folds is None else Folds(K, row_folds=folds.row_folds[a:b])
        lo, hi = np.searchsorted(sample, [a, b])
        args.append((part, plan2, own, a, sample[lo:hi]))
    outs = run(stats_pass, args)
    check(cancel)
    facc, racc, got, groups = outs[0]
    groups = dict(groups)
    for f2, r2, g2, s2 in outs[1:]:
        facc = facc.combine(f2)
        racc = racc.combine(r2)
        for k in got:
            got[k] += g2[k]
        for lab, st in s2.items():
            groups[lab] = st if lab not in groups else merge(groups[lab], st)
    del outs
    full, fold_stats = facc.result()
    design = _design(plan2, cols, info, got, labels, roles)
    report(progress, 2, total, "fitting every model from the cross-products")
    fold_of = np.concatenate(got["fold"]).astype(np.int64) if got["fold"] else np.zeros(0, dtype=np.int64)
    sums = group_sums(groups, info, labels, full) if plan.groups else None
    results = fit_from_stats(design, settings, full, fold_stats, racc, fold_of, info.n_kept, cancel=cancel,
                             group_sums=sums)
    report(progress, total, total, "done")
    sums, note = _kept_sums(sums, memory_budget)
    return StreamedFit(design=design, results=results, rows_used=info.n_kept, sampled=bool(sampled),
                       excluded_total=info.n_excluded, route="streamed" if runner is None else "cluster",
                       fold_stats=tuple(fold_stats), group_sums=sums, group_sums_note=note)


def fit_from_stats(design, settings, full, folds, factor, fold_ids, n_obs, cancel=None, group_sums=None):
    """``fit_all`` from gathered statistics: OLS from the merged factor, the rest from the fold Grams.

    The penalized problems are built by :func:`regbench.models.engine.problem_for`, as in
    memory: one indicator per level of a category and the settings' penalty factors.  With
    ``group_sums`` (:class:`GroupSums`) OLS also gets its cluster-robust standard errors, each
    group's scores following from its cross-products.
    """
    from regbench.models import engine
    from regbench.models.diagnostics import diagnose
    from regbench.models.ols import factor_rows, fit_ols, one_blas_thread
    from regbench.models.relaxed import base_of
    from regbench.models.results import FitResults
    from regbench.progress import check

    engine._validate(settings)
    with one_blas_thread():
        ols = fit_ols(design, settings.pins, settings.rank_tol, factor=factor_rows(factor.factor(), factor.W, factor.n),
                      group_stats=None if group_sums is None else group_sums.stats, stats=full)
        diag = diagnose(design, ols)
        problem = engine.problem_for(full, design, settings)
        train = [engine.problem_for(engine._training(full, f, k), design, settings) for k, f in enumerate(folds)]
        grouped = design.groups_column is not None
        penalized = {}
        fold_betas = {}
        for name, rho in engine.families(settings):
            check(cancel)
            base = base_of(name)
            if base is None:
                penalized[name] = engine._family(design, settings, problem, train, folds, name, rho, grouped, cancel,
                                                 keep=fold_betas)
            else:
                penalized[name] = engine._relaxed_family(design, settings, problem, train, folds, name,
                                                         penalized[base], fold_betas[base], grouped, cancel)
    return FitResults(columns=tuple(design.columns), settings=settings, ols=ols, diagnostics=diag,
                      penalized=penalized, fold_ids=fold_ids, n_obs=int(n_obs), gram=full)


def should_stream(path, budget: Optional[int]) -> bool:
    """True when the table cannot be read in memory within ``budget`` (or is a folder of parts)."""
    p = Path(path)
    if p.is_dir():
        return True
    if budget is None:
        return False
    if not (p.suffix.lower() in (".parquet", ".pq") or _is_csv(p)):
        return False
    est = estimate_in_memory_bytes(p)
    return est is not None and est > budget


def memory_budget_from_env() -> Optional[int]:
    """``REGBENCH_MEMORY_BUDGET`` when set (e.g. ``2GB``), else None."""
    v = os.environ.get("REGBENCH_MEMORY_BUDGET")
    return parse_size(v, "REGBENCH_MEMORY_BUDGET") if v else None

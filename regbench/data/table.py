"""A typed table: the raw columns a person loaded, with what kind each one is."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Optional

import numpy as np
import pandas as pd

NUMERIC = "numeric"
BOOLEAN = "boolean"
CATEGORICAL = "categorical"
EMPTY = "empty"
#: What a table column holds, as typing decides it (not to be confused with stress-test kinds).
COLUMN_KINDS = (NUMERIC, BOOLEAN, CATEGORICAL, EMPTY)


@dataclass(frozen=True)
class ColumnInfo:
    """What the reader learnt about one column.

    Attributes
    ----------
    name : str
    kind : {"numeric", "boolean", "categorical", "empty"}
    missing : int
        Cells with no value.
    distinct : int
        Distinct non-missing values.
    coded_categories : bool
        An integer column with few distinct values: possibly category codes.
        The reader never changes it; the person may mark it categorical.
    bad_cells : tuple of (row, text)
        Text found in an otherwise numeric column (row is 1-based among the
        data rows).  Rows using this column are excluded and reported.
    note : str
        How the reader read the column when that needs saying: percentages or decimal
        commas read as numbers, or why a column that looks numeric was read as text.
        Empty when there is nothing to say.
    words : tuple of str
        A boolean column's two values as the file writes them, (false, true) — e.g.
        ("No", "Yes") — so a yes/no outcome is named in the file's words, not as 0 and 1.
        Empty for other kinds, or when only one of the two occurs.
    """

    name: str
    kind: str
    missing: int
    distinct: int
    coded_categories: bool = False
    bad_cells: tuple = ()
    note: str = ""
    words: tuple = ()

    @property
    def read_as_text(self) -> bool:
        """True when the column looks numeric but was read as text (``note`` says why)."""
        return self.kind == CATEGORICAL and bool(self.note)


@dataclass(frozen=True)
class Table:
    """A loaded table.

    Attributes
    ----------
    frame : pandas.DataFrame
        Numeric columns as float64 (NaN where missing or bad text), boolean
        columns as float64 0/1, categorical columns as text (pandas' string or object dtype; missing is None or NaN, test with ``pandas.isna``).
        The index is 0..n-1; messages call index ``i`` row ``row_numbers[i]``.
        The number columns a reader typed are views of one float64 block (:func:`column_block`),
        which a design may share (:func:`side_by_side`): treat the frame as read-only.
    columns : mapping of name to ColumnInfo
    source : str
        Where the table came from (a path or a description).
    notes : tuple of str
        Sentences about how the file was read.
    line_numbers : tuple of int, optional
        The row number of each table row counted as lines below the header, blank lines
        included (row 1 is the first line under the header), when blank lines made it differ
        from ``i + 1``; empty otherwise.
    """

    frame: pd.DataFrame
    columns: Mapping[str, ColumnInfo]
    source: str = ""
    notes: tuple = field(default_factory=tuple)
    line_numbers: tuple = ()

    @property
    def row_numbers(self):
        """Row number of each table row as messages and reports give it (numpy int array)."""
        import numpy as np

        if self.line_numbers:
            return np.asarray(self.line_numbers, dtype=np.int64)
        return np.arange(1, len(self.frame) + 1, dtype=np.int64)

    @property
    def n_rows(self) -> int:
        return len(self.frame)

    @property
    def names(self) -> tuple:
        return tuple(self.frame.columns)

    def info(self, name: str) -> ColumnInfo:
        from regbench.errors import DataError

        if name not in self.columns:
            raise DataError(
                f"column '{name}' is not in the table {self.source or ''}".rstrip()
                + f"; its columns are: {', '.join(self.names)}"
            )
        return self.columns[name]


def column_block(n: int, k: int) -> np.ndarray:
    """An empty (n, k) float64 matrix whose columns are contiguous, for the numeric columns of a table.

    Readers fill it column by column and hand each column to :func:`frame_of` as a view, so the
    typed table holds its numbers once and the design can take a run of them without copying
    (:func:`side_by_side`).
    """
    return np.empty((n, k), dtype=np.float64, order="F")


def frame_of(header, data: Mapping, n: int) -> pd.DataFrame:
    """The table's frame over ``data`` (column name to values) in ``header`` order, without copying."""
    return pd.DataFrame({h: data[h] for h in header}, index=pd.RangeIndex(n), copy=False)


def _root(a: np.ndarray) -> np.ndarray:
    while isinstance(a.base, np.ndarray):
        a = a.base
    return a


def side_by_side(arrays) -> Optional[np.ndarray]:
    """A read-only (n, p) view over float64 columns that lie side by side in one block, else None.

    Columns of a :func:`column_block`, taken in block order without gaps, are one matrix already:
    the design of a table whose predictors are such a run shares the table's memory instead of
    copying it.  The view is read-only so that no fit can change the table under it.
    """
    if not arrays:
        return None
    a0 = arrays[0]
    n = a0.shape[0] if a0.ndim == 1 else -1
    if any(a.ndim != 1 or a.dtype != np.float64 or a.shape[0] != n or a.strides[0] != 8 for a in arrays) or n < 1:
        return None
    root = _root(a0)
    if any(_root(a) is not root for a in arrays[1:]):
        return None
    addr = [a.__array_interface__["data"][0] for a in arrays]
    step = addr[1] - addr[0] if len(arrays) > 1 else n * 8
    if step < n * 8 or any(addr[j] != addr[0] + j * step for j in range(len(arrays))):
        return None
    start = root.__array_interface__["data"][0]
    if not root.flags.forc or addr[0] < start or addr[-1] + n * 8 > start + root.nbytes:
        return None
    return np.lib.stride_tricks.as_strided(a0, shape=(n, len(arrays)), strides=(8, step), writeable=False)

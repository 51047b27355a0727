"""A typed table: the raw columns a person loaded, with what kind each one is."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

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

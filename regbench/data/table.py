"""A typed table: the raw columns a person loaded, with what kind each one is."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import pandas as pd

NUMERIC = "numeric"
BOOLEAN = "boolean"
CATEGORICAL = "categorical"
EMPTY = "empty"
KINDS = (NUMERIC, BOOLEAN, CATEGORICAL, EMPTY)


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
    """

    name: str
    kind: str
    missing: int
    distinct: int
    coded_categories: bool = False
    bad_cells: tuple = ()


@dataclass(frozen=True)
class Table:
    """A loaded table.

    Attributes
    ----------
    frame : pandas.DataFrame
        Numeric columns as float64 (NaN where missing or bad text), boolean
        columns as float64 0/1, categorical columns as text (pandas' string or object dtype; missing is None or NaN, test with ``pandas.isna``).
        The index is 0..n-1; row number ``i + 1`` is what messages call row i+1.
    columns : mapping of name to ColumnInfo
    source : str
        Where the table came from (a path or a description).
    """

    frame: pd.DataFrame
    columns: Mapping[str, ColumnInfo]
    source: str = ""
    notes: tuple = field(default_factory=tuple)

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

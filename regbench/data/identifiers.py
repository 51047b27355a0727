"""Columns that name rows rather than measure them, left out of the default inputs.

A row number or a customer number fitted as a number is a straight line through arbitrary
labels; a text label with a value per bed or per person, coded as categories, adds a column per
row group.  Either fits noise.  The rule, stated in the README and applied wherever the inputs
are chosen by default (the command line without ``--predictors``, the session, the window):

- a text column with more different values than 20 and than a tenth of the rows;
- a numeric column of whole numbers, a different one on every filled row (at least three), that
  either counts 0, 1, 2, … or 1, 2, 3, … down the rows in file order (a row number), or whose
  name reads as an identifier (``id``, ``row``, ``index``, ``idx``, ``no``, ``nr``, ``key``,
  ``serial``, ``rownames`` as a word of the name, or a name ending in ``Id``/``ID`` such as
  ``customerId``).

A column the rule leaves out is used when it is named among the predictors (or ticked).
A count that starts elsewhere (years 1947, 1948, …) is a trend, not a row number, and stays in.
"""

from __future__ import annotations

import re
import weakref
from typing import Optional

import numpy as np

from regbench.data.table import CATEGORICAL, NUMERIC, Table

#: A text column with more different values than this (and than a tenth of the rows) looks like an
#: identifier (a bed, a batch, a person): one-hot coding it would add a column per row group.
IDENTIFIER_LEVELS = 20

#: Numeric identifiers need this many filled cells before "a different value on every row" means anything.
MIN_FILLED = 3

#: A word of a column's name that says it labels rows.
_ID_WORD = re.compile(r"(^|[_\W])(id|ids|row|rownames|index|idx|no|nr|key|serial)($|[_\W])", re.IGNORECASE)
#: camelCase or run-together names ending in an identifier word: customerId, orderID.
_ID_SUFFIX = re.compile(r"[a-z](Id|ID)$")

#: Why a column named like an identifier is left out, and why a row number is.
NAMED_LIKE_AN_IDENTIFIER = "a different whole number on every row, named like an identifier"
COUNTS_LIKE_A_ROW_NUMBER = "counts up by 1 from row to row, like a row number"


def named_like_identifier(name: str) -> bool:
    """True when a word of ``name`` says the column labels rows (see the module's rule)."""
    return bool(_ID_WORD.search(name) or _ID_SUFFIX.search(name))


def identifier_reason(table: Table, column: str) -> Optional[str]:
    """Why ``column`` looks like an identifier rather than a measurement.

    Parameters
    ----------
    table : Table
    column : str

    Returns
    -------
    str or None
        A short reason a person can read ("counts up by 1 from row to row, like a row number"),
        or None when the column does not look like an identifier.
    """
    info = table.columns[column]
    if info.kind == CATEGORICAL:
        if info.distinct > max(IDENTIFIER_LEVELS, table.n_rows / 10):
            return f"text with {info.distinct} different values: it names rows rather than measuring them"
        return None
    if info.kind != NUMERIC:
        return None
    filled = table.n_rows - info.missing
    if filled < MIN_FILLED or info.distinct != filled:
        return None
    v = table.frame[column].to_numpy(dtype=float)
    head = v[:64]
    head = head[np.isfinite(head)]
    if not np.all(head == np.round(head)):
        return None   # a fraction among the first cells settles it without a pass over the column
    v = v[np.isfinite(v)]
    if v.size < MIN_FILLED or not np.all(v == np.round(v)):
        return None
    if v[0] in (0.0, 1.0) and np.all(np.diff(v) == 1):
        return COUNTS_LIKE_A_ROW_NUMBER
    if named_like_identifier(str(column)):
        return NAMED_LIKE_AN_IDENTIFIER
    return None


def looks_like_identifier(table: Table, column: str) -> bool:
    """True when :func:`identifier_reason` gives a reason for ``column``."""
    return identifier_reason(table, column) is not None


def identifier_columns(table: Table) -> dict:
    """Every column of ``table`` that looks like an identifier, with its reason (in table order).

    A table is read-only, so the answer is kept for the last few tables asked about: the window asks
    three times for one table each time it loads the roles (on opening, on every undo)."""
    for ref, answer in _KEPT:
        if ref() is table:
            return dict(answer)
    out = _identifier_columns(table)
    _KEPT.insert(0, (weakref.ref(table), dict(out)))
    del _KEPT[_KEEP:]
    return out


#: (weak reference to a table, its identifier columns), most recent first.
_KEPT: list = []
_KEEP = 4


def _identifier_columns(table: Table) -> dict:
    out = {}
    fractional = _fractional_heads(table)
    for c in table.names:
        if c in fractional:
            continue
        why = identifier_reason(table, c)
        if why is not None:
            out[c] = why
    return out


def _fractional_heads(table: Table) -> set:
    """Numeric columns with a different value on every filled row whose first cells hold a fraction:
    none is an identifier.  Their first cells are read in one block (a thousand measurement columns,
    each read on its own, took about 16 ms; one block, under 1 ms per hundred)."""
    names = [c for c in table.names if table.columns[c].kind == NUMERIC
             and table.columns[c].distinct == table.n_rows - table.columns[c].missing]
    if len(names) < 2:
        return set()
    where = table.frame.columns.get_indexer(names)
    if (where < 0).any():
        return set()
    head = table.frame.iloc[:64, where].to_numpy(dtype=float, na_value=np.nan)
    with np.errstate(invalid="ignore"):
        fraction = (np.isfinite(head) & (head != np.round(head))).any(axis=0)
    return {c for c, f in zip(names, fraction) if f}


def row_label_column(table: Table) -> Optional[str]:
    """The first identifier-like column that names every row once (no empty cell, no repeat), or None.

    Views that point at single rows name them by this column's value (a batch code, an ID), the way
    a person finds the row in their own file; without one they say "row N" (1-based table row).
    """
    for c, _why in identifier_columns(table).items():
        info = table.columns[c]
        if info.missing == 0 and info.distinct == table.n_rows:
            return c
    return None


_LOOK = object()


def row_names(table: Table, rows, column=_LOOK) -> list:
    """Names for rows numbered as messages number them (``Table.row_numbers``): the row-label column's
    values, else "row N" (also for a row the table does not hold).

    ``column`` is the table's row-label column when the caller already knows it (None: none),
    which spares a look through every column.
    """
    if column is _LOOK:
        column = row_label_column(table) if table is not None else None
    if table is None:
        column = None
    if column is None:
        return [f"row {int(r)}" for r in rows]
    values = table.frame[column]
    at = _positions(table, rows)
    return [_label_text(values.iloc[i]) if i is not None else f"row {int(r)}" for r, i in zip(rows, at)]


def _positions(table: Table, rows) -> list:
    """Where each row number (as messages give it: ``Table.row_numbers``) sits in the table, None when absent
    (a row a sample does not hold)."""
    if table.line_numbers:
        where = {int(n): i for i, n in enumerate(table.line_numbers)}
        return [where.get(int(r)) for r in rows]
    return [int(r) - 1 if 1 <= int(r) <= table.n_rows else None for r in rows]


def with_row_names(text: str, table: Optional[Table], column=_LOOK) -> str:
    """A sentence that points at a row as "(most on row N)" with the row's name added the way the
    table names it ("(most on row 270, batch GH05-030)") when its identifier column names every row.

    ``column`` as in :func:`row_names`.  Without such a column, or without the table, ``text`` is
    returned as it is.
    """
    if table is None:
        return text
    if column is _LOOK:
        column = row_label_column(table)
    if column is None:
        return text

    def named(m):
        row = int(m.group(1))
        if _positions(table, [row])[0] is None:
            return m.group(0)
        return f"(most on row {row}, {column} {row_names(table, [row], column=column)[0]})"

    return re.sub(r"\(most on row (\d+)\)", named, text)


def _label_text(value) -> str:
    """A label cell as a person wrote it: a whole number without '.0'."""
    if isinstance(value, float) and value == int(value):
        return str(int(value))
    return str(value)


#: The window's starting groups, said in its status line and the README.
GROUPS_RULE = (f"a text column of more than {IDENTIFIER_LEVELS} values, at least 3 in 4 of them on two rows or "
               "more and no cell empty, labels groups of rows; the one with the fewest groups is held out whole")

#: The share of a group label's values that must repeat: on the first rows of a table read in
#: batches a group may show only one of its rows.
REPEATED_SHARE = 0.75


def group_label_column(table: Table, skip=()) -> Optional[str]:
    """The column the window starts with as held-out groups (:data:`GROUPS_RULE`), or None.

    Rows that share a batch, a site or a person are not independent: scoring a model on single
    held-out rows whose batch-mates were fitted flatters it, and a text label of many values,
    ticked as an input, adds a column per group besides.  Among the text columns not in ``skip``
    (the target, the weights), one with more than :data:`IDENTIFIER_LEVELS` values, most of which
    (:data:`REPEATED_SHARE`) repeat, and no empty cell labels groups; with several, the fewest
    groups (the stricter test) wins, then the first in the table.
    """
    best = None
    for c in table.names:
        info = table.columns[c]
        if c in skip or info.kind != CATEGORICAL or info.read_as_text or info.missing:
            continue
        if not IDENTIFIER_LEVELS < info.distinct <= table.n_rows // 2:
            continue
        counts = table.frame[c].value_counts(sort=False, dropna=True)
        counts = counts[counts > 0]  # a category's unused levels
        if counts.size <= IDENTIFIER_LEVELS or (counts >= 2).mean() < REPEATED_SHARE:
            continue
        if best is None or counts.size < best[1]:
            best = (c, counts.size)
    return None if best is None else best[0]

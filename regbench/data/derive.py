"""Derived columns: new numeric columns computed from the table's own, without code.

A person picks an operation and its column(s) — in the window, or on the command
line as ``--derive log:price`` / ``--derive product:price,income`` — and the
derived column then takes part in every analysis like any column of the table
(set-aside explanations included).  Only the operations named in
:data:`OPERATIONS` exist; nothing typed is ever evaluated as code.

The specs live in :class:`regbench.data.design.Roles` (``roles.derived``), so a
project keeps them and re-applies them to the stored table on reopening; the
stored table itself never holds derived columns.  Each derived column is a pure
function of the table's values, so re-applying gives the same numbers bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

from regbench.data.table import BOOLEAN, NUMERIC, ColumnInfo, Table
from regbench.errors import DataError

#: operation -> (number of source columns, what it does, in words for people)
OPERATIONS = {
    "log": (1, "natural logarithm (every value must be above 0)"),
    "log1p": (1, "natural logarithm of 1 + the value (for counts with zeros; values must be above −1)"),
    "sqrt": (1, "square root (values must be 0 or more)"),
    "square": (1, "the value squared"),
    "standardize": (1, "the value minus the column's mean, divided by its standard deviation"),
    "product": (2, "the product of two columns (an interaction)"),
}


@dataclass(frozen=True)
class Derived:
    """One derived column: an operation from :data:`OPERATIONS` on table column(s).

    Attributes
    ----------
    operation : str
    columns : tuple of str
        The source columns (one, or two for ``product``); a source may itself be a
        derived column defined earlier in the same list.
    """

    operation: str
    columns: tuple

    @property
    def name(self) -> str:
        """The derived column's name, as the design, the window and the report show it."""
        if self.operation == "product":
            return f"{self.columns[0]}*{self.columns[1]}"
        label = {"log1p": "log(1+{})", "standardize": "standardized({})"}.get(self.operation,
                                                                           self.operation + "({})")
        return label.format(self.columns[0])

    @property
    def spec(self) -> str:
        """The command-line form, ``operation:column[,column]``."""
        return f"{self.operation}:{','.join(self.columns)}"

    def to_dict(self) -> dict:
        return {"operation": self.operation, "columns": list(self.columns)}

    @classmethod
    def from_dict(cls, d, where: str = "derived") -> "Derived":
        if not isinstance(d, dict) or set(d) != {"operation", "columns"}:
            raise DataError(f"{where}: must be an object with 'operation' and 'columns'")
        op, cols = d["operation"], d["columns"]
        if not (isinstance(cols, list) and all(isinstance(c, str) for c in cols)):
            raise DataError(f"{where}.columns: must be a list of column names")
        return make_derived(op, cols, where)


def make_derived(operation, columns: Sequence[str], where: str = "derive") -> Derived:
    """A checked :class:`Derived` (known operation, right number of non-empty column names)."""
    if not isinstance(operation, str) or operation not in OPERATIONS:
        raise DataError(f"{where}: '{operation}' is not an operation; choose one of {', '.join(OPERATIONS)}")
    need = OPERATIONS[operation][0]
    cols = tuple(columns)
    if len(cols) != need or not all(isinstance(c, str) and c for c in cols):
        what = "one column" if need == 1 else "two columns separated by a comma"
        raise DataError(f"{where}: {operation} takes {what}, e.g. "
                        + ("log:price" if need == 1 else "product:price,income"))
    return Derived(operation, cols)


def parse_derive(text: str) -> Derived:
    """Read the command-line form ``operation:column`` or ``product:column,column``."""
    op, sep, rest = str(text).partition(":")
    if not sep:
        raise DataError(f"--derive: '{text}' is not operation:column; e.g. log:price or product:price,income")
    return make_derived(op.strip(), [c.strip() for c in rest.split(",")], f"--derive {text}")


def derived_names(derived: Iterable[Derived]) -> tuple:
    return tuple(d.name for d in derived)


def apply_derived(table: Table, derived: Sequence[Derived]) -> Table:
    """The table with each derived column appended, in order.

    Raises
    ------
    DataError
        Unknown or non-numeric source column, a name that already exists, or values
        the operation cannot take (named with how many rows and the first row).
    """
    if not derived:
        return table
    frame = table.frame.copy(deep=False)
    infos = dict(table.columns)
    for d in derived:
        name = d.name
        if name in infos:
            raise DataError(f"derived column '{name}' ({d.spec}) already exists in the table; "
                            "remove the duplicate or rename the table's column")
        sources = []
        for c in d.columns:
            if c not in infos:
                raise DataError(f"derived column '{name}': '{c}' is not a column of the table; "
                                f"its columns are: {', '.join(infos)}")
            if infos[c].kind not in (NUMERIC, BOOLEAN):
                raise DataError(f"derived column '{name}': '{c}' is {infos[c].kind}, not numeric; "
                                f"{d.operation} takes numeric columns")
            sources.append(frame[c].to_numpy(dtype=np.float64))
        values = _compute(d, sources, name)
        frame[name] = values
        bad = {}
        for c in d.columns:
            bad.update(dict(infos[c].bad_cells))
        present = np.isfinite(values)
        infos[name] = ColumnInfo(name=name, kind=NUMERIC, missing=int((~present).sum()),
                                 distinct=int(np.unique(values[present]).size),
                                 bad_cells=tuple(sorted(bad.items())))
    return Table(frame=frame, columns=infos, source=table.source, notes=table.notes)


def _compute(d: Derived, sources: list, name: str) -> np.ndarray:
    x = sources[0]
    have = np.isfinite(x)
    op = d.operation

    def refuse(mask, what, todo):
        rows = np.flatnonzero(mask & have)
        if rows.size:
            r = int(rows[0])
            raise DataError(
                f"derived column '{name}': {rows.size} row{'s' if rows.size != 1 else ''} of '{d.columns[0]}' "
                f"{'hold' if rows.size != 1 else 'holds'} {what} (first: row {r + 1}, value {x[r]:g}); {todo}")

    if op == "log":
        refuse(x <= 0, "0 or less", "use log1p for counts with zeros, or leave the column as it is")
    elif op == "log1p":
        refuse(x <= -1, "−1 or less", "log(1 + value) needs values above −1")
    elif op == "sqrt":
        refuse(x < 0, "a negative value", "a square root needs values of 0 or more")
    elif op == "standardize":
        v = x[have]
        if not (v.size and float(np.std(v)) > 0):
            raise DataError(f"derived column '{name}': '{d.columns[0]}' has the same value on every row "
                            "with a value, so it cannot be standardized")
    out = _values(d, sources)
    overflow = np.isinf(out)
    if overflow.any():
        r = int(np.flatnonzero(overflow)[0])
        raise DataError(f"derived column '{name}': row {r + 1} gives a number too large to hold; "
                        "rescale the source column first (e.g. another unit)")
    return out


def _values(d: Derived, sources: list, affine=None) -> np.ndarray:
    """The operation on the values, NaN where an input is missing or outside the domain."""
    x = sources[0]
    op = d.operation
    with np.errstate(all="ignore"):
        if op == "log":
            out = np.log(np.where(x > 0, x, np.nan))
        elif op == "log1p":
            out = np.log1p(np.where(x > -1, x, np.nan))
        elif op == "sqrt":
            out = np.sqrt(np.where(x >= 0, x, np.nan))
        elif op == "square":
            out = x * x
        elif op == "standardize":
            if affine is None:
                v = x[np.isfinite(x)]
                affine = (float(np.mean(v)), float(np.std(v)))
            out = (x - affine[0]) / affine[1]
        else:  # product
            out = x * sources[1]
    ok = np.isfinite(x) & (np.isfinite(sources[1]) if op == "product" else True)
    return np.where(ok, out, np.nan)


def recompute(d: Derived, inputs: list, clean_inputs: list, clean_values: np.ndarray) -> np.ndarray:
    """The derived column recomputed from changed inputs, as a fixed transform.

    The stress test damages a column and every derived column built on it follows, the way
    a feed that goes bad spoils what is computed from it.  A standardized column keeps the
    mean and SD it was made with (recovered exactly from the clean values), as a pipeline
    that stored them would; a log of a value that became 0 or less is missing (NaN), which
    the stress test counts as a moved prediction.
    """
    affine = None
    if d.operation == "standardize":
        x, z = np.asarray(clean_inputs[0], float), np.asarray(clean_values, float)
        ok = np.isfinite(x) & np.isfinite(z)
        i, j = np.argmin(np.where(ok, x, np.inf)), np.argmax(np.where(ok, x, -np.inf))
        sd = (x[j] - x[i]) / (z[j] - z[i])
        affine = (float(x[i] - z[i] * sd), float(sd))
    return _values(d, [np.asarray(v, float) for v in inputs], affine)


def dependents(derived: Sequence[Derived], column: str) -> tuple:
    """The derived columns computed from ``column``, directly or through other derived columns, in order."""
    spoiled, out = {column}, []
    for d in derived:
        if spoiled.intersection(d.columns):
            spoiled.add(d.name)
            out.append(d)
    return tuple(out)

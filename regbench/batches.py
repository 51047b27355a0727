"""A session's table read in batches: the pass over its rows, and the row sample as a table.

A table whose in-memory form would exceed the project's memory budget (or any
table when a cluster is set; :class:`regbench.models.spec.RowSource`) is never
read whole: :func:`run_pass` runs the streamed pass (:mod:`regbench.data.stream`)
or the same pass on a Dask cluster (:mod:`regbench.cluster`), which fits every
model from the cross-products of all rows and keeps a seeded sample of rows
for the views that need rows.  :func:`sample_table` turns that sample into the
:class:`~regbench.data.table.Table` a session shows; its row numbers are the
table's own.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Optional

from regbench.data.stream import should_stream, stream_fit
from regbench.errors import DataError
from regbench.models.spec import RowSource


def needs_batches(path, rows: RowSource) -> bool:
    """True when ``path`` is to be read in batches under ``rows`` (beyond the budget, a folder, or a cluster)."""
    return rows.cluster is not None or should_stream(path, rows.memory_budget)


def run_pass(path, roles, settings, rows: RowSource, progress=None, cancel=None):
    """Fit every model on the table at ``path`` read in batches (or on the cluster ``rows.cluster``).

    Returns
    -------
    regbench.data.stream.StreamedFit
    """
    if rows.cluster is not None:
        # Loaded only for the cluster route: it pulls in dask.distributed.
        from regbench.cluster import cluster_fit

        return cluster_fit(path, roles, settings, address=rows.cluster, memory_budget=rows.memory_budget,
                           progress=progress, cancel=cancel)
    return stream_fit(path, roles, settings, memory_budget=rows.memory_budget, progress=progress, cancel=cancel)


def check_roles(path, roles) -> None:
    """The cheap checks of ``roles`` against a table read in batches (its schema only, no rows read):
    every named column exists and the outcome is not yes/no.  The pass refuses the rest in one line."""
    from regbench.data.stream import table_columns

    names = set(table_columns(path))
    made = {d.name for d in getattr(roles, "derived", ())}
    for col in (roles.target, roles.weights, roles.groups, *roles.predictors, *roles.categorical):
        if col is not None and col not in names and col not in made:
            raise DataError(f"{path}: no column '{col}'; columns are: {', '.join(sorted(names))}")
    if roles.outcome == "binary" or roles.no_count is not None:
        raise DataError(f"{path}: yes/no outcomes are fitted with the rows in memory, not on the streamed or cluster "
                        "route; read the table in memory (a larger memory budget, no cluster)")


def file_fingerprint(path) -> str:
    """SHA-256 over the resolved path, size and modification time of the table's file(s).

    A table read in batches is never hashed cell by cell (that would be a second
    pass); a changed file changes its size or time, and so this fingerprint.
    """
    p = Path(path).resolve()
    if not p.exists():
        raise DataError(f"{path}: no such file or folder")
    files = sorted(f for f in p.rglob("*.parquet") if f.is_file()) if p.is_dir() else [p]
    h = hashlib.sha256(str(p).encode("utf-8"))
    for f in files:
        st = f.stat()
        h.update(f"\x00{f.relative_to(p) if p.is_dir() else f.name}\x00{st.st_size}\x00{st.st_mtime_ns}".encode())
    return h.hexdigest()


def sample_table(design, source: str, note: str = ""):
    """The rows a streamed fit kept (its seeded sample) as a Table of the file's own columns: target,
    predictors (a text column's words back from its level indicators), weights and groups.

    Derived columns are left out: they are derived from these columns like any table's.  Row
    numbers are the table's own (``Table.line_numbers``), so a row named on screen is the file's row.
    """
    import numpy as np
    import pandas as pd

    from regbench.data.reader import table_from_frame

    derived = {getattr(d, "name", d) for d in getattr(design, "derived", ())}
    coded = {col: (ref, cols) for col, ref, cols in getattr(design, "reference_levels", ())}
    cols = {design.target: design.y}
    for src in dict.fromkeys(design.sources):
        if src in derived or src in cols:
            continue
        if src in coded:
            cols[src] = _level_words(design, src, *coded[src])
        elif src in design.columns:
            cols[src] = design.X[:, design.columns.index(src)]
    if design.weights_column and design.weights_column not in cols:
        cols[design.weights_column] = design.weights
    if design.groups_column and design.groups is not None and design.groups_column not in cols:
        labels = np.asarray(design.group_labels, dtype=object)
        cols[design.groups_column] = labels[design.groups] if len(design.groups) else np.array([], dtype=object)
    table = table_from_frame(pd.DataFrame(cols), source=str(source))
    from dataclasses import replace

    return replace(table, line_numbers=tuple(int(r) for r in design.row_numbers),
                   notes=tuple(table.notes) + ((note,) if note else ()))


def _level_words(design, column: str, reference: str, level_columns):
    """Each row's level of a coded text column: the level whose indicator is 1, else the reference level."""
    import numpy as np

    out = np.full(design.n, reference, dtype=object)
    prefix = f"{column}="
    for c in level_columns:
        on = design.X[:, design.columns.index(c)] == 1.0
        out[on] = c[len(prefix):] if c.startswith(prefix) else c
    return out


def check_rows(rows) -> RowSource:
    """A RowSource from a RowSource or a dict of its fields, checked (DataError naming the setting)."""
    from regbench.models import spec

    if isinstance(rows, dict):
        spec.check(RowSource, rows, DataError)
        rows = RowSource.from_dict(rows)
    if not isinstance(rows, RowSource):
        raise DataError("the row settings must be a RowSource (memory budget and cluster)")
    rows.check(DataError)
    return RowSource.from_dict(rows.to_dict())


def budget_words(rows: RowSource) -> Optional[str]:
    """'memory for rows 500 MB, run on a local cluster' style words for the report and window; None by default."""
    from regbench.formatting import size_text

    if rows.is_default:
        return None
    parts = []
    if rows.memory_budget is not None:
        parts.append(f"memory for rows {size_text(rows.memory_budget)}")
    if rows.cluster == "local":
        parts.append("the pass over the rows runs on a local Dask cluster")
    elif rows.cluster is not None:
        parts.append(f"the pass over the rows runs on the Dask scheduler at {rows.cluster}")
    return "; ".join(parts)

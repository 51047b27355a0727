"""Reading the rows: the window's place for the memory budget and where the pass over the rows runs.

The values are the project's :class:`regbench.models.spec.RowSource`, checked
through its declaration like every other route (CLI ``--memory-budget`` and
``--cluster``, ``session.json`` field ``rows``).  A table whose in-memory form
would exceed the memory budget, or any table when a cluster is chosen, opens
from its first rows (:func:`first_rows_session`, every column, for choosing
the roles) and is read in batches on the worker thread when the person fits;
the session then holds a seeded sample of the rows for the row-level views
and says so.
"""

from __future__ import annotations

import os
from typing import Optional

from PySide6 import QtWidgets

from regbench.batches import needs_batches
from regbench.data.stream import parse_size, table_columns
from regbench.errors import Cancelled, DataError, RegbenchError
from regbench.formatting import size_text
from regbench.models import spec
from regbench.models.spec import RowSource

#: Where the pass over the rows runs, as the window names it, and the RowSource value of each.
WHERE = (("this computer", None), ("a local cluster", "local"), ("a scheduler at…", "address"))
#: Rows read from the top of a table read in batches to choose its starting roles.
HEAD_ROWS = 2000


class RowSettingsDialog(QtWidgets.QDialog):
    """"Reading the rows": memory for rows and where to run, checked on OK (one line under the fields)."""

    def __init__(self, rows: Optional[RowSource] = None, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Reading the rows")
        rows = rows or RowSource()
        declared = spec.specs(RowSource)
        form = QtWidgets.QFormLayout()
        self.memory = QtWidgets.QLineEdit("" if rows.memory_budget is None else size_text(rows.memory_budget)
                                          .replace(" ", ""))
        self.memory.setPlaceholderText("no limit (e.g. 500MB or 2GB)")
        self.memory.setToolTip(declared["memory_budget"][0].help)
        form.addRow("Memory for rows", self.memory)
        self.where = QtWidgets.QComboBox()
        self.where.addItems([w for w, _ in WHERE])
        self.where.setToolTip(declared["cluster"][0].help)
        self.address = QtWidgets.QLineEdit()
        self.address.setPlaceholderText("tcp://HOST:8786")
        if rows.cluster == "local":
            self.where.setCurrentIndex(1)
        elif rows.cluster is not None:
            self.where.setCurrentIndex(2)
            self.address.setText(rows.cluster)
        self.where.currentIndexChanged.connect(self._where_changed)
        form.addRow("Where to run", self.where)
        form.addRow("Scheduler address", self.address)
        self.problem = QtWidgets.QLabel("")
        self.problem.setWordWrap(True)
        self.problem.setObjectName("problem")
        explain = QtWidgets.QLabel(
            "A table that would take more memory than this is read in batches: every fitted number uses all of "
            "its rows, and the row-level views use a seeded sample of them, which the window and the report say. "
            "A cluster runs the same pass as Dask tasks; its workers must be able to read the table's path.")
        explain.setWordWrap(True)
        buttons = QtWidgets.QDialogButtonBox(QtWidgets.QDialogButtonBox.StandardButton.Ok
                                             | QtWidgets.QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay = QtWidgets.QVBoxLayout(self)
        lay.addWidget(explain)
        lay.addLayout(form)
        lay.addWidget(self.problem)
        lay.addWidget(buttons)
        self._where_changed()

    def _where_changed(self, *_):
        self.address.setEnabled(WHERE[self.where.currentIndex()][1] == "address")

    def values(self) -> RowSource:
        """The RowSource the fields describe; raises DataError naming the field when one is unusable."""
        text = self.memory.text().strip()
        budget = parse_size(text, "Memory for rows") if text else None
        kind = WHERE[self.where.currentIndex()][1]
        cluster = self.address.text().strip() if kind == "address" else kind
        values = {"memory_budget": budget, "cluster": cluster}
        names = {"memory_budget": "Memory for rows", "cluster": "Where to run"}
        spec.check(RowSource, values, DataError, lambda name, _s: names[name])
        return RowSource.from_dict(values)

    def accept(self):
        try:
            self.chosen = self.values()
        except RegbenchError as exc:
            self.problem.setText(str(exc))
            return
        super().accept()


def ask_rows(parent, rows: Optional[RowSource]) -> Optional[RowSource]:
    """Show the dialog; the chosen RowSource, or None when the person cancels."""
    dialog = RowSettingsDialog(rows, parent)
    if dialog.exec() == QtWidgets.QDialog.DialogCode.Accepted:
        return dialog.chosen
    return None


def reads_in_batches(path: str, rows: Optional[RowSource]) -> bool:
    """True when the table at ``path`` is to be read in batches under ``rows`` (Parquet/CSV beyond the
    budget, a folder of Parquet files, or a cluster chosen)."""
    rows = rows or RowSource()
    if os.path.splitext(path)[1].lower() in (".xlsx",):
        return False
    try:
        return needs_batches(path, rows)
    except RegbenchError:
        return False


def first_rows(path: str):
    """The first :data:`HEAD_ROWS` rows of a table read in batches, every column, as a Table (row
    numbers the file's own): what the person chooses the roles from before the pass."""
    import pyarrow.parquet as pq

    from regbench.data.reader import table_from_frame

    names = table_columns(path)
    p = os.fspath(path)
    if os.path.isdir(p) or p.lower().endswith((".parquet", ".pq")):
        from regbench.data.stream import parts_of

        first = parts_of(p)[0]
        batch = next(pq.ParquetFile(first.path).iter_batches(batch_size=HEAD_ROWS, columns=names), None)
        frame = batch.to_pandas() if batch is not None else pq.read_schema(first.path).empty_table().to_pandas()
    else:
        import pandas as pd

        frame = pd.read_csv(p, nrows=HEAD_ROWS)
    return table_from_frame(frame, source=p)


def first_rows_session(path: str, rows: RowSource, roles=None, progress=None, cancel=None):
    """The worker part of opening a table read in batches: its first rows and the starting roles, no pass.

    Returns ``(session, note)``: a :meth:`Session.from_first_rows` whose roles are ``roles`` or the
    window's rule (:data:`~regbench.gui.roles.TARGET_RULE`) applied to the first rows, and a note when
    columns were left unticked so that it opens (else None).  The pass over every row runs when the
    person fits.
    """
    from regbench.gui.roles import can_explain, default_roles, openable_roles
    from regbench.models.results import FitSettings
    from regbench.session import Session

    name = os.path.basename(os.fspath(path))
    if progress is not None:
        progress(0, 1, f"reading the first rows of {name}")
    head = first_rows(path)
    if cancel is not None and cancel():
        raise Cancelled()
    if head.n_rows == 0:
        raise DataError(f"{name}: no rows to read; open a table with rows")
    note = None
    if roles is None:
        start = default_roles(head)
        if not can_explain(head, start.target):
            raise DataError(f"{name}: no column of numbers to explain among its {len(head.names)} columns; open a "
                            "table with a column of numbers")
        roles, note = openable_roles(head, start)
    return Session.from_first_rows(path, head, roles, FitSettings(), rows), note

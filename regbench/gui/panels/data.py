"""The data as loaded: every cell, a summary per column, and the rows left out."""

from __future__ import annotations

from PySide6 import QtCore, QtWidgets

from regbench.gui.panels.base import Panel, caption
from regbench.gui.tables import FrameModel, GridModel, make_view


class DataPanel(Panel):
    key = "data"
    title = "The table"
    nav = "Data"

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        split = QtWidgets.QSplitter(QtCore.Qt.Vertical)
        self.frame_model = FrameModel()
        self.frame_view = make_view(self.frame_model, stretch_last=False)
        self.frame_view.horizontalHeader().setDefaultSectionSize(110)
        split.addWidget(self.frame_view)
        lower = QtWidgets.QSplitter(QtCore.Qt.Horizontal)
        box1 = QtWidgets.QWidget()
        l1 = QtWidgets.QVBoxLayout(box1)
        l1.setContentsMargins(0, 4, 0, 0)
        l1.addWidget(caption("Columns"))
        self.summary_model = GridModel()
        self.summary_view = make_view(self.summary_model)
        l1.addWidget(self.summary_view)
        box2 = QtWidgets.QTabWidget()
        self.excluded_model = GridModel()
        self.excluded_view = make_view(self.excluded_model)
        box2.addTab(self.excluded_view, "Rows left out of the fit")
        self.notes = QtWidgets.QPlainTextEdit()
        self.notes.setPlaceholderText("Notes kept with the project (what the table is, what was asked, what you decided)")
        self.notes.textChanged.connect(lambda: self._notes_timer.start())
        self._notes_timer = QtCore.QTimer(self)
        self._notes_timer.setSingleShot(True)
        self._notes_timer.setInterval(600)
        self._notes_timer.timeout.connect(self.keep_notes)
        box2.addTab(self.notes, "Notes")
        self.tabs = box2
        lower.addWidget(box1)
        lower.addWidget(box2)
        lower.setSizes([620, 380])
        split.addWidget(lower)
        split.setSizes([520, 300])
        lay.addWidget(split)

    def views(self):
        return [self.frame_view, self.summary_view, self.excluded_view]

    def keep_notes(self):
        """Send the notes to the session (typing is gathered into one undo step)."""
        s = self.session
        text = self.notes.toPlainText()
        if s is not None and text != s.notes:
            s.set_notes(text)

    def refresh(self, session):
        if self.notes.toPlainText() != session.notes and not self.notes.hasFocus():
            self.notes.blockSignals(True)
            self.notes.setPlainText(session.notes)
            self.notes.blockSignals(False)
        table = session.table
        if self.frame_model.rowCount() != table.n_rows or getattr(self, "_frame_id", None) != id(table.frame):
            self.frame_model.set_frame(table.frame)
            self._frame_id = id(table.frame)
        roles = session.roles
        design = session.design
        used_sources = set(design.sources) if design is not None else set()
        unusable = {u.column: u.reason for u in (design.unusable if design is not None else ())}
        rows = []
        for name in table.names:
            info = table.columns[name]
            if name == roles.target:
                role = "target"
            elif name == roles.weights:
                role = "weights"
            elif name == roles.groups:
                role = "groups"
            elif name in unusable:
                role = "unusable: " + unusable[name]
            elif name in used_sources:
                role = "predictor"
            else:
                role = ""
            kind = info.kind
            if name in roles.categorical:
                kind = "categorical (marked)"
            rows.append([name, kind, info.missing, info.distinct,
                         "possibly coded" if info.coded_categories else "", len(info.bad_cells) or "", role])
        self.summary_model.set_rows(rows, ["Column", "Kind", "Missing", "Distinct", "Codes?", "Text cells", "Role"])
        self.summary_view.resizeColumnsToContents()
        excluded = design.excluded if design is not None else ()
        self.excluded_model.set_rows([[e.row, e.column, e.reason] for e in excluded], ["Row", "Column", "Reason"])
        self.excluded_view.resizeColumnsToContents()
        n = table.n_rows
        if design is None:
            self.set_sentences([f"{n:,} rows and {len(table.names)} columns were read from {table.source or 'the table'}."])
            return
        s = [f"{n:,} rows and {len(table.names)} columns were read from {table.source or 'the table'}; "
             f"{design.n:,} rows enter the fit with {design.p} design columns."]
        if excluded:
            first = excluded[0]
            s.append(f"{len(excluded)} row{'s were' if len(excluded) != 1 else ' was'} left out "
                     f"(for example row {first.row}: {first.column}, {first.reason}).")
        else:
            s.append("No row was left out.")
        if design.unusable:
            s.append("Not usable: " + "; ".join(f"{u.column} ({u.reason})" for u in design.unusable) + ".")
        self.set_sentences(s)

"""The data as loaded: every cell, a summary per column, and the rows left out."""

from __future__ import annotations

import os

from PySide6 import QtCore, QtWidgets

from regbench.batches import budget_words
from regbench.data.table import BOOLEAN, NUMERIC
from regbench.errors import RegbenchError
from regbench.gui.panels.base import Panel, caption, hbox
from regbench.gui.roles import ColumnsModel
from regbench.gui.tables import FrameModel, GridModel, make_view


#: Up to this many columns the cells view sizes each column to its name and first rows (a wide
#: table keeps one width for all, so opening it stays quick).
WIDTH_FROM_CELLS_MAX_COLUMNS = 200

DERIVE_WORDS = {"log": "log", "log1p": "log(1 + x)", "sqrt": "square root", "square": "square",
                "standardize": "standardized", "product": "product"}


class DataPanel(Panel):
    key = "data"
    title = "The table"
    nav = "Data"

    def build(self, body):
        lay = QtWidgets.QVBoxLayout(body)
        lay.setContentsMargins(0, 0, 0, 0)
        split = QtWidgets.QSplitter(QtCore.Qt.Horizontal)
        box1 = QtWidgets.QWidget()
        l1 = QtWidgets.QVBoxLayout(box1)
        l1.setContentsMargins(0, 0, 0, 0)
        all_btn = QtWidgets.QPushButton("Tick all")
        none_btn = QtWidgets.QPushButton("Untick all")
        all_btn.clicked.connect(lambda: self.window_.draft.tick_all(True))
        none_btn.clicked.connect(lambda: self.window_.draft.tick_all(False))
        head = QtWidgets.QLabel("Columns: tick those the models may use")
        head.setStyleSheet("color: #66707a; font-weight: 600;")
        l1.addWidget(hbox(head, 1, all_btn, none_btn))
        self.columns_model = ColumnsModel(self.window_.draft)
        self.columns_view = make_view(self.columns_model)
        header = self.columns_view.horizontalHeader()
        # Sized once from the text when a table arrives (not Qt's size-to-contents mode, which asks every
        # row of every column again at each layout of the window).
        header.setSectionResizeMode(ColumnsModel.C_PART, QtWidgets.QHeaderView.Stretch)   # long reasons elide
        self.columns_model.modelReset.connect(lambda: self.defer(self._size_columns))
        self.columns_view.verticalHeader().setVisible(False)
        l1.addWidget(self.columns_view)
        self.derive_op = QtWidgets.QComboBox()
        for op, text in DERIVE_WORDS.items():
            self.derive_op.addItem(text, op)
        self.derive_a = QtWidgets.QComboBox()
        self.derive_b = QtWidgets.QComboBox()
        for box in (self.derive_a, self.derive_b):
            box.setSizeAdjustPolicy(QtWidgets.QComboBox.AdjustToMinimumContentsLengthWithIcon)
            box.setMinimumContentsLength(10)
        self.derive_and = QtWidgets.QLabel("and")
        self.derive_op.currentIndexChanged.connect(self._derive_shape)
        self.derive_btn = QtWidgets.QPushButton("Add column")
        self.derive_btn.clicked.connect(self._add_derived)
        self.underive_btn = QtWidgets.QPushButton("Remove it")
        self.underive_btn.setToolTip("Remove the selected derived column")
        self.underive_btn.clicked.connect(self._remove_derived)
        l1.addWidget(hbox(caption("New column:"), self.derive_op, QtWidgets.QLabel("of"), self.derive_a,
                          self.derive_and, self.derive_b, self.derive_btn, 1, self.underive_btn))
        self._derive_shape()
        self.window_.draft.changed.connect(self._fill_derive_columns)
        self.window_.draft.changed.connect(lambda: self.columns_view.setColumnHidden(
            ColumnsModel.C_PENALTY, not self.window_.draft.has_penalty_factors))
        self.tabs = QtWidgets.QTabWidget()
        self.frame_model = FrameModel()
        self.frame_view = make_view(self.frame_model, stretch_last=False)
        self.frame_view.horizontalHeader().setDefaultSectionSize(110)
        self.tabs.addTab(self.frame_view, "Cells")
        self.excluded_model = GridModel()
        self.excluded_view = make_view(self.excluded_model)
        self.tabs.addTab(self.excluded_view, "Rows left out of the fit")
        self.notes = QtWidgets.QPlainTextEdit()
        self.notes.setPlaceholderText("Notes kept with the project (what the table is, what was asked, what you decided)")
        self.notes.textChanged.connect(lambda: self._notes_timer.start())
        self._notes_timer = QtCore.QTimer(self)
        self._notes_timer.setSingleShot(True)
        self._notes_timer.setInterval(600)
        self._notes_timer.timeout.connect(self.keep_notes)
        self.tabs.addTab(self.notes, "Notes")
        split.addWidget(box1)
        split.addWidget(self.tabs)
        split.setSizes([780, 380])   # room for each column's part in the fit
        lay.addWidget(split)

    def _size_columns(self):
        """Each column but the reasons as wide as its text (the reasons take the rest of the room)."""
        widths = self.columns_view.content_widths()
        header = self.columns_view.horizontalHeader()
        for c in range(min(ColumnsModel.C_PART, len(widths))):
            header.resizeSection(c, widths[c])

    # -- derived columns (computed by regbench.data.derive; nothing typed is run as code) ----------
    def _derive_shape(self, *_):
        two = self.derive_op.currentData() == "product"
        self.derive_and.setVisible(two)
        self.derive_b.setVisible(two)

    def _fill_derive_columns(self):
        draft = self.window_.draft
        if draft.table is None:
            return
        numeric = [c for c in draft.names if draft.table.columns[c].kind in (NUMERIC, BOOLEAN)]
        for box in (self.derive_a, self.derive_b):
            current = box.currentText()
            if [box.itemText(i) for i in range(box.count())] != numeric:
                box.blockSignals(True)
                box.clear()
                box.addItems(numeric)
                if current in numeric:
                    box.setCurrentText(current)
                box.blockSignals(False)

    def _add_derived(self):
        op = self.derive_op.currentData()
        cols = [self.derive_a.currentText()] + ([self.derive_b.currentText()] if op == "product" else [])
        try:
            name = self.window_.draft.add_derived(op, cols)
        except RegbenchError as exc:
            self.window_.show_error("Cannot add this column", exc)
            return
        self.window_.set_status(f"Added {name}; press Fit to use it.")

    def _remove_derived(self):
        draft = self.window_.draft
        rows = {i.row() for i in self.columns_view.selectionModel().selectedIndexes()}
        names = [draft.names[r] for r in sorted(rows) if draft.is_derived(draft.names[r])]
        if not names:
            self.window_.set_status("Select a derived column in the list first.")
            return
        try:
            for n in names:
                if draft.is_derived(n):
                    draft.remove_derived(n)
        except RegbenchError as exc:
            self.window_.show_error("Cannot remove this column", exc)

    def clear(self):
        super().clear()
        self._frame_id = self._excluded_of = None   # the next session's cells and rows are filled afresh

    def _fill_cells(self, table):
        """Every cell of the table (the model reads them as they are painted), columns sized to names and first rows."""
        self.frame_model.set_frame(table.frame, table.line_numbers)   # each row's number in the file
        self._frame_id = id(table.frame)
        if self.frame_model.columnCount() <= WIDTH_FROM_CELLS_MAX_COLUMNS:
            self.frame_view.resizeColumnsToContents()   # whole names; the first rows' widths

    def _fill_excluded(self, excluded):
        """The rows left out of the fit, one line each with its column and reason."""
        self.excluded_model.set_rows([[e.row, e.column, e.reason] for e in excluded], ["Row", "Column", "Reason"])
        self.excluded_view.resizeColumnsToContents()
        self._excluded_of = excluded

    def views(self):
        return [self.columns_view, self.frame_view, self.excluded_view]

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
        design = session.design
        excluded = design.excluded if design is not None else ()
        # The cells and the rows left out fill in later turns, each in its own: on a table of tens of
        # thousands of rows (a row sample) the sentences, the cells and the left-out rows together held
        # the GUI thread too long in one piece.
        if self.frame_model.rowCount() != table.n_rows or getattr(self, "_frame_id", None) != id(table.frame):
            self.defer(self._fill_cells, table)
        if getattr(self, "_excluded_of", None) is not excluded:
            self.defer(self._fill_excluded, excluded)
        n = table.n_rows
        if design is None:
            self.set_sentences([f"{n:,} rows and {len(table.names)} columns were read from {table.source or 'the table'}."])
            return
        s = [f"{n:,} rows and {len(table.names)} columns were read from {table.source or 'the table'}; "
             f"{design.n:,} rows enter the fit with {design.p} design columns."]
        if getattr(session, "awaiting_pass", False):
            # A table read in batches before its pass: the first rows are at hand, for choosing the roles.
            how = budget_words(session.rows)
            s = [f"The first {n:,} rows of {os.path.basename(session.source)} are shown, with every column, to choose "
                 "the roles" + (f" ({how})" if how else "") + "; the empty cells and distinct values in the column list are "
                 "those of these rows. Fit reads every row in batches: every fitted number uses all of them, "
                 "the row-level views a seeded sample."]
        elif getattr(session, "row_sample_note", None):
            # A table read in batches: the rows shown are the pass's seeded sample, and the window says so.
            shown = "a seeded sample of its rows" if session.sampled else "every usable row"
            s = [session.row_sample_note, f"The table below shows {shown} ({n:,}), with each row's number in the "
                                          "file."] + list(session.sample_limits().values())
        if excluded:
            first = excluded[0]
            s.append(f"{len(excluded)} row{'s were' if len(excluded) != 1 else ' was'} left out "
                     f"(for example row {first.row}: {first.column}, {first.reason}).")
        else:
            s.append("No row was left out.")
        if design.unusable:
            # The core's advice names the command line's way; here a column is used by ticking it.
            s.append("Not usable: " + "; ".join(f"{u.column} ({u.reason.replace('name it among the predictors', 'tick it')})"
                                                for u in design.unusable) + ".")
        if getattr(session, "cache_status", None) == "stale" and getattr(session, "cache_note", None):
            s.append(f"On opening, {cache_words(session.cache_note)}.")
        self.set_sentences(s)


def cache_words(note: str) -> str:
    """The project layer's line on a stale cache, without the file name (the window's title has it)."""
    head, sep, rest = note.partition(": ")
    text = rest if sep and head.endswith(".regbench") else note
    return text.rstrip(".")

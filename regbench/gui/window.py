"""The main window: the question across the top, the panels, menus, the worker and the status bar."""

from __future__ import annotations

import os
from typing import Optional

from PySide6 import QtCore, QtGui, QtWidgets

from regbench.data import read_table
from regbench.errors import DataError, ProjectError, RegbenchError
from regbench.gui.elided import ElidedLabel
from regbench.gui.export import export_csv, export_plot
from regbench.gui.help import HelpView
from regbench.gui.panels.agreement import AgreementPanel
from regbench.gui.panels.calibration import CalibrationPanel
from regbench.gui.panels.coefficients import CoefficientsPanel
from regbench.gui.panels.data import DataPanel, cache_words
from regbench.gui.panels.fitquality import FitQualityPanel
from regbench.gui.panels.overlaps import OverlapsPanel
from regbench.gui.panels.paths import PathsPanel
from regbench.gui.panels.ranges import RangesPanel
from regbench.gui.panels.stability import StabilityPanel
from regbench.gui.panels.stress import StressPanel
from regbench.gui.rowsettings import ask_rows, first_rows, first_rows_session, reads_in_batches
from regbench.gui.roles import QuestionBar, RoleDraft, can_explain, default_roles, openable_roles, starting_words
from regbench.gui.style import STYLESHEET, configure_pyqtgraph
from regbench.gui.tables import view_to_tsv
from regbench.gui.worker import Runner
from regbench.models.results import FitSettings
from regbench.models.spec import RowSource
from regbench import project
from regbench.batches import budget_words
from regbench.report import render_report
from regbench.session import Session

Qt = QtCore.Qt
TABLE_EXTS = (".csv", ".tsv", ".tab", ".txt", ".xlsx", ".parquet", ".pq")
PROJECT_EXT = ".regbench"
MAX_RECENT = 8
AUTOSAVE_MS = 60_000


#: The panels each kind of session change marks out of date ("comparisons": every panel that reads the
#: models at the chosen α, redrawn once the worker has them); a kind not listed marks every panel.
REDRAWS = {
    "notes": (),
    "view_state": (),
    "saved": (),
    "rows": (),   # the memory budget and cluster apply to the next pass; nothing on screen changes
    "alpha": ("paths", "stability", "comparisons"),
    "extra_fits": ("paths", "comparisons"),
    "stress": ("stress",),
    "bootstrap": ("stability",),
    "derived": ("paths", "comparisons"),   # the worker's comparisons at the chosen α arrived
}


#: Encodings offered when a table is not UTF-8 (label -> Python codec name).
ENCODINGS = {"Windows Western (cp1252)": "cp1252", "Latin-1 (ISO 8859-1)": "latin-1",
             "Central European (cp1250)": "cp1250", "Cyrillic (cp1251)": "cp1251", "Mac Roman": "mac_roman",
             "UTF-16": "utf-16"}


def _project_words(exc):
    """A project that cannot be read is called damaged when that is the likely cause."""
    msg = str(exc)
    if isinstance(exc, RegbenchError) and "not a regbench project (not a readable zip archive" in msg:
        return ProjectError(msg.replace("not a regbench project (not a readable zip archive",
                                        "damaged: it cannot be read as a project (not a readable zip archive", 1))
    return exc


def _window_words(msg: str) -> str:
    """Advice written for the command line, said the window's way."""
    import re

    return re.sub(r"name its encoding \(for example --encoding [\w-]+\)",
                  "open it again and choose its encoding when the window asks", msg)


def recovery_path() -> str:
    base = QtCore.QStandardPaths.writableLocation(QtCore.QStandardPaths.AppDataLocation)
    if not base:
        base = os.path.join(os.path.expanduser("~"), ".regbench")
    return os.path.join(base, "recovery.regbench")


def _panel_classes():
    # The order a stakeholder asks in; Ctrl+1..9 follow it.  The probabilities panel (yes/no
    # outcomes only) comes last so the others keep their shortcuts.
    return (DataPanel, OverlapsPanel, PathsPanel, CoefficientsPanel, FitQualityPanel, AgreementPanel, StressPanel,
            StabilityPanel, RangesPanel, CalibrationPanel)


class MainWindow(QtWidgets.QMainWindow):
    """One window, one session.

    Parameters
    ----------
    autosave : bool
        Write a recovery copy of an unsaved session every minute.
    """

    session_changed = QtCore.Signal()   # a new session was adopted
    results_applied = QtCore.Signal()   # a fit finished and its results are in the session
    job_failed = QtCore.Signal(str)

    def __init__(self, autosave: bool = True, parent=None):
        super().__init__(parent)
        configure_pyqtgraph()
        self.setStyleSheet(STYLESHEET)
        self.setWindowTitle("regbench")
        self.resize(1400, 900)
        self.setAcceptDrops(True)
        self.session = None
        self.errors: list = []          # every message shown, newest last
        self.last_error_box = None
        self.runner = Runner(self)
        self._derive_job = None       # the comparisons job in flight
        self._derive_key = None       # the session key it computes for
        self._derive_again = False    # a newer request arrived while it ran
        self.derived_applied = 0      # comparisons installed (tests count them)
        #: Panels draw their plots a turn after their tables (Panel.defer), so no single piece
        #: of a panel's first drawing holds the GUI thread for long.
        self.draw_in_steps = True
        self._stale: set = set()
        self._refresh_pending = False
        self.draft = RoleDraft(self)
        #: Memory budget and cluster for tables opened from now on (Edit ▸ Reading the rows…).
        self.row_source = RowSource()
        self._build_central()
        self._build_status()
        self._build_menus()
        self.runner.started.connect(self._job_started)
        self.runner.progress.connect(self._job_progress)
        self.runner.stopped.connect(self._job_stopped)
        self.autosave_timer = QtCore.QTimer(self)
        self.autosave_timer.setInterval(AUTOSAVE_MS)
        self.autosave_timer.timeout.connect(self.autosave)
        if autosave:
            self.autosave_timer.start()
        self._update_title()
        self._update_actions()

    # == document state (kept in the session, read here) ================================
    @property
    def path(self) -> Optional[str]:
        """The project file of the session (None until saved or when opened from a table)."""
        return self.session.path if self.session is not None else None

    @path.setter
    def path(self, value: Optional[str]) -> None:
        if self.session is not None:
            self.session.path = value

    @property
    def dirty(self) -> bool:
        """The session has changes that are not saved."""
        return bool(self.session is not None and self.session.dirty)

    @dirty.setter
    def dirty(self, value: bool) -> None:
        if self.session is not None:
            self.session.dirty = value

    # == building ====================================================================
    def _build_central(self):
        self.nav = QtWidgets.QListWidget()
        self.nav.setObjectName("nav")
        self.nav.setFixedWidth(218)
        self.stack = QtWidgets.QStackedWidget()
        self.panels = []
        for cls in _panel_classes():
            panel = cls(self)
            self.panels.append(panel)
            self.stack.addWidget(panel)
            self.nav.addItem(panel.nav)
        self.help_view = HelpView()
        self.stack.addWidget(self.help_view)
        self.nav.addItem("Help")
        self.nav.currentRowChanged.connect(self._show_row)
        self.question = QuestionBar(self.draft)
        self.question.fit_requested.connect(self.fit_pressed)
        self.draft.changed.connect(self._draft_changed)
        central = QtWidgets.QWidget()
        outer = QtWidgets.QVBoxLayout(central)
        outer.setContentsMargins(0, 0, 0, 0)
        outer.setSpacing(0)
        outer.addWidget(self.question)
        row = QtWidgets.QHBoxLayout()
        row.setContentsMargins(0, 0, 0, 0)
        row.setSpacing(0)
        row.addWidget(self.nav)
        row.addWidget(self.stack, 1)
        outer.addLayout(row, 1)
        self.setCentralWidget(central)
        self.nav.setCurrentRow(0)

    def _build_status(self):
        sb = self.statusBar()
        # A long message must not widen the window past the screen: it ends in "…" at the window's
        # edge, and its tooltip holds it whole.
        self.status_label = ElidedLabel("Open a table or a project to begin.")
        self.progress_bar = QtWidgets.QProgressBar()
        self.progress_bar.setFixedWidth(220)
        self.progress_bar.setVisible(False)
        self.cancel_btn = QtWidgets.QPushButton("Cancel")
        self.cancel_btn.setVisible(False)
        self.cancel_btn.clicked.connect(self.cancel_work)
        sb.addWidget(self.status_label, 1)
        sb.addPermanentWidget(self.progress_bar)
        sb.addPermanentWidget(self.cancel_btn)

    def _action(self, menu, text, slot, shortcut=None):
        act = QtGui.QAction(text, self)
        if shortcut is not None:
            act.setShortcut(QtGui.QKeySequence(shortcut))
        act.triggered.connect(slot)
        menu.addAction(act)
        return act

    def _build_menus(self):
        mb = self.menuBar()
        f = self.file_menu = mb.addMenu("&File")
        K = QtGui.QKeySequence
        self.act_new = self._action(f, "New from table…", self.new_from_table_dialog, K.StandardKey.New)
        self.act_open = self._action(f, "Open…", self.open_dialog, K.StandardKey.Open)
        self.recent_menu = f.addMenu("Open recent")
        self._fill_recent()
        f.addSeparator()
        self.act_save = self._action(f, "Save", self.save, K.StandardKey.Save)
        self.act_save_as = self._action(f, "Save As…", self.save_as_dialog, K.StandardKey.SaveAs)
        f.addSeparator()
        self.act_report = self._action(f, "Export report…", self.export_report_dialog)
        self.act_plot = self._action(f, "Export plot (PNG/SVG)…", self.export_plot_dialog)
        self.act_csv = self._action(f, "Export table (CSV)…", self.export_table_dialog)
        f.addSeparator()
        self._action(f, "Quit", self.close, K.StandardKey.Quit)
        e = self.edit_menu = mb.addMenu("&Edit")
        self.act_undo = self._action(e, "Undo", self.undo, K.StandardKey.Undo)
        self.act_copy = self._action(e, "Copy table", self.copy_table, K.StandardKey.Copy)
        e.addSeparator()
        self.act_refit = self._action(e, "Refit", lambda: self.refit(force=True), "Ctrl+R")
        self.act_rows = self._action(e, "Reading the rows…", self.row_settings_dialog)
        v = self.view_menu = mb.addMenu("&View")
        for i, panel in enumerate(self.panels):
            # Ctrl+1 … Ctrl+9, then Ctrl+0 for the tenth panel.
            self._action(v, panel.nav, lambda checked=False, i=i: self.show_panel(i),
                         f"Ctrl+{(i + 1) % 10}" if i < 10 else None)
        h = self.help_menu = mb.addMenu("&Help")
        self._action(h, "Words and cautions", lambda: self.nav.setCurrentRow(len(self.panels)), K.StandardKey.HelpContents)

    # == panels ======================================================================
    def show_panel(self, key_or_index) -> None:
        if isinstance(key_or_index, str):
            key_or_index = [p.key for p in self.panels].index(key_or_index)
        self.nav.setCurrentRow(key_or_index)

    def panel(self, key: str):
        for p in self.panels:
            if p.key == key:
                return p
        raise KeyError(key)

    def current_panel(self):
        w = self.stack.currentWidget()
        return w if w in self.panels else None

    def _show_row(self, row: int) -> None:
        # An out-of-date panel is redrawn while still hidden: showing or hiding a widget inside a
        # visible panel lays out the whole window again at once, and a panel's redraw does that
        # for each sentence and table it fills, so the window is laid out once instead, as it shows.
        p = self.panels[row] if 0 <= row < len(self.panels) else None
        if p is not None and p.key in self._stale:
            self._refresh_panel(p)
        self.stack.setCurrentIndex(row)

    def _refresh_panel(self, panel) -> None:
        if self.session is None:
            self._stale.discard(panel.key)
            return
        if panel.uses_comparisons and self.session.results is not None and not self.session.derived_ready:
            self._stale.add(panel.key)   # redrawn when the worker's comparisons arrive
            self.request_derived()
            return
        self._stale.discard(panel.key)
        hidden = self._hide_while_drawing(panel)
        try:
            panel.refresh(self.session)
        except Exception as exc:  # a panel must never take the window down with it
            self.show_error(f"Cannot show {panel.nav}", exc)
        finally:
            if hidden:
                panel.show()

    @staticmethod
    def _hide_while_drawing(panel) -> bool:
        """Hide a shown panel for its redraw when nothing in it is in use; True if hidden.

        Every widget a redraw shows or hides inside a visible panel lays out the whole window at
        once (Qt activates each enclosing layout); hidden, the panel is laid out once when it shows
        again in the same turn, before anything is painted, so nothing flickers.  A panel that
        holds the keyboard focus or a pressed mouse button (an α being dragged or stepped) keeps
        showing: hiding it would take the focus or the drag away.
        """
        if not panel.isVisible() or QtWidgets.QApplication.mouseButtons() != Qt.NoButton:
            return False
        focus = QtWidgets.QApplication.focusWidget()
        if focus is not None and (focus is panel or panel.isAncestorOf(focus)):
            return False
        panel.hide()
        return True

    def refresh_all(self, now: bool = False) -> None:
        """Mark every panel out of date; the visible one is redrawn (soon, or now)."""
        self._stale = {p.key for p in self.panels}
        for i, p in enumerate(self.panels):
            # A panel with ``applies`` (the yes/no probabilities) is listed only where it applies.
            applies = getattr(p, "applies", None)
            if applies is not None:
                self.nav.item(i).setHidden(not applies(self.session))
        if now:
            self._do_refresh()
        elif not self._refresh_pending:
            self._refresh_pending = True
            QtCore.QTimer.singleShot(0, self._do_refresh)

    def _do_refresh(self):
        self._refresh_pending = False
        p = self.current_panel()
        # Only when still out of date: a redraw asked for now (refresh_all(now=True)) after one was
        # scheduled has drawn it already, and drawing it again held the GUI thread twice as long.
        if p is not None and p.key in self._stale:
            self._refresh_panel(p)

    def refresh_everything(self) -> None:
        """Redraw every panel now, plots included (snapshots and tests)."""
        for p in self.panels:
            self._refresh_panel(p)
            p.flush()

    # == session =====================================================================
    def adopt(self, session, path: Optional[str] = None, dirty: bool = False, fit: bool = True,
              in_steps: bool = False) -> None:
        """Make ``session`` the window's document.

        ``in_steps`` (a table or project just opened) leaves drawing the open panel and recording the
        recent file to later turns of the event loop, so adopting holds the GUI thread only briefly.
        """
        if self.session is not None:
            self.session.unsubscribe(self._on_session_event)
        self.runner.cancel_all()
        if session is not self.session:
            for p in self.panels:   # nothing of the previous table may linger on any panel
                p.clear()
        self.session = session
        self.path = path
        self.dirty = dirty
        session.subscribe(self._on_session_event)
        self._load_draft()
        self._restore_view_state()
        self.refresh_all(now=not in_steps)
        self._update_title()
        self._update_actions()
        where = os.path.basename(path) if path else (session.table.source or "the table")
        self.set_status(f"Opened {where}: {session.design.n:,} rows in the fit.", sticky=False)
        self.session_changed.emit()
        if path and in_steps:
            QtCore.QTimer.singleShot(0, lambda: self._add_recent(path))
        elif path:
            self._add_recent(path)
        if fit and not self.has_results():
            self.refit()
        elif self.has_results():
            self.request_derived()

    def _load_draft(self) -> None:
        s = self.session
        unusable = {u.column: u.reason for u in (s.design.unusable if s.design is not None else ())}
        # A table read in batches: the roles are chosen from every column of its first rows.
        table = s.first_rows if getattr(s, "first_rows", None) is not None else s.table
        self.draft.load(table, s.roles, s.settings, s.bootstrap, unusable)

    def _draft_changed(self) -> None:
        self.question.set_pending(self.draft.differs_from(self.session), self.has_results())

    def fit_pressed(self) -> None:
        """The Fit button: send the chosen roles and settings, then fit (only now does long work start)."""
        if self.session is None:
            return
        if self.draft.differs_from(self.session):
            self.apply_roles(self.draft.roles(), self.draft.settings, self.draft.bootstrap)
        elif not self.has_results():
            self.refit()
        else:
            self.set_status("The fit already matches these choices; Edit ▸ Refit fits again.")

    def has_results(self) -> bool:
        return self.session is not None and getattr(self.session, "results", None) is not None

    def _on_session_event(self, event, detail=None) -> None:
        if event in ("roles", "settings", "bootstrap", "undo", "loaded"):
            self._load_draft()
        elif event == "results":
            self._draft_changed()
        if self.session is not None and self.session.results is not None and not self.session.derived_ready:
            self.request_derived()
        self.refresh_for(event)
        self._update_title()
        self._update_actions()

    def refresh_for(self, event: str) -> None:
        """Mark out of date only the panels that kind of change affects (see REDRAWS)."""
        keys = REDRAWS.get(event)
        if keys is None:
            self.refresh_all()
            return
        self._stale |= {p.key for p in self.panels if p.key in keys or ("comparisons" in keys and p.uses_comparisons)}
        if keys and not self._refresh_pending:
            self._refresh_pending = True
            QtCore.QTimer.singleShot(0, self._do_refresh)

    # == opening =====================================================================
    def open_path(self, path: str, roles=None, encoding: Optional[str] = None, confirmed: bool = False) -> None:
        """Open a table (new session with default or given roles) or a project, off the GUI thread."""
        path = os.fspath(path)
        if not confirmed and not self._confirm_discard():
            return
        ext = os.path.splitext(path)[1].lower()
        if ext != PROJECT_EXT and reads_in_batches(path, self.row_source):
            self.open_in_batches(path, roles)
            return
        if ext == PROJECT_EXT:
            def work(progress, cancel):
                progress(0, 1, f"reading {os.path.basename(path)}")
                session = project.load_project(path, compute=False)
                if session.source is not None and session.first_rows is None:
                    # The project keeps the pass's row sample, which holds only the fit's columns; the roles
                    # are chosen from every column of the file's first rows.
                    try:
                        session.first_rows = first_rows(session.source)
                    except (RegbenchError, OSError, ValueError):
                        pass   # the sample's columns are listed instead
                computed = None
                if session.results is None:  # no cache, or one from another table or settings
                    computed = session.compute_results(progress=progress, cancel=cancel)
                return session, computed

            self.runner.start(work, label=f"Opening {os.path.basename(path)}", slot="open",
                              done=lambda out: self._adopt_opened(path, *out),
                              failed=lambda exc: self.show_error("Cannot open the project", _project_words(exc)),
                              cancelled=lambda: self.set_status("Opening cancelled; nothing was changed."))
            return

        def work(progress, cancel):
            progress(0, 2, f"reading {os.path.basename(path)}")
            table = read_table(path, encoding=encoding)
            progress(1, 2, "building the design")
            if roles is not None:
                return Session.from_table(table, roles, FitSettings()), None
            start = default_roles(table)
            numeric = any(table.columns[c].kind in ("numeric", "boolean") for c in table.names)
            if not numeric and not start.predictors:
                raise DataError(f"{os.path.basename(path)}: no column of numbers among its {len(table.names)} "
                                f"column{'s' if len(table.names) != 1 else ''}, and no other column to explain a "
                                "two-valued one from; open a table with columns of numbers")
            if not can_explain(table, start.target):
                raise DataError(f"{os.path.basename(path)}: no column of numbers or of two values to explain "
                                f"among its {len(table.names)} column{'s' if len(table.names) != 1 else ''}; open "
                                "a table with a column of numbers or a yes/no column")
            usable, note = openable_roles(table, start)
            return Session.from_table(table, usable, FitSettings()), note

        def opened(out):
            session, note = out
            # Nothing long starts until the person has looked at the question and pressed Fit.
            self.adopt(session, path=None, dirty=True, fit=roles is not None, in_steps=True)
            if roles is None:
                self.show_panel("data")
                self.set_status((note + " " if note else "")
                                + starting_words(session.roles) + "; change it in the sentence above, tick the "
                                "columns to use, then press Fit.")

        def failed(exc):
            if encoding is None and "not UTF-8" in str(exc):
                chosen = self.ask_encoding(os.path.basename(path))
                if chosen:
                    self.open_path(path, roles, encoding=chosen, confirmed=True)
                    return
            self.show_error("Cannot open the table", exc)

        self.runner.start(work, label=f"Reading {os.path.basename(path)}", slot="open", done=opened, failed=failed)

    def open_in_batches(self, path: str, roles=None) -> None:
        """Open a table beyond the memory budget (or on a cluster) as an in-memory one opens: its first
        rows (every column) on the worker, the roles drafted from them, and nothing long until the person
        presses Fit, which reads every row in batches on the worker with progress and cancel."""
        rows = self.row_source
        name = os.path.basename(path)

        def opened(out):
            session, note = out
            self.adopt(session, path=None, dirty=True, fit=roles is not None, in_steps=True)
            if roles is None:
                self.show_panel("data")
                self.set_status((note + " " if note else "")
                                + starting_words(session.roles) + f", chosen from the first "
                                f"{session.table.n_rows:,} rows of {name}; change it in the sentence above, tick the "
                                "columns to use, then press Fit to read every row in batches.")

        self.runner.start(lambda progress, cancel: first_rows_session(path, rows, roles, progress, cancel),
                          label=f"Reading the first rows of {name}", slot="open", done=opened,
                          failed=lambda exc: self.show_error("Cannot read the table", exc),
                          cancelled=lambda: self.set_status("Reading cancelled; nothing was changed."))

    def row_settings_dialog(self) -> None:
        rows = ask_rows(self, self.session.rows if self.session is not None else self.row_source)
        if rows is not None:
            self.set_row_source(rows)

    def set_row_source(self, rows: RowSource) -> None:
        """Use ``rows`` for tables opened from now on and keep it in the open project."""
        self.row_source = rows
        if self.session is not None and rows != self.session.rows:
            self.session.set_rows(rows)
        self.set_status("Reading the rows: " + (budget_words(rows) or "no memory limit, on this computer") + ".")

    def ask_encoding(self, name: str) -> Optional[str]:
        """Ask which text encoding a file that is not UTF-8 uses; None when the person cancels."""
        choice, ok = QtWidgets.QInputDialog.getItem(
            self, "Text encoding", f"{name} is not UTF-8 text. Which encoding was it saved in?",
            list(ENCODINGS), 0, False)
        return ENCODINGS[choice] if ok and choice in ENCODINGS else None

    def _adopt_opened(self, path, session, computed) -> None:
        """Adopt a project read on the worker; install results fitted there (GUI thread)."""
        self.adopt(session, path=path, fit=False, in_steps=True)
        if computed is not None:
            try:
                installed = session.apply_results(computed)
            except RegbenchError as exc:
                self.show_error("Cannot use these results", exc)
                installed = False
            if installed:
                session.dirty = False   # recomputed from the file's own table and settings
                self.dirty = False
                self._update_title()
                self.refresh_all(now=True)
                stale = session.cache_status == "stale" and session.cache_note
                self.set_status(f"Results refitted: {cache_words(session.cache_note)}." if stale else "Results fitted.")
                self.results_applied.emit()
        if not self.has_results():
            self.refit()

    def new_from_table_dialog(self):
        path, _ = QtWidgets.QFileDialog.getOpenFileName(
            self, "New from table", "", "Tables (*.csv *.tsv *.txt *.xlsx *.parquet);;All files (*)")
        if path:
            self.open_path(path)

    def open_dialog(self):
        path, _ = QtWidgets.QFileDialog.getOpenFileName(
            self, "Open", "", "Projects and tables (*.regbench *.csv *.tsv *.txt *.xlsx *.parquet);;All files (*)")
        if path:
            self.open_path(path)

    # == fitting =====================================================================
    def refit(self, force: bool = False) -> None:
        """Fit and analyse in the pool; the results are installed on the GUI thread when they return.

        ``force`` fits again even when the session's fits match its roles and settings.
        """
        session = self.session
        if session is None:
            return

        def work(progress, cancel):
            return session.compute_results(progress=progress, cancel=cancel, refit=force)

        def done(computed):
            if self.session is not session:
                return
            try:
                installed = session.apply_results(computed)
            except RegbenchError as exc:
                self.show_error("Cannot use these results", exc)
                return
            if not installed:  # the roles or settings changed meanwhile: fit those instead
                self.refit()
                return
            self.refresh_all(now=True)
            self.set_status("Fit done." + (f" {session.row_sample_note}" if computed.streamed is not None else ""))
            self.results_applied.emit()

        self.runner.start(work, label="Fitting", slot="fit", done=done,
                          failed=lambda exc: self.show_error("The fit did not finish", exc),
                          cancelled=lambda: self.set_status("Fit cancelled; nothing was changed."))

    def apply_roles(self, roles, settings=None, n_boot: Optional[int] = None) -> bool:
        """Send new roles (and settings) to the session, then refit. False if the session refused."""
        if self.session is None:
            return False
        try:
            if n_boot is not None and int(n_boot) != self.session.bootstrap:
                self.session.set_bootstrap(int(n_boot))
            if roles != self.session.roles:
                self.session.set_roles(roles)
            if settings is not None and settings != self.session.settings:
                self.session.set_settings(settings)
        except RegbenchError as exc:
            self.show_error("These roles cannot be used", exc)
            return False
        self.refresh_all(now=True)
        self.refit()
        return True

    def set_alpha(self, name: str, alpha: Optional[float]) -> None:
        """Record the α choice (one undo step per family while dragging); the worker recomputes the rest."""
        if self.session is None:
            return
        try:
            self.session.set_alpha(name, alpha)
        except RegbenchError as exc:
            self.show_error("Cannot use this α", exc)

    def add_extra_fit(self, family: str, alpha: float) -> Optional[str]:
        if self.session is None:
            return None
        try:
            name = self.session.add_extra_fit(family, alpha)
        except RegbenchError as exc:
            self.show_error("Cannot keep this fit", exc)
            return None
        self.set_status(f"Kept {name} as an extra fit.")
        return name

    def remove_extra_fit(self, name: str) -> None:
        if self.session is None:
            return
        try:
            self.session.remove_extra_fit(name)
        except RegbenchError as exc:
            self.show_error("Cannot remove this fit", exc)

    def request_derived(self) -> None:
        """Compute models, agreement, structure and stress results for the session's current choices
        in the pool.

        Rapid requests (a dragged α) coalesce: while one job runs, newer requests
        cancel it and only the latest state is computed next; an update for a
        state the session has left is dropped.
        """
        session = self.session
        if session is None or session.results is None or session.derived_ready:
            return
        key = session.key()
        if self._derive_job is not None:
            if key != self._derive_key:
                self._derive_again = True
                self._derive_job.cancel()
            return

        def work(progress, cancel):
            progress(0, 1, "comparing the models at the chosen α")
            return session.compute_for_alpha(cancel=cancel)

        def finished():
            self._derive_job = self._derive_key = None
            if self._derive_again:
                self._derive_again = False
                self.request_derived()

        def done(update):
            if self.session is session and session.apply_alpha_update(update):
                self.derived_applied += 1
                self.refresh_for("derived")
            finished()

        def failed(exc):
            finished()
            if self.session is session and session.key() == key:
                self.show_error("The models could not be compared", exc)

        self._derive_key = key
        self._derive_job = self.runner.start(work, label="Comparing the models", slot="derive", done=done,
                                             failed=failed, cancelled=finished)

    def undo(self) -> None:
        if self.session is None:
            return
        if not self.session.undo():
            self.set_status("Nothing to undo.")
            return
        self.refresh_all(now=True)
        if not self.has_results():
            self.refit()

    def cancel_work(self) -> None:
        self.runner.cancel_all()
        self.set_status("Cancelling…")

    def run_job(self, fn, label, done, slot="analysis"):
        """Run an analysis in the pool (panels use this); errors go to a dialog."""
        return self.runner.start(fn, label=label, slot=slot, done=done,
                                 failed=lambda exc: self.show_error(f"{label} did not finish", exc),
                                 cancelled=lambda: self.set_status(f"{label} cancelled."))

    # == saving ======================================================================
    def save(self) -> bool:
        if self.session is None:
            return False
        if not self.path:
            return self.save_as_dialog()
        return self.save_to(self.path)

    def save_to(self, path: str) -> bool:
        if not path.lower().endswith(PROJECT_EXT):
            path += PROJECT_EXT
        try:
            self.panel("data").keep_notes()
            self._store_view_state()
            project.save_project(self.session, path)
        except RegbenchError as exc:
            self.show_error("Cannot save the project", exc)
            return False
        self.path = path
        self.dirty = False
        self._add_recent(path)
        self._drop_recovery()
        self._update_title()
        self.set_status(f"Saved {os.path.basename(path)}.")
        return True

    def save_as_dialog(self) -> bool:
        if self.session is None:
            return False
        path, _ = QtWidgets.QFileDialog.getSaveFileName(self, "Save project", self.path or "untitled.regbench",
                                                        "regbench projects (*.regbench)")
        return bool(path) and self.save_to(path)

    def _store_view_state(self):
        """Keep the open panel and each panel's choices in the session (they reopen with it)."""
        if self.session is None:
            return
        state = {"panel": self.current_panel().key if self.current_panel() else "data"}
        for p in self.panels:
            if hasattr(p, "view_state"):
                state[p.key] = p.view_state()
        old = self.session.view_state.get("gui")
        if old != state:
            self.session.set_view_state("gui", state)

    def _restore_view_state(self):
        state = self.session.view_state.get("gui") if self.session is not None else None
        if not isinstance(state, dict):
            return
        for p in self.panels:
            if hasattr(p, "restore_view_state") and isinstance(state.get(p.key), dict):
                p.restore_view_state(state[p.key])
        keys = [p.key for p in self.panels]
        if state.get("panel") in keys:
            self.nav.setCurrentRow(keys.index(state["panel"]))

    def export_report_dialog(self):
        if self.session is None:
            return
        path, _ = QtWidgets.QFileDialog.getSaveFileName(self, "Export report", "report.html", "HTML (*.html)")
        if path:
            self.export_report(path)

    def export_report(self, path: str) -> bool:
        try:
            render_report(self.session, path)
        except RegbenchError as exc:
            self.show_error("Cannot write the report", exc)
            return False
        self.set_status(f"Wrote {os.path.basename(path)}.")
        return True

    def export_plot_dialog(self):
        p = self.current_panel()
        plots = p.plots() if p is not None else []
        if not plots:
            self.show_error("No plot here", RegbenchError("this panel has no plot; switch to a panel with a plot"))
            return
        index = 0
        if len(plots) > 1:
            names = [getattr(w, "export_name", f"plot {i + 1}") for i, w in enumerate(plots)]
            name, ok = QtWidgets.QInputDialog.getItem(self, "Export plot", "Which plot", names, 0, False)
            if not ok:
                return
            index = names.index(name)
        path, _ = QtWidgets.QFileDialog.getSaveFileName(self, "Export plot", f"{p.key}.png", "PNG (*.png);;SVG (*.svg)")
        if path:
            self.export_plot(path, index)

    def export_plot(self, path: str, index: int = 0) -> bool:
        p = self.current_panel()
        plots = p.plots() if p is not None else []
        try:
            if not plots:
                raise RegbenchError("this panel has no plot; switch to a panel with a plot")
            export_plot(plots[index], path)
        except RegbenchError as exc:
            self.show_error("Cannot export the plot", exc)
            return False
        self.set_status(f"Wrote {os.path.basename(path)}.")
        return True

    def _current_view(self):
        """The table with the keyboard focus, else the current panel's first table."""
        w = QtWidgets.QApplication.focusWidget()
        p = self.current_panel()
        views = p.views() if p is not None else []
        return w if isinstance(w, QtWidgets.QTableView) else (views[0] if views else None)

    def copy_table(self) -> str:
        """Copy the selected cells (or the whole table) at full precision, tab-separated."""
        view = self._current_view()
        if view is None:
            return ""
        text = view_to_tsv(view)
        QtWidgets.QApplication.clipboard().setText(text)
        lines = text.count(chr(10)) - 1
        width = text.split(chr(10), 1)[0].count(chr(9))
        self.set_status(f"Copied {lines} row{'s' if lines != 1 else ''} × {width} column{'s' if width != 1 else ''} "
                        "at full precision.")
        return text

    def export_table_dialog(self):
        view = self._current_view()
        if view is None:
            self.show_error("No table here", RegbenchError("this panel has no table; switch to a panel with a table"))
            return
        p = self.current_panel()
        path, _ = QtWidgets.QFileDialog.getSaveFileName(self, "Export table", f"{p.key if p else 'table'}.csv",
                                                        "CSV (*.csv)")
        if path:
            self.export_table(path, view)

    def export_table(self, path: str, view=None) -> bool:
        """Write a table of the current panel as CSV at full precision."""
        view = view or self._current_view()
        try:
            if view is None:
                raise RegbenchError("this panel has no table; switch to a panel with a table")
            export_csv(view.model(), path)
        except RegbenchError as exc:
            self.show_error("Cannot export the table", exc)
            return False
        self.set_status(f"Wrote {os.path.basename(path)}.")
        return True

    # == recovery ====================================================================
    def autosave(self) -> bool:
        if self.session is None or not self.dirty or self.runner.busy():
            return False
        path = recovery_path()
        try:
            os.makedirs(os.path.dirname(path), exist_ok=True)
            with self.session.document_state_kept():   # the recovery copy is not the document's file
                project.save_project(self.session, path)
        except (RegbenchError, OSError) as exc:
            self.set_status(f"Recovery copy not written: {exc}")
            return False
        return True

    def _drop_recovery(self):
        try:
            os.remove(recovery_path())
        except OSError:
            pass

    def offer_recovery(self) -> bool:
        path = recovery_path()
        if not os.path.exists(path):
            return False
        answer = QtWidgets.QMessageBox.question(
            self, "Recover unsaved work",
            "regbench closed last time with unsaved changes. Open the recovered session?",
            QtWidgets.QMessageBox.Open | QtWidgets.QMessageBox.Discard, QtWidgets.QMessageBox.Open)
        if answer == QtWidgets.QMessageBox.Open:
            try:
                self.adopt(project.load_project(path, compute=False), path=None, dirty=True)
                return True
            except RegbenchError as exc:
                self.show_error("The recovered session cannot be opened", exc)
        self._drop_recovery()
        return False

    # == recent files ================================================================
    def _qsettings(self):
        return QtCore.QSettings("regbench", "regbench")

    def recent_files(self) -> list:
        v = self._qsettings().value("recent", [])
        if isinstance(v, str):
            v = [v]
        return [p for p in (v or []) if isinstance(p, str)]

    def _add_recent(self, path):
        path = os.path.abspath(path)
        files = [path] + [p for p in self.recent_files() if p != path]
        self._qsettings().setValue("recent", files[:MAX_RECENT])
        self._fill_recent()

    def _fill_recent(self):
        self.recent_menu.clear()
        files = self.recent_files()
        for p in files:
            act = self.recent_menu.addAction(os.path.basename(p))
            act.setToolTip(p)
            act.triggered.connect(lambda checked=False, p=p: self.open_path(p))
        self.recent_menu.setEnabled(bool(files))

    # == dialogs and status ==========================================================
    def show_error(self, title: str, exc: BaseException) -> None:
        """A clear message in a dialog that does not block the window."""
        msg = _window_words(str(exc) or type(exc).__name__)
        if not isinstance(exc, RegbenchError):
            msg = f"An unexpected problem ({type(exc).__name__}): {msg}. Nothing was changed; please report it."
        self.errors.append(msg)
        box = QtWidgets.QMessageBox(QtWidgets.QMessageBox.Warning, title, msg, QtWidgets.QMessageBox.Ok, self)
        box.setAttribute(Qt.WA_DeleteOnClose)
        box.setWindowModality(Qt.WindowModal)
        self.last_error_box = box
        box.open()
        self.set_status(msg)
        self.job_failed.emit(msg)

    def set_status(self, text: str, sticky: bool = True) -> None:
        """Show ``text``; a sticky message (an outcome) stays when the job ends."""
        self.status_label.setText(text)   # its tooltip holds the whole text
        self._sticky = sticky

    def ask_unsaved(self) -> str:
        """'save', 'discard' or 'cancel'."""
        b = QtWidgets.QMessageBox.question(
            self, "Unsaved changes", "This session has changes that are not saved. Save them first?",
            QtWidgets.QMessageBox.Save | QtWidgets.QMessageBox.Discard | QtWidgets.QMessageBox.Cancel,
            QtWidgets.QMessageBox.Save)
        return {QtWidgets.QMessageBox.Save: "save", QtWidgets.QMessageBox.Discard: "discard"}.get(b, "cancel")

    def _confirm_discard(self) -> bool:
        if self.session is None or not self.dirty:
            return True
        answer = self.ask_unsaved()
        if answer == "save":
            return self.save()
        return answer == "discard"

    def _update_title(self):
        name = os.path.basename(self.path) if self.path else ("untitled" if self.session is not None else "")
        self.setWindowTitle(f"{name}{' •' if self.dirty else ''} — regbench" if name else "regbench")

    def _update_actions(self):
        has = self.session is not None
        for a in (self.act_save, self.act_save_as, self.act_report, self.act_plot, self.act_csv, self.act_undo,
                  self.act_refit):
            a.setEnabled(has)

    # == worker feedback =============================================================
    def _job_started(self, job):
        self.progress_bar.setRange(0, 0)
        self.progress_bar.setVisible(True)
        self.cancel_btn.setVisible(True)
        self.set_status(f"{job.label}…", sticky=False)

    def _job_progress(self, done, total, message):
        if total > 0:
            self.progress_bar.setRange(0, total)
            self.progress_bar.setValue(min(done, total))
        if message:
            self.set_status(message, sticky=False)

    def _job_stopped(self, job):
        if not self.runner.busy():
            self.progress_bar.setVisible(False)
            self.cancel_btn.setVisible(False)
            if not getattr(self, "_sticky", False):
                self.set_status("Ready.", sticky=False)

    # == Qt events ===================================================================
    def dragEnterEvent(self, event):
        if self._dropped_path(event.mimeData()):
            event.acceptProposedAction()

    def dropEvent(self, event):
        path = self._dropped_path(event.mimeData())
        if path:
            event.acceptProposedAction()
            self.open_path(path)

    @staticmethod
    def _dropped_path(mime) -> Optional[str]:
        if not mime.hasUrls():
            return None
        for url in mime.urls():
            p = url.toLocalFile()
            if p and os.path.splitext(p)[1].lower() in TABLE_EXTS + (PROJECT_EXT,):
                return p
        return None

    def closeEvent(self, event):
        if not self._confirm_discard():
            event.ignore()
            return
        self.runner.cancel_all()
        self.runner.wait(5000)
        self.autosave_timer.stop()
        self._drop_recovery()
        event.accept()

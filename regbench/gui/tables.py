"""Qt table models: a lazy view over a DataFrame and a small generic grid.

Neither creates per-cell items: ``data()`` formats a cell when the view asks
for it, so a million-row table opens at once.
"""

from __future__ import annotations

from typing import Optional, Sequence

import numpy as np
from PySide6 import QtCore, QtGui, QtWidgets

from regbench.formatting import cell_text as fmt
from regbench.gui.style import PALETTE

Qt = QtCore.Qt
# Roles and orientations read once: each ``Qt.DisplayRole`` looks the name up in PySide's enum again
# (about 3 µs), and a table's paint asks every cell and header for several roles, several times.
DISPLAY, ALIGNMENT, TOOLTIP = Qt.DisplayRole, Qt.TextAlignmentRole, Qt.ToolTipRole
BACKGROUND, FOREGROUND, HORIZONTAL = Qt.BackgroundRole, Qt.ForegroundRole, Qt.Horizontal
CHECK = Qt.CheckStateRole


class FrameModel(QtCore.QAbstractTableModel):
    """Read-only view of a DataFrame; rows numbered 1.. as messages number them."""

    def __init__(self, frame=None, parent=None):
        super().__init__(parent)
        self.set_frame(frame)

    def set_frame(self, frame, row_numbers=None) -> None:
        """Show ``frame``; ``row_numbers`` (``Table.line_numbers``: a row sample's rows in the file, or
        rows after blank lines) number the rows, else 1, 2, 3, …"""
        self.beginResetModel()
        self._row_numbers = tuple(row_numbers) if row_numbers else None
        if frame is None:
            self._frame, self._names, self._cols, self._n = None, [], [], 0
        else:
            # Each column becomes an array when the view first asks for one of its cells: a wide table
            # shows a few columns at a time, and converting all of them would hold the GUI thread.
            self._frame = frame
            self._names = [str(c) for c in frame.columns]
            self._cols = [None] * len(self._names)
            self._n = len(frame)
        self.endResetModel()

    def _col(self, c: int):
        col = self._cols[c]
        if col is None:
            col = self._cols[c] = self._frame.iloc[:, c].to_numpy()
        return col

    def rowCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else self._n

    def columnCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else len(self._cols)

    def data(self, index, role=Qt.DisplayRole):
        if role == DISPLAY:
            return fmt(self._col(index.column())[index.row()], 6)
        if role == ALIGNMENT:
            col = self._col(index.column())
            return _RIGHT if col.dtype.kind in "fiub" else _LEFT
        return None

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if role != DISPLAY:
            return None
        if orientation == HORIZONTAL:
            return self._names[section] if section < len(self._names) else None
        numbers = self._row_numbers
        return str(numbers[section] if numbers is not None and section < len(numbers) else section + 1)

    def raw_text(self, r: int, c: int) -> str:
        """The cell at full precision (copy and CSV export)."""
        return full_text(self._col(c)[r])


class GridModel(QtCore.QAbstractTableModel):
    """A small read-only grid of values with optional per-cell colours and tips.

    Parameters
    ----------
    rows : list of list
    headers : sequence of str
    row_labels : sequence of str, optional
    backgrounds : dict (row, col) -> colour, optional
    foregrounds : dict (row, col) -> colour, optional
    tips : dict (row, col) -> str, optional
    """

    def __init__(self, rows=(), headers=(), row_labels=None, parent=None):
        super().__init__(parent)
        self.set_rows(rows, headers, row_labels)

    def set_rows(self, rows, headers, row_labels=None, backgrounds=None, foregrounds=None, tips=None, digits=4,
                 percent_cols=()):
        """Show ``rows``; columns in ``percent_cols`` hold shares (0.962) shown as percentages (96.2 %).

        ``rows`` may be a 2-d array of numbers, kept as it is (a 1,000 × 1,000 grid made into lists of
        Python floats held the GUI thread for a quarter of a second)."""
        self.beginResetModel()
        self.percent_cols = frozenset(percent_cols)
        self.rows = rows if isinstance(rows, np.ndarray) and rows.ndim == 2 else [list(r) for r in rows]
        self.headers = list(headers)
        self.row_labels = list(row_labels) if row_labels is not None else None
        self.backgrounds = backgrounds or {}
        self.foregrounds = foregrounds or {}
        self.tips = tips or {}
        self.digits = digits
        self.wrapped = frozenset()
        self._memo = {}
        self.endResetModel()

    def rowCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else len(self.rows)

    def columnCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else len(self.headers)

    def value(self, r: int, c: int):
        return self.rows[r][c]

    def raw_text(self, r: int, c: int) -> str:
        """The cell at full precision (copy and CSV export); shares stay shares (0.9625, not 96 %)."""
        return full_text(self.rows[r][c] if c < len(self.rows[r]) else None)

    def data(self, index, role=Qt.DisplayRole):
        # Every paint asks each cell for several roles again: each answer is worked out once per set_rows.
        key = (index.row(), index.column(), role)
        try:
            return self._memo[key]
        except KeyError:
            value = self._memo[key] = self._data(index, role)
            return value

    def _data(self, index, role):
        if role not in _GRID_ROLES:  # sizing asks for many roles per cell; answer the rest at once
            return None
        r, c = index.row(), index.column()
        if role == DISPLAY:
            return self.cell_display(r, c)
        v = self.rows[r][c] if c < len(self.rows[r]) else None
        if role == ALIGNMENT:
            if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
                return _RIGHT
            return _LEFT
        if role == BACKGROUND and (r, c) in self.backgrounds:
            return QtGui.QBrush(QtGui.QColor(self.backgrounds[(r, c)]))
        if role == FOREGROUND and (r, c) in self.foregrounds:
            return QtGui.QBrush(QtGui.QColor(self.foregrounds[(r, c)]))
        if role == TOOLTIP and (r, c) in self.tips:
            return self.tips[(r, c)]
        return None

    def cell_display(self, r: int, c: int) -> str:
        """The text cell (r, c) shows (what ``data`` answers for the display role; sizing reads it here
        without making a model index per cell)."""
        v = self.rows[r][c] if c < len(self.rows[r]) else None
        if c in self.percent_cols and isinstance(v, (float, int, np.floating, np.integer)) and not isinstance(v, bool):
            return percent_text(float(v))
        return fmt(v, self.digits)

    def plain_header(self, section: int) -> Optional[str]:
        """A column's header on one line (what Copy and export write)."""
        return self.headers[section] if section < len(self.headers) else None

    def set_wrapped_headers(self, sections) -> None:
        """Show the headers of ``sections`` on two lines (their columns were squeezed below the header)."""
        sections = frozenset(sections)
        if sections != getattr(self, "wrapped", frozenset()):
            self.wrapped = sections
            if self.headers:
                self.headerDataChanged.emit(Qt.Horizontal, 0, len(self.headers) - 1)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if role != DISPLAY:
            return None
        if orientation == HORIZONTAL:
            if section >= len(self.headers):
                return None
            text = self.headers[section]
            return two_lines(text) if section in getattr(self, "wrapped", ()) else text
        if self.row_labels is not None and section < len(self.row_labels):
            return self.row_labels[section]
        return str(section + 1)


#: Cell alignments, combined once (combining Qt flags builds a new enum value on every call, and a
#: table's paint asks once per cell).
_RIGHT = int(Qt.AlignRight | Qt.AlignVCenter)
_LEFT = int(Qt.AlignLeft | Qt.AlignVCenter)
_GRID_ROLES = frozenset((Qt.DisplayRole, Qt.TextAlignmentRole, Qt.BackgroundRole, Qt.ForegroundRole, Qt.ToolTipRole))
#: Rows (beyond the visible ones) that fitting a column's width looks at: a 100 x 100 grid is sized in
#: a blink instead of over a second on the GUI thread.
SIZE_ROWS = 40
#: Cells measured at most when a view sizes its columns: a wide grid (a 60 x 60 matrix) looks at fewer
#: rows, never fewer than :data:`SIZE_ROWS_MIN`, so sizing stays a few milliseconds however wide it is.
SIZE_CELLS = 480
SIZE_ROWS_MIN = 6
#: A grid so wide that :data:`SIZE_ROWS_MIN` rows of every column exceed this many cells looks at fewer
#: rows, never fewer than two (a 1,000-term table of variance shares read 6,000 texts: 70 ms).
SIZE_CELLS_WIDE = 2500


#: Tables with at most this many columns are squeezed to the width they are given instead of scrolling
#: sideways (long cells elide; the tooltip and Copy keep the whole text).
SQUEEZE_MAX_COLUMNS = 24
MIN_COLUMN_PX = 44
SQUEEZE_MAX_RATIO = 1.35


class FittedTableView(QtWidgets.QTableView):
    """A table view whose columns, sized to their contents, shrink to fit its width when they can."""

    def resizeColumnsToContents(self):
        """Size each column to its widest text, measured once and without the item delegate.

        Qt's own sizing asks the model for every role of every sampled cell through the
        delegate (and the squeeze needs the widths again): on a panel's first visit that
        was most of the GUI thread's time.  Measuring the display text with the view's
        font metrics gives the same widths (plus the delegate's margins) at a fraction.
        """
        h = self.horizontalHeader()
        self._natural = self.content_widths()
        if hasattr(self.model(), "set_wrapped_headers"):
            self.model().set_wrapped_headers(())
        for i, w in enumerate(self._natural):
            if h.sectionResizeMode(i) == QtWidgets.QHeaderView.Interactive:
                h.resizeSection(i, w)
        self._squeeze()

    def content_widths(self) -> list:
        """Each column's width for its widest text (the first rows and the visible ones) and its header."""
        model, h = self.model(), self.horizontalHeader()
        if model is None:
            return []
        fm = self.fontMetrics()
        n = model.rowCount()
        columns = max(1, model.columnCount())
        least = SIZE_ROWS_MIN if SIZE_ROWS_MIN * columns <= SIZE_CELLS_WIDE else max(2, SIZE_CELLS_WIDE // columns)
        sample = max(least, min(SIZE_ROWS, SIZE_CELLS // columns))
        rows = set(range(min(n, sample)))
        top = self.rowAt(0)
        if top >= 0:
            rows.update(range(top, min(n, top + sample)))
        advance = _text_widths(fm)
        style = self.style()
        # The delegate's text margins on both sides, the grid line, and a check box where a cell has one.
        pad = 2 * (style.pixelMetric(QtWidgets.QStyle.PM_FocusFrameHMargin, None, self) + 1) + 2
        check = style.pixelMetric(QtWidgets.QStyle.PM_IndicatorWidth, None, self) + 2 * pad
        widths, self._cells, self._header_lines = [], [], []
        header_width = _header_widths(h)
        # A grid answers each cell's text directly and has no check boxes.
        direct = getattr(model, "cell_display", None)
        for c in range(model.columnCount()):
            # A header may take two lines when its column is squeezed: the width of its longer half.
            plain = model.plain_header(c) if hasattr(model, "plain_header") else model.headerData(c, Qt.Horizontal)
            plain = "" if plain is None else str(plain)
            one = header_width(c)
            margin = max(0, one - fm.horizontalAdvance(plain))
            two = max((fm.horizontalAdvance(line) for line in two_lines(plain).split("\n")), default=0) + margin
            self._header_lines.append((one, min(one, two)))
            w = 0
            if direct is not None:
                texts = [direct(r, c) for r in rows]
                w = max((advance(str(t)) + pad for t in texts if t is not None and t != ""), default=0)
                self._cells.append(w)
                widths.append(max(w, one))
                continue
            for r in rows:
                idx = model.index(r, c)
                text = model.data(idx, DISPLAY)
                extra = check if model.data(idx, CHECK) is not None else 0
                if text is not None and text != "":
                    w = max(w, advance(str(text)) + pad + extra)
                elif extra:
                    w = max(w, extra)
            self._cells.append(w)
            widths.append(max(w, one))
        return widths

    def resizeEvent(self, event):
        super().resizeEvent(event)
        self._squeeze()

    def keep_to_columns(self) -> None:
        """Make the view no wider than its columns at their natural widths (:meth:`resizeColumnsToContents`),
        so a splitter gives the room left over to its neighbour instead of an empty stretch beside the
        last column."""
        h, vh = self.horizontalHeader(), self.verticalHeader()
        natural = getattr(self, "_natural", None)
        if not natural or len(natural) != h.count():
            natural = [h.sectionSize(i) for i in range(h.count())]
        need = (sum(natural)
                + (0 if vh.isHidden() else vh.sizeHint().width())
                + 2 * self.frameWidth() + self.verticalScrollBar().sizeHint().width() + 2)
        self.setMaximumWidth(max(need, 120))

    def _squeeze(self):
        h = self.horizontalHeader()
        natural = getattr(self, "_natural", None)
        n = h.count()
        if not natural or len(natural) != n or n > SQUEEZE_MAX_COLUMNS:
            return
        avail = self.viewport().width() - 2
        widths = list(natural)
        wrapped = set()
        # Shrink only when a little is missing; a table far wider than its room scrolls instead of
        # turning every cell into an ellipsis.
        cells = getattr(self, "_cells", None) or [0] * n
        lines = getattr(self, "_header_lines", None) or [(w, w) for w in natural]
        # Headers give way first by taking two lines; cells keep their whole text.
        floor = [min(max(MIN_COLUMN_PX, cells[i], lines[i][1]), natural[i]) for i in range(n)]
        if avail < sum(natural) and (sum(floor) <= avail or sum(natural) <= SQUEEZE_MAX_RATIO * avail):
            if sum(floor) > avail:   # a little is still missing: the widest cells elide, headers never
                floor = [min(max(MIN_COLUMN_PX, lines[i][1]), natural[i]) for i in range(n)]
            cap = max(natural)
            while cap > MIN_COLUMN_PX and sum(max(f, min(w, cap)) for f, w in zip(floor, natural)) > avail:
                cap -= 4
            widths = [max(f, min(w, cap)) for f, w in zip(floor, natural)]
            wrapped = {i for i in range(n) if widths[i] < lines[i][0] and lines[i][1] < lines[i][0]}
        elif getattr(self, "spread", False) and avail > sum(natural):
            free = [i for i in range(n) if h.sectionResizeMode(i) == QtWidgets.QHeaderView.Interactive]
            if len(free) == n:   # a column that stretches itself takes the room instead
                # Room to spare goes to every column alike, so no column sits far from its header
                # (the last one stretches only in a view whose columns were never measured).
                h.setStretchLastSection(False)
                share, extra = divmod(avail - sum(natural), n)
                widths = [w + share + (1 if i < extra else 0) for i, w in enumerate(natural)]
        if hasattr(self.model(), "set_wrapped_headers"):
            self.model().set_wrapped_headers(wrapped)
        for i, w in enumerate(widths):
            if h.sectionResizeMode(i) == QtWidgets.QHeaderView.Interactive:
                h.resizeSection(i, w)


def make_view(model: QtCore.QAbstractTableModel, stretch_last: bool = True) -> QtWidgets.QTableView:
    """A table view of ``model`` whose columns size to their text.

    ``stretch_last``: a table narrower than its view shares the room left over among its columns
    (the last column alone stretching would stand far from its header); False leaves it empty.
    """
    view = FittedTableView()
    view.setModel(model)
    view.setAlternatingRowColors(True)
    view.setSelectionBehavior(QtWidgets.QAbstractItemView.SelectItems)
    view.spread = stretch_last
    view.horizontalHeader().setStretchLastSection(stretch_last)
    view.verticalHeader().setDefaultSectionSize(22)
    view.verticalHeader().setResizeContentsPrecision(SIZE_ROWS)
    view.horizontalHeader().setResizeContentsPrecision(SIZE_ROWS)
    view.setWordWrap(False)
    return view


def _text_widths(fm: QtGui.QFontMetrics):
    """``fm.horizontalAdvance`` remembered per text (a grid repeats many texts: 0, 1, no, …)."""
    seen: dict = {}

    def advance(text: str) -> int:
        w = seen.get(text)
        if w is None:
            w = seen[text] = fm.horizontalAdvance(text)
        return w

    return advance


def _header_widths(h: QtWidgets.QHeaderView):
    """A header section's width for its text, like ``h.sectionSizeHint``: Qt's own answer for the
    longest text, then the same margins around each text's widest line, within the header's least
    and largest section sizes (Qt asks the model for every role of a section each time, which on a
    wide table was most of the sizing)."""
    bold = QtGui.QFont(h.font())
    bold.setBold(True)   # Qt measures a section's text in bold (room for a highlighted section)
    model, fm = h.model(), QtGui.QFontMetrics(bold)
    texts = []
    orientation = h.orientation()
    for c in range(model.columnCount() if orientation == HORIZONTAL else model.rowCount()):
        text = model.headerData(c, orientation, DISPLAY)
        texts.append("" if text is None else str(text))
    lines = [fm.size(0, t).width() for t in texts]   # the widest line, as the style measures it
    if not texts:
        return lambda c: h.sectionSizeHint(c)
    longest = max(range(len(texts)), key=lambda c: lines[c])
    margin = max(0, h.sectionSizeHint(longest) - lines[longest])
    low, high = h.minimumSectionSize(), h.maximumSectionSize()
    return lambda c: min(high, max(low, lines[c] + margin)) if c < len(lines) else h.sectionSizeHint(c)


def two_lines(text: str) -> str:
    """``text`` broken at the space nearest its middle (unchanged when it has no space)."""
    spaces = [i for i, ch in enumerate(text) if ch == " "]
    if not spaces:
        return text
    mid = len(text) / 2
    at = min(spaces, key=lambda i: abs(i - mid))
    return text[:at] + "\n" + text[at + 1:]


def full_text(v) -> str:
    """A value as text with every digit a float holds (the shortest text that reads back the same)."""
    if v is None:
        return ""
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return "" if np.isnan(v) else repr(v)
    return str(v)


def percent_text(v: float) -> str:
    """A share as a percentage, as the sentences write it (0.9625 -> '96.3 %')."""
    if not np.isfinite(v):
        return ""
    return f"{100 * v:.1f} %" if abs(v) < 0.9995 or v == 1 else f"{100 * v:.0f} %"


def header_text(model, c: int) -> str:
    """A column's header on one line, as Copy and export write it (a squeezed header shows two)."""
    text = model.plain_header(c) if hasattr(model, "plain_header") else model.headerData(c, Qt.Horizontal)
    return "" if text is None else str(text).replace("\n", " ")


def cell_text(model, r: int, c: int) -> str:
    """Full-precision text of a cell when the model has it, else what the cell shows."""
    if hasattr(model, "raw_text"):
        return model.raw_text(r, c)
    v = model.data(model.index(r, c))
    return "" if v is None else str(v)


def model_to_tsv(model: QtCore.QAbstractItemModel, rows: Optional[Sequence[int]] = None,
                 cols: Optional[Sequence[int]] = None) -> str:
    """Tab-separated text of a model (header line first), for the clipboard."""
    rows = range(model.rowCount()) if rows is None else rows
    cols = range(model.columnCount()) if cols is None else cols
    clean = lambda s: "" if s is None else str(s).replace("\t", " ").replace("\n", " ")
    vheader = [clean(model.headerData(r, Qt.Vertical)) for r in rows]
    lines = ["\t".join([""] + [clean(header_text(model, c)) for c in cols])]
    for r, label in zip(rows, vheader):
        lines.append("\t".join([label] + [clean(cell_text(model, r, c)) for c in cols]))
    return "\n".join(lines) + "\n"


def view_to_tsv(view: QtWidgets.QTableView) -> str:
    """The selected cells of a view at full precision (the whole table when at most one cell is selected)."""
    model = view.model()
    sel = view.selectionModel().selectedIndexes() if view.selectionModel() else []
    if len(sel) <= 1:
        return model_to_tsv(model)
    rows = sorted({i.row() for i in sel})
    cols = sorted({i.column() for i in sel})
    return model_to_tsv(model, rows, cols)


WARN_BG = "#f6e3dc"
OK_BG = PALETTE["accent_soft"]

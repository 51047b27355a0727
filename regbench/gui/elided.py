"""A one-line label that ends in "…" when its text is wider than its room, the whole text in its tooltip."""

from __future__ import annotations

from PySide6 import QtCore, QtWidgets

Qt = QtCore.Qt


class ElidedLabel(QtWidgets.QLabel):
    """A QLabel for one line of text of any length (the status line).

    :meth:`text` is the whole text and so is the tooltip; what is painted is cut with "…" to the
    label's width, measured again on every resize.  The label asks for no width of its own, so a
    long message never widens the window.
    """

    def __init__(self, text: str = "", parent=None):
        super().__init__(parent)
        self.setSizePolicy(QtWidgets.QSizePolicy.Ignored, QtWidgets.QSizePolicy.Preferred)
        self.setTextFormat(Qt.PlainText)
        self._full = ""
        self.setText(text)

    def setText(self, text: str) -> None:  # noqa: N802 (Qt's name)
        self._full = str(text)
        self.setToolTip(self._full)
        self._elide()

    def text(self) -> str:
        """The whole text, as set."""
        return self._full

    def shown_text(self) -> str:
        """The text as painted: whole when it fits, else cut and ending in "…"."""
        return super().text()

    def minimumSizeHint(self) -> QtCore.QSize:  # noqa: N802
        return QtCore.QSize(0, super().minimumSizeHint().height())

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self._elide()

    def _elide(self) -> None:
        # One line: a message's line breaks read as spaces on the status line.
        flat = " ".join(self._full.split())
        room = self.contentsRect().width() - 2 * self.margin() - max(0, self.indent())
        shown = self.fontMetrics().elidedText(flat, Qt.ElideRight, max(0, room))
        if shown != super().text():
            super().setText(shown)

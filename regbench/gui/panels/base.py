"""What every panel shares: a title, the generated sentences, a body."""

from __future__ import annotations

from PySide6 import QtCore, QtWidgets

Qt = QtCore.Qt


class Panel(QtWidgets.QWidget):
    """A panel answers one question.

    Subclasses set ``key`` and ``title``, build their body in ``build`` and
    fill it from the session in ``refresh``.
    """

    key = ""
    title = ""
    nav = ""
    #: Reads the models at the chosen α, agreement, structure or stress results: redrawn only once
    #: the window's worker has them (never computed on the GUI thread).
    uses_comparisons = False

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window_ = window
        outer = QtWidgets.QVBoxLayout(self)
        outer.setContentsMargins(14, 10, 14, 8)
        outer.setSpacing(8)
        self.title_label = QtWidgets.QLabel(self.title)
        self.title_label.setObjectName("title")
        outer.addWidget(self.title_label)
        self.sentences = QtWidgets.QLabel("")
        self.sentences.setObjectName("sentences")
        self.sentences.setWordWrap(True)
        self.sentences.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.sentences.setSizePolicy(QtWidgets.QSizePolicy.Preferred, QtWidgets.QSizePolicy.Maximum)
        outer.addWidget(self.sentences)
        self.body = QtWidgets.QWidget()
        outer.addWidget(self.body, 1)
        self.build(self.body)

    # -- for subclasses ------------------------------------------------------------------
    def build(self, body: QtWidgets.QWidget) -> None:
        raise NotImplementedError

    def refresh(self, session) -> None:
        raise NotImplementedError

    def clear(self) -> None:
        """Forget what was shown for another session (called before a new one is adopted)."""
        self.__dict__.setdefault("_deferred", {}).clear()
        self.set_sentences([])

    def defer(self, fn, *args) -> None:
        """Run ``fn(*args)`` once the event loop has had a turn, when the window draws in steps.

        A panel's first drawing (its tables and sentences, then its plots, then Qt's painting)
        would otherwise hold the GUI thread in one piece; in steps each piece is shorter and the
        window answers in between.  A newer request for the same ``fn`` replaces an older one.
        """
        if not getattr(self.window_, "draw_in_steps", False):
            fn(*args)
            return
        pending = self.__dict__.setdefault("_deferred", {})
        token = object()
        pending[fn.__name__] = (token, fn, args)

        def run():
            entry = pending.get(fn.__name__)
            if entry is not None and entry[0] is token:
                del pending[fn.__name__]
                fn(*args)

        QtCore.QTimer.singleShot(0, run)

    def flush(self) -> None:
        """Run every deferred drawing now (pictures and tests that look at once)."""
        pending = self.__dict__.setdefault("_deferred", {})
        while pending:
            _, (_, fn, args) = pending.popitem()
            fn(*args)

    def plots(self) -> list:
        """pyqtgraph PlotWidgets this panel can export."""
        return []

    def views(self) -> list:
        """QTableViews whose contents Copy table can take."""
        return []

    # -- helpers -------------------------------------------------------------------------
    def set_sentences(self, sentences) -> None:
        sentences = [s for s in (sentences or ()) if s]
        self.sentences.setText(" ".join(sentences) if sentences else "")
        self.sentences.setVisible(bool(sentences))

    @property
    def session(self):
        return self.window_.session


def hbox(*widgets, stretch_last=False):
    w = QtWidgets.QWidget()
    lay = QtWidgets.QHBoxLayout(w)
    lay.setContentsMargins(0, 0, 0, 0)
    for x in widgets:
        if isinstance(x, int):
            lay.addStretch(x)
        else:
            lay.addWidget(x)
    if stretch_last:
        lay.addStretch(1)
    return w


def caption(text: str) -> QtWidgets.QLabel:
    lab = QtWidgets.QLabel(text)
    lab.setStyleSheet("color: #66707a; font-weight: 600;")
    if len(text) > 24:  # long captions wrap instead of widening the window
        lab.setWordWrap(True)
    return lab

"""What every panel shares: a title, the generated sentences, a body."""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

Qt = QtCore.Qt
#: Points one scatter item takes at most; more are added a slice per turn (see :meth:`Panel.scatter`).
SLICE_POINTS = 5000
#: Characters of sentences shown above a panel at most (about six lines at 1400 pixels); the rest is in the tooltip.
SENTENCE_CHARS = 900


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
        #: Drawings left for later turns of the event loop (see :meth:`defer` and :meth:`prepare`).
        self._deferred: dict = {}
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
        self._pending().clear()
        self.__dict__.setdefault("_prepared", {}).clear()
        self.set_sentences([])

    def defer(self, fn, *args) -> None:
        """Run ``fn(*args)`` in a later turn of the event loop, when the window draws in steps.

        A panel's first drawing (its tables and sentences, then each plot, then Qt's painting)
        would otherwise hold the GUI thread in one piece.  Deferred drawings run one per turn,
        oldest first, so the window answers (and paints) between any two of them.  A newer
        request for the same ``fn`` replaces an older one that has not run yet.
        """
        if not getattr(self.window_, "draw_in_steps", False):
            fn(*args)
            return
        pending = self._pending()
        pending.pop(fn.__name__, None)   # the newer request goes to the back of the line
        pending[fn.__name__] = (fn, args, None)
        self._queue_step()

    def prepare(self, draw, key, work, label: str = "Preparing the view") -> None:
        """Draw from numbers computed off the GUI thread: ``draw(work())``.

        ``work`` (no Qt, no change to the session) runs on the window's worker; ``draw`` then
        runs with its result on the GUI thread, in a turn of its own.  The last result is kept
        under ``key`` (anything comparable naming what it was computed from), so drawing the
        same thing again needs no work.  A newer request for the same ``draw`` replaces an
        older one.  Without steps (pictures, some tests) everything runs at once.
        """
        kept = self.__dict__.setdefault("_prepared", {})
        name = draw.__name__
        if name in kept and _same(kept[name][0], key):
            self.defer(draw, kept[name][1])
            return
        if not getattr(self.window_, "draw_in_steps", False):
            result = work()
            kept[name] = (key, result)
            draw(result)
            return
        pending = self._pending()
        pending.pop(name, None)
        token = object()
        pending[name] = (draw, (), (token, key, work))

        def arrived(result):
            entry = pending.get(name)
            if entry is None or entry[2] is None or entry[2][0] is not token:
                return   # replaced or cleared meanwhile
            kept[name] = (key, result)
            pending[name] = (draw, (result,), None)
            self._queue_step()

        def dropped(*_):
            entry = pending.get(name)
            if entry is not None and entry[2] is not None and entry[2][0] is token:
                del pending[name]

        runner = getattr(self.window_, "runner", None)
        runner.start(lambda progress, cancel: work(), label=label, slot=f"prepare:{self.key}:{name}",
                     done=arrived, failed=lambda exc: (dropped(), self.window_.show_error(f"{label} failed", exc)),
                     cancelled=dropped)

    def _pending(self) -> dict:
        return self.__dict__.setdefault("_deferred", {})

    def _queue_step(self) -> None:
        """Run the next drawing soon, from a timer, which the event loop takes after the input and timers
        already due, so those are served between the action (or a drawing) and the next drawing instead of
        after both (a zero-delay single shot is a posted event, run before them)."""
        if self.__dict__.get("_step_queued"):
            return
        self._step_queued = True
        timer = self.__dict__.get("_step_timer")
        if timer is None:
            timer = self._step_timer = QtCore.QTimer(self)
            timer.setSingleShot(True)
            timer.setInterval(1)
            timer.timeout.connect(self._run_one_step)
        timer.start()

    def _run_one_step(self) -> None:
        """Run the oldest drawing that is ready; the next one waits for another turn."""
        self._step_queued = False
        pending = self._pending()
        name = next((k for k, (_, _, waiting) in pending.items() if waiting is None), None)
        if name is None:
            return   # what is left waits for the worker, which queues a step when it answers
        fn, args, _ = pending.pop(name)
        self._in_step = True
        try:
            if any(waiting is None for (_, _, waiting) in pending.values()):
                self._queue_step()
            fn(*args)
        finally:
            self._in_step = False

    def flush(self) -> None:
        """Run every deferred drawing now, computing what the worker has not returned yet (pictures
        and tests that look at once)."""
        pending = self._pending()
        kept = self.__dict__.setdefault("_prepared", {})
        while pending:
            name = next(iter(pending))
            fn, args, waiting = pending.pop(name)
            if waiting is not None:
                _, key, work = waiting
                result = work()
                kept[name] = (key, result)
                args = (result,)
            fn(*args)

    def scatter(self, plot, x, y, **style) -> None:
        """Add the points (x, y) to ``plot`` as scatter items of one style, a slice per turn.

        Up to :data:`SLICE_POINTS` points go in at once; a larger set is added in slices of that
        many, one per turn of the event loop (pyqtgraph lays out every point of an item when it
        is added, which for tens of thousands held the GUI thread in one piece).  A newer scatter
        on the same panel replaces the slices of an older one still waiting.
        """
        x, y = np.asarray(x, float), np.asarray(y, float)
        ends = list(range(0, x.size, SLICE_POINTS)) + [x.size]

        items = []

        def scatter_slice(k):
            if k and items[0] not in plot.getPlotItem().items:
                return   # the plot was cleared meanwhile: these points belong to an older drawing
            items.append(pg.ScatterPlotItem(x=x[ends[k]:ends[k + 1]], y=y[ends[k]:ends[k + 1]], **style))
            plot.addItem(items[-1])
            if k + 2 < len(ends):
                self.defer(scatter_slice, k + 1)

        if x.size:
            scatter_slice(0)

    def plots(self) -> list:
        """pyqtgraph PlotWidgets this panel can export."""
        return []

    def views(self) -> list:
        """QTableViews whose contents Copy table can take."""
        return []

    # -- helpers -------------------------------------------------------------------------
    def set_sentences(self, sentences) -> None:
        """Show ``sentences`` above the panel's body; a text longer than :data:`SENTENCE_CHARS` (a saved
        result listing a thousand columns) is cut at a word with "…", the whole of it in the tooltip, so
        the body keeps its room."""
        sentences = [s for s in (sentences or ()) if s]
        text = " ".join(sentences) if sentences else ""
        shown = text
        if len(text) > SENTENCE_CHARS:
            cut = text.rfind(" ", 0, SENTENCE_CHARS)
            shown = text[:cut if cut > 0 else SENTENCE_CHARS].rstrip(" ,;:") + " …"
        self.sentences.setText(shown)
        self.sentences.setToolTip(text if shown != text else "")
        self.sentences.setVisible(bool(sentences))

    @property
    def session(self):
        return self.window_.session


def _same(a, b) -> bool:
    """Two keys name the same thing: the same object, or equal plain values (a design is compared by
    identity, never element by element)."""
    plain = (str, int, float, tuple)
    return a is b or (isinstance(a, plain) and type(a) is type(b) and a == b)


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

"""Progress reporting and cancellation shared by every long computation.

The core never imports Qt.  Long work accepts ``progress(done, total, message)``
and ``cancel()`` callables; it calls ``progress`` between steps and calls
:func:`check` so a GUI worker can stop it between steps.
"""

from __future__ import annotations

from typing import Callable, Optional

from regbench.errors import Cancelled

ProgressFn = Callable[[int, int, str], None]
CancelFn = Callable[[], bool]


def report(progress: Optional[ProgressFn], done: int, total: int, message: str) -> None:
    if progress is not None:
        progress(done, total, message)


def check(cancel: Optional[CancelFn]) -> None:
    """Raise :class:`Cancelled` if the caller asked to stop."""
    if cancel is not None and cancel():
        raise Cancelled("the computation was cancelled; nothing was changed")

"""Starting the desktop window: ``regbench`` or ``regbench open PATH``."""

from __future__ import annotations

import gc
import os
import sys
from typing import Optional

from regbench.gui.window import MainWindow


def application():
    """The QApplication (created once, with our names so settings and recovery files have a home)."""
    from PySide6 import QtWidgets

    app = QtWidgets.QApplication.instance()
    if app is None:
        app = QtWidgets.QApplication(sys.argv[:1])
    app.setOrganizationName("regbench")
    app.setApplicationName("regbench")
    keep_a_core_for_the_window()
    # Python's full garbage collection walks every container object the process holds: with the
    # libraries loaded that is over 100,000 objects and 55-60 ms on the GUI thread, which landed in
    # the middle of drawing a panel.  What is loaded by now lives as long as the window, so it is
    # set aside from collection (gc.freeze); a full collection then walks only what came after.
    gc.freeze()
    return app


def keep_a_core_for_the_window() -> Optional[int]:
    """Let BLAS/LAPACK use every core but one, so the GUI thread always finds a core free.

    OpenBLAS's threads spin for a while after each call instead of sleeping; while the worker
    makes many small calls (a table read in batches: one set of cross-products per batch), its
    threads keep every core busy, and the GUI thread waits for one: on two cores the window
    stalled 95-115 ms with 50 ms of its own work (``python -m regbench.gui.heartbeat``), and
    52-57 ms with BLAS on one thread.  One thread is also what the engine picks for its own
    passes (see :func:`regbench.models.ols.one_blas_thread`).  Returns the limit set, or None
    when threadpoolctl is missing.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - a declared dependency
        return None
    import scipy.linalg  # noqa: F401  (SciPy's own OpenBLAS: a limit covers only libraries loaded)

    limit = max(1, (os.cpu_count() or 1) - 1)
    # Kept, not used as a context: the limit lasts for the window's whole life (set once, so that
    # release_the_cores gives back what BLAS had before the first window).
    if _kept.get("limits") is None:
        _kept["limits"] = threadpool_limits(limits=limit, user_api="blas")
    return limit


def release_the_cores() -> None:
    """Give BLAS back the threads it had before :func:`keep_a_core_for_the_window` (a process that
    draws pictures of the window and then goes on computing, as the test suite does)."""
    limits = _kept.pop("limits", None)
    if limits is not None:
        limits.restore_original_limits()


_kept: dict = {}


def run(path: Optional[str] = None) -> int:
    """Open the main window (on ``path``, a table or a .regbench project, if given) and run until it closes."""
    app = application()
    window = MainWindow()
    window.show()
    if path:
        window.open_path(path)
    else:
        window.offer_recovery()
    event_loop = app.exec  # Qt's event loop (named so that a search for Python's exec finds nothing here)
    return int(event_loop())

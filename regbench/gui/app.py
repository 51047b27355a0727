"""Starting the desktop window: ``regbench`` or ``regbench open PATH``."""

from __future__ import annotations

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
    return app


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

"""Rendering every panel of a project's window to PNG files, offscreen."""

from __future__ import annotations

import os

SIZE = (1400, 900)


def snapshot(project_path, out_dir, size=SIZE, say=None) -> list:
    """Open ``project_path`` in a window of ``size`` and write one PNG per panel (the question sentence shows across the top of each).

    ``say``, when given, is called with the project layer's one line when the saved results
    are not used and the models are fitted again (as ``regbench report`` prints it).

    Returns
    -------
    list of str
        The files written, in panel order.
    """
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6 import QtCore, QtWidgets

    # Imported once the platform is set above, so no Qt module loads before it.
    from regbench.gui.app import application
    from regbench.gui.window import MainWindow
    from regbench.project import load_project

    app = application()
    session = load_project(os.fspath(project_path))
    if session.cache_note and say is not None:
        say(session.cache_note)
    os.makedirs(out_dir, exist_ok=True)
    window = MainWindow(autosave=False)
    window.resize(*size)
    window.show()
    window.adopt(session, path=os.fspath(project_path), fit=False)
    if not window.has_results():
        # A project saved without results: fit now.
        window.refit()
    _wait(app, window)
    # The stress panel also ranks every column, so its picture answers "what breaks" without a click.
    stress = next((p for p in window.panels if p.key == "stress"), None)
    if stress is not None:
        stress.rank()
        _wait(app, window)
    paths = []
    for i, panel in enumerate(window.panels):
        if getattr(panel, "applies", None) is not None and not panel.applies(window.session):
            continue  # e.g. the probabilities panel of a numeric target
        window.show_panel(i)
        window._refresh_panel(panel)
        panel.flush()
        _settle(app)
        path = os.path.join(out_dir, f"{i + 1:02d}_{panel.key}.png")
        window.grab().save(path)
        paths.append(path)
    window.dirty = False
    window.close()
    window.deleteLater()
    _settle(app, 1)
    return paths


def _wait(app, window, ms: int = 600_000) -> None:
    """Let the worker (a fit, the comparisons at the chosen α, a ranking) finish."""
    from PySide6 import QtCore

    deadline = QtCore.QDeadlineTimer(ms)
    while window.runner.busy() and not deadline.hasExpired():
        app.processEvents(QtCore.QEventLoop.AllEvents, 50)
        QtCore.QThread.msleep(20)
    _settle(app)


def _settle(app, rounds: int = 5) -> None:
    from PySide6 import QtCore

    for _ in range(rounds):
        app.processEvents(QtCore.QEventLoop.AllEvents, 50)

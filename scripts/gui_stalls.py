"""Measure how long the window's GUI thread stalls, per action, with a heartbeat timer.

    QT_QPA_PLATFORM=offscreen python scripts/gui_stalls.py [PROJECT] [--rounds N]

A 5 ms timer ticks on the GUI thread while the window opens the project, switches
between every panel, releases α drags on each penalized family, steps α from the
keyboard and undoes; the longest gap between ticks during each action (until the
worker is idle again) is that action's worst stall. The goal is under 100 ms.
Prints one line per action: the worst gap over all rounds and the median of the
per-round worst gaps, in wall time and in the GUI thread's own CPU time (on shared,
busy cores the wall gap includes waiting for a core).
"""

from __future__ import annotations

import argparse
import os
import pathlib
import statistics
import sys
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("project", nargs="?", default=str(ROOT / "sample_projects" / "greenhouse.regbench"))
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args(argv)
    from PySide6 import QtCore, QtWidgets

    from regbench.gui.app import application
    from regbench.gui.window import MainWindow

    app = application()
    gaps, cpu, last, last_cpu = [], [], [time.perf_counter()], [time.thread_time()]

    def tick():
        now, now_cpu = time.perf_counter(), time.thread_time()
        gaps.append(now - last[0])
        cpu.append(now_cpu - last_cpu[0])   # the GUI thread's own work in that gap (waiting for a core excluded)
        last[0], last_cpu[0] = now, now_cpu

    timer = QtCore.QTimer()
    timer.setInterval(5)
    timer.timeout.connect(tick)
    timer.start()
    worst: dict = {}
    worst_cpu: dict = {}

    def measure(name, action, settle_ms=150):
        for _ in range(3):
            app.processEvents()
        gaps.clear()
        cpu.clear()
        last[0], last_cpu[0] = time.perf_counter(), time.thread_time()
        action()
        deadline = time.perf_counter() + 120
        quiet_since = None
        while time.perf_counter() < deadline:
            app.processEvents(QtCore.QEventLoop.AllEvents, 5)
            time.sleep(0.002)
            if w.runner.busy():
                quiet_since = None
            elif quiet_since is None:
                quiet_since = time.perf_counter()
            elif time.perf_counter() - quiet_since > settle_ms / 1000:
                break
        tick()
        worst.setdefault(name, []).append(max(gaps) if gaps else 0.0)
        worst_cpu.setdefault(name, []).append(max(cpu) if cpu else 0.0)

    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    w.resize(1400, 900)
    w.show()
    for _ in range(args.rounds):
        measure("open a project", lambda: w.open_path(args.project))
        for i in range(len(w.panels)):
            measure("switch panel", lambda i=i: w.show_panel(i))
        w.show_panel("paths")
        paths = w.panel("paths")
        for k in range(paths.family.count()):
            paths.family.setCurrentIndex(k)
            grid = paths.figure.grid()
            measure("release an α drag", lambda: paths.move_alpha(float(grid[len(grid) // 3])))
            paths.figure.setFocus()
            measure("step α with a key", lambda: paths.figure.step(1) and paths._figure_alpha(paths.figure.data.alpha))
        measure("undo", w.undo)
        w.dirty = False
    timer.stop()
    print(f"GUI-thread stalls (worst gap between 5 ms ticks), {args.rounds} rounds, {args.project}:")
    print("  (wall: the gap a person sees; GUI CPU: the GUI thread's own work in its longest chunk, which is "
          "what the gap shrinks to on a quiet machine)")
    for name, values in worst.items():
        c = worst_cpu[name]
        print(f"  {name:<22} wall worst {1000 * max(values):6.0f} ms, median {1000 * statistics.median(values):6.0f} ms"
              f"   GUI CPU worst {1000 * max(c):6.0f} ms, median {1000 * statistics.median(c):6.0f} ms"
              f"   ({len(values)} actions)")
    w.close()
    QtWidgets.QApplication.processEvents()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""How long the window's GUI thread stalls, per action, measured with a heartbeat timer.

A timer ticks every 10 ms on the GUI thread; the longest gap between two ticks while an
action runs (until the worker is idle again) is that action's worst stall.  The goal is
under 100 ms.  Each gap is measured in wall time (what a person sees; on shared, busy cores
it includes waiting for a core) and in the GUI thread's own CPU time (the work the thread
did in that gap, which is what the gap shrinks to on a quiet machine).

    QT_QPA_PLATFORM=offscreen python -m regbench.gui.heartbeat [PROJECT] [--rounds N]
    QT_QPA_PLATFORM=offscreen python -m regbench.gui.heartbeat --batches TABLE [--memory-budget 50MB]

(``scripts/gui_stalls.py`` runs the same.)  The actions: open a project, the first visit to
each panel, switching between panels afterwards, switching the penalty figure to another
family, releasing an α drag on each family, stepping α from the keyboard, and undo; with
``--batches TABLE [--memory-budget 50MB]``, opening a table read in batches, fitting it (the pass
runs on the worker; its results are installed on the GUI thread), and each panel.  Each
action is sent through the event loop (as a click or a key press arrives), so the heartbeat
ticks between the action itself and the drawing steps it leaves for later turns.
"""

from __future__ import annotations

import argparse
import pathlib
import statistics
import time
from typing import Callable, Dict, List

from PySide6 import QtCore, QtWidgets

#: The heartbeat's period; a gap longer than this is time the GUI thread did not answer.
TICK_MS = 10
#: The worker counts as done once it has been idle this long.
SETTLE_MS = 150
#: The sample project the measurement opens by default.
SAMPLE = pathlib.Path(__file__).resolve().parents[2] / "sample_projects" / "greenhouse.regbench"


class Heartbeat(QtCore.QObject):
    """A timer on the GUI thread that records the gaps between its ticks.

    Attributes
    ----------
    gaps : list of float
        Wall-clock gaps (s) since :meth:`reset`.
    cpu : list of float
        The GUI thread's CPU time (s) in each of those gaps.
    """

    def __init__(self, parent=None, profile: bool = False):
        super().__init__(parent)
        self.gaps: List[float] = []
        self.cpu: List[float] = []
        #: With ``profile``: a cProfile of the GUI thread over each gap, the longest one kept.
        self.profile = profile
        self._profiler = None
        self.worst_profile = None
        self._last = time.perf_counter()
        self._last_cpu = time.thread_time()
        self.timer = QtCore.QTimer(self)
        self.timer.setInterval(TICK_MS)
        self.timer.timeout.connect(self.tick)

    def start(self) -> None:
        self.reset()
        self.timer.start()

    def stop(self) -> None:
        self.timer.stop()

    def reset(self) -> None:
        self.gaps.clear()
        self.cpu.clear()
        self.worst_profile = None
        self._restart_profiler()
        self._last, self._last_cpu = time.perf_counter(), time.thread_time()

    def watch(self, stream, after_s: float = 0.1) -> None:
        """From now on, each tick arms a dump of every thread's Python stack to ``stream`` should the next
        tick come ``after_s`` late.  faulthandler's own thread writes it: it names the call a worker is in
        while holding the interpreter, which a sampler written in Python could not run during.  It reads
        the other threads' frames without the interpreter lock, which is why it dumps once per late tick
        (dumping every ``after_s`` through a long gap once crashed the process after 7 dumps; keep it to
        diagnosis runs)."""
        self._watch = (stream, after_s)
        self._arm()

    def _arm(self) -> None:
        watch = getattr(self, "_watch", None)
        if watch is not None:
            import faulthandler

            faulthandler.dump_traceback_later(watch[1], repeat=False, file=watch[0])

    def tick(self) -> None:
        self._arm()
        now, now_cpu = time.perf_counter(), time.thread_time()
        gap = now - self._last
        if self._profiler is not None:
            self._profiler.disable()
            if gap > max(self.gaps, default=0.0):
                self.worst_profile = self._profiler
        self.gaps.append(gap)
        self.cpu.append(now_cpu - self._last_cpu)
        self._restart_profiler()
        self._last, self._last_cpu = time.perf_counter(), time.thread_time()

    def _restart_profiler(self) -> None:
        if self.profile:
            import cProfile

            if self._profiler is not None:
                self._profiler.disable()
            self._profiler = cProfile.Profile()
            self._profiler.enable()

    def worst(self) -> tuple:
        """(longest wall gap, longest GUI-thread CPU chunk) in seconds since :meth:`reset`."""
        return (max(self.gaps) if self.gaps else 0.0, max(self.cpu) if self.cpu else 0.0)


class StallLog:
    """Runs actions on a window under a heartbeat and keeps each action's worst gaps."""

    def __init__(self, window, app, profile: bool = False):
        self.window, self.app = window, app
        self.beat = Heartbeat(profile=profile)
        self.wall: Dict[str, list] = {}
        self.cpu: Dict[str, list] = {}
        #: With ``profile``: the profile of each action's longest gap over 100 ms, printed by :meth:`profiles`.
        self.slow: List[tuple] = []
        self.beat.start()

    def measure(self, name: str, action: Callable[[], object], timeout_s: float = 180.0) -> None:
        """Run ``action``, wait until the worker has been idle for :data:`SETTLE_MS`, keep the worst gaps."""
        for _ in range(3):
            self.app.processEvents()
        self.beat.reset()
        # The action arrives through the event loop, as a click or a key press does: the loop
        # ticks the heartbeat between the action and the drawing steps it leaves for later turns.
        QtCore.QTimer.singleShot(0, action)
        deadline = time.perf_counter() + timeout_s
        quiet_since = None
        while time.perf_counter() < deadline:
            self.app.processEvents(QtCore.QEventLoop.AllEvents, 5)
            time.sleep(0.002)
            if self.window.runner.busy():
                quiet_since = None
            elif quiet_since is None:
                quiet_since = time.perf_counter()
            elif time.perf_counter() - quiet_since > SETTLE_MS / 1000:
                break
        self.beat.tick()
        wall, cpu = self.beat.worst()
        self.wall.setdefault(name, []).append(wall)
        self.cpu.setdefault(name, []).append(cpu)
        if self.beat.worst_profile is not None and wall > 0.1:
            self.slow.append((name, wall, cpu, self.beat.worst_profile))

    def profiles(self, top: int = 25) -> str:
        """The functions that took most of each slow action's longest gap (cumulative time, GUI thread)."""
        import io
        import pstats

        out = io.StringIO()
        for name, wall, cpu, prof in self.slow:
            out.write(f"\n== {name}: wall {1000 * wall:.0f} ms, GUI CPU {1000 * cpu:.0f} ms (profiled; "
                      "the profiler slows Python code)\n")
            pstats.Stats(prof, stream=out).sort_stats("cumulative").print_stats(top)
        return out.getvalue()

    def lines(self) -> list:
        """One line per action: the worst and median of the per-action worst gaps, wall and GUI CPU."""
        out = []
        for name, values in self.wall.items():
            c = self.cpu[name]
            out.append(f"  {name:<34} wall worst {1000 * max(values):6.0f} ms, median "
                       f"{1000 * statistics.median(values):6.0f} ms   GUI CPU worst {1000 * max(c):6.0f} ms, "
                       f"median {1000 * statistics.median(c):6.0f} ms   ({len(values)} actions)")
        return out


def run_actions(log: StallLog, project: str, rounds: int) -> None:
    """Open ``project`` ``rounds`` times; each time visit every panel, move α on every family, undo."""
    w = log.window
    for _ in range(rounds):
        log.measure("open a project", lambda: w.open_path(project, confirmed=True))
        for i, panel in enumerate(w.panels):
            log.measure(f"first visit: {panel.nav}", lambda i=i: w.show_panel(i))
        for i in range(len(w.panels)):
            log.measure("switch panel (visited before)", lambda i=i: w.show_panel(i))
        w.show_panel("paths")
        paths = w.panel("paths")
        for k in range(paths.family.count()):
            if k != paths.family.currentIndex():   # a new family's paths are laid out and painted afresh
                log.measure("switch penalty family", lambda k=k: paths.family.setCurrentIndex(k))
            grid = paths.figure.grid()
            log.measure("release an α drag", lambda grid=grid: paths.move_alpha(float(grid[len(grid) // 3])))
            paths.figure.setFocus()
            log.measure("step α with a key",
                        lambda: paths.figure.step(1) and paths._figure_alpha(paths.figure.data.alpha))
        log.measure("undo", w.undo)
        w.dirty = False


def run_batches(log: StallLog, table: str, budget: int, rounds: int, bootstrap=None) -> None:
    """Open ``table`` under a memory budget of ``budget`` bytes ``rounds`` times: its first rows, then Fit
    (the pass over every row on the worker, then the results installed), then every panel.

    ``bootstrap`` (when given) sets the stability refits before each fit, so a wide table's fit
    finishes in seconds while its panels are measured."""
    from regbench.models.spec import RowSource

    w = log.window
    w.set_row_source(RowSource(memory_budget=budget))
    for _ in range(rounds):
        w.show_panel("data")
        log.measure("open a table in batches", lambda: w.open_path(table, confirmed=True))
        if bootstrap is not None:
            w.session.set_bootstrap(bootstrap)
        log.measure("fit a table read in batches", w.fit_pressed, timeout_s=600.0)
        for i, panel in enumerate(w.panels):
            log.measure(f"first visit: {panel.nav}", lambda i=i: w.show_panel(i))
        for i in range(len(w.panels)):
            log.measure("switch panel (visited before)", lambda i=i: w.show_panel(i))
        w.dirty = False


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m regbench.gui.heartbeat",
                                 description="GUI-thread stalls per action, measured with a heartbeat timer")
    ap.add_argument("project", nargs="?", default=str(SAMPLE))
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--batches", metavar="TABLE",
                    help="instead of a project: open this Parquet or CSV table read in batches, then fit it")
    ap.add_argument("--memory-budget", default="50MB", help="the memory for rows with --batches (default 50MB)")
    ap.add_argument("--bootstrap", type=int, default=None,
                    help="with --batches: the stability refits of each fit (default: the session's, 200)")
    ap.add_argument("--stacks", metavar="FILE",
                    help="write every thread's Python stack to FILE whenever the GUI thread misses the heartbeat "
                         "by more than 100 ms (what a worker runs while the window waits; faulthandler reads "
                         "the threads without the interpreter lock, so keep it to diagnosis runs)")
    ap.add_argument("--profile", action="store_true",
                    help="profile the GUI thread and print what it ran in each action's longest gap over 100 ms")
    args = ap.parse_args(argv)
    from regbench.gui.app import application
    from regbench.gui.window import MainWindow

    app = application()
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    w.resize(1400, 900)
    w.show()
    log = StallLog(w, app, profile=args.profile)
    stacks = open(args.stacks, "w") if args.stacks else None
    if stacks is not None:
        log.beat.watch(stacks)
    if args.batches:
        from regbench.data.stream import parse_size

        run_batches(log, args.batches, parse_size(args.memory_budget), args.rounds, args.bootstrap)
    else:
        run_actions(log, args.project, args.rounds)
    log.beat.stop()
    if stacks is not None:
        import faulthandler

        faulthandler.cancel_dump_traceback_later()
        stacks.close()
    what = f"{args.batches} read in batches ({args.memory_budget})" if args.batches else args.project
    print(f"GUI-thread stalls (worst gap between {TICK_MS} ms ticks), {args.rounds} rounds, {what}:")
    print("  (wall: the gap a person sees; GUI CPU: the GUI thread's own work in its longest gap, which is what "
          "the gap shrinks to on a quiet machine)")
    for line in log.lines():
        print(line)
    if args.profile:
        print(log.profiles())
    w.close()
    QtWidgets.QApplication.processEvents()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

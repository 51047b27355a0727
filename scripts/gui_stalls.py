"""Measure how long the window's GUI thread stalls, per action, with a heartbeat timer.

    QT_QPA_PLATFORM=offscreen python scripts/gui_stalls.py [PROJECT] [--rounds N]

The same as ``python -m regbench.gui.heartbeat`` (see that module for what is measured).
"""

from __future__ import annotations

import os
import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from regbench.gui.heartbeat import main  # noqa: E402

if __name__ == "__main__":
    raise SystemExit(main())

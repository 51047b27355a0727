"""Render every panel of the greenhouse sample project to assets/snapshots/*.png.

    python scripts/render_panels.py [PROJECT] [OUT_DIR]

The same as ``regbench snapshot sample_projects/greenhouse.regbench --out assets/snapshots``.
"""

from __future__ import annotations

import os
import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    project = argv[0] if argv else str(ROOT / "sample_projects" / "greenhouse.regbench")
    out = argv[1] if len(argv) > 1 else str(ROOT / "assets" / "snapshots")
    from regbench.gui.snapshot import snapshot

    for p in snapshot(project, out):
        print(os.path.relpath(p, ROOT))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

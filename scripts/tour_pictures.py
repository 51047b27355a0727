"""The README tour's pictures of things a person does in the window, on the greenhouse sample.

    python scripts/tour_pictures.py [OUT_DIR]        (default: assets/tour)

``make snapshots`` renders each panel as the project saved it; these show a step beyond that:
a derived column picked in the data view (and fitted), a path highlighted with an α typed by
hand, and the coefficient table with its intercept row and the highlighted column. Offscreen,
1400 × 900, deterministic (the sample is seeded; nothing here draws at random).
"""

from __future__ import annotations

import os
import pathlib
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

#: The column whose log is added, and the column whose path is followed.
DERIVE = ("log", "light_sum_mol_m2")
FOLLOW = "day_temp_c"
TYPED_ALPHA = "0.005"


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = pathlib.Path(argv[0] if argv else ROOT / "assets" / "tour")
    out.mkdir(parents=True, exist_ok=True)
    from PySide6 import QtCore

    from regbench.gui.app import application
    from regbench.gui.snapshot import _settle, _wait
    from regbench.gui.window import MainWindow
    from regbench.project import load_project

    app = application()
    w = MainWindow(autosave=False)
    w.ask_unsaved = lambda: "discard"
    w.resize(1400, 900)
    w.show()
    w.adopt(load_project(str(ROOT / "sample_projects" / "greenhouse.regbench")), path=None, fit=False)
    _wait(app, w)

    def shot(key, name):
        w.show_panel(key)
        panel = w.panel(key)
        w._refresh_panel(panel)
        panel.flush()
        _settle(app)
        path = out / name
        w.grab().save(str(path))
        print(os.path.relpath(path, ROOT))

    # 1. A derived column picked in the data view and fitted: it joins the column list as an input.
    data = w.panel("data")
    w.show_panel("data")
    data.derive_op.setCurrentIndex(data.derive_op.findData(DERIVE[0]))
    data.derive_a.setCurrentText(DERIVE[1])
    data.derive_btn.click()
    w.question.fit_btn.click()  # the draft (with the new column) becomes the session and is fitted
    _wait(app, w)
    shot("data", "derived_column.png")
    # 2. A path followed (its name clicked) and an α typed by hand in the penalty view.
    paths = w.panel("paths")
    w.show_panel("paths")
    paths.family.setCurrentIndex(paths.family.findData("lasso"))
    paths.alpha_edit.setText(TYPED_ALPHA)
    paths._typed_alpha()
    _wait(app, w)
    paths.set_highlight(FOLLOW)
    shot("paths", "path_highlight.png")
    # 3. The coefficients side by side, intercept first, at the α typed above.
    shot("coefficients", "coefficients_intercept.png")
    w.dirty = False
    w.close()
    _settle(app, 1)
    QtCore.QCoreApplication.processEvents()
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Opening a saved project codes its table into a design once."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_opening_a_project_builds_the_design_once(monkeypatch):
    import regbench.data.design as design_mod
    import regbench.project.store as store_mod
    import regbench.session as session_mod
    from regbench.project import load_project

    sample = ROOT / "sample_projects" / "greenhouse.regbench"
    if not sample.exists():
        pytest.skip("the sample project is made by `make samples`")
    calls = []
    real = design_mod.build_design

    def counting(*a, **k):
        calls.append(1)
        return real(*a, **k)

    monkeypatch.setattr(design_mod, "build_design", counting)
    monkeypatch.setattr(session_mod, "build_design", counting)
    monkeypatch.setattr(store_mod, "build_design", counting)
    session = load_project(sample, compute=False)
    assert len(calls) == 1
    # The one design is the one the loader checked the roles against.
    assert session.design.columns and session.design.n == session.table.n_rows - len(session.design.excluded)


def _fingerprint_cell_by_cell(table) -> str:
    """The table fingerprint as first defined: one hash update per cell of a text column."""
    import hashlib
    import math

    h = hashlib.sha256()
    for name in table.names:
        info = table.columns[name]
        h.update(b"\x00col\x00" + name.encode("utf-8") + b"\x00" + info.kind.encode())
        col = table.frame[name]
        if info.kind in ("numeric", "boolean", "empty"):
            h.update(np.ascontiguousarray(col.to_numpy(dtype=np.float64)).tobytes())
        else:
            for v in col.to_numpy(dtype=object):
                if v is None or (isinstance(v, float) and math.isnan(v)):
                    h.update(b"\x01")
                else:
                    b = str(v).encode("utf-8")
                    h.update(b"\x02" + len(b).to_bytes(8, "little") + b)
    return h.hexdigest()


def test_table_fingerprint_is_unchanged_by_hashing_each_text_once():
    """Saved projects check their cache against this fingerprint: the bytes hashed must not change."""
    import pandas as pd

    from regbench.data import read_table, table_from_frame
    from regbench.session import table_fingerprint

    tables = [read_table(ROOT / "sample_projects" / "greenhouse.csv"),
              read_table(ROOT / "sample_projects" / "grading.csv"),
              table_from_frame(pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "t": ["a", None, "é", "a"],
                                             "u": ["x", "y", "x", "NA"]}))]
    # A text column holding values of other types (as a frame handed in by a program may).
    mixed = tables[2]
    mixed.frame["t"] = pd.Series(["1", 1, 1.0, None], dtype=object)
    tables.append(mixed)
    for t in tables:
        assert table_fingerprint(t) == _fingerprint_cell_by_cell(t)


def test_opened_design_equals_a_fresh_one():
    """The one design built on open holds the same numbers as building it again from the stored table."""
    from regbench.data import build_design
    from regbench.project import load_project

    for name in ("greenhouse.regbench", "grading.regbench"):
        sample = ROOT / "sample_projects" / name
        if not sample.exists():
            pytest.skip("the sample projects are made by `make samples`")
        s = load_project(sample, compute=False)
        fresh = build_design(s.table, s.roles)
        for f in ("X", "y", "weights", "row_numbers"):
            np.testing.assert_array_equal(getattr(s.design, f), getattr(fresh, f))
        assert s.design.columns == fresh.columns and s.design.excluded == fresh.excluded


def test_opened_project_design_shares_the_stored_table(tmp_path):
    """A project's stored number columns land in one block; a design whose predictors lie side by
    side there with every row usable is a read-only view of it, not a second copy."""
    import pandas as pd

    from regbench.data import Roles, table_from_frame
    from regbench.models.results import FitSettings
    from regbench.project import load_project, save_project
    from regbench.session import Session

    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"site": rng.choice(["a", "b", "c"], 120)})
    for j in range(4):
        frame[f"x{j}"] = rng.normal(j, 1, 120)
    frame["y"] = frame["x0"] - frame["x2"] + rng.normal(0, 0.1, 120)
    s = Session.from_table(table_from_frame(frame, "t.csv"), Roles(target="y", groups="site"),
                           FitSettings(folds=3, n_penalties=10))
    path = tmp_path / "t.regbench"
    save_project(s, path)
    opened = load_project(path, compute=False)
    d = opened.design
    assert d.columns == ("x0", "x1", "x2", "x3")
    assert np.shares_memory(d.X, opened.table.frame["x0"].to_numpy()) and not d.X.flags.writeable
    np.testing.assert_array_equal(d.X, frame[["x0", "x1", "x2", "x3"]].to_numpy())

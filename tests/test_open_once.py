"""Opening a saved project codes its table into a design once."""

from __future__ import annotations

from pathlib import Path

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

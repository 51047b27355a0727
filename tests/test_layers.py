"""The rules the code keeps between its layers (DEVELOPERS.md, "Patterns the code follows").

Read from the source itself: these fail when a module breaks a rule, so the
rule does not live only in a document.
"""

from __future__ import annotations

import ast
import pathlib
import re

import pytest

from regbench.session import EVENTS, Session

PKG = pathlib.Path(__file__).resolve().parents[1] / "regbench"
# cli.py is the front door: `regbench open` and `snapshot` start the window, importing it only then.
BELOW_GUI = [p for p in PKG.rglob("*.py") if "gui" not in p.relative_to(PKG).parts and p.name != "cli.py"]


def _source(path: pathlib.Path) -> str:
    return path.read_text(encoding="utf-8")


@pytest.mark.parametrize("path", BELOW_GUI, ids=lambda p: str(p.relative_to(PKG)))
def test_nothing_below_the_window_imports_qt(path):
    tree = ast.parse(_source(path))
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module:
            names = [node.module]
        for n in names:
            assert not n.startswith(("PySide6", "pyqtgraph", "regbench.gui")), f"{path.name} imports {n}"


def test_the_project_and_report_layers_use_only_the_sessions_public_methods():
    offenders = []
    for path in list((PKG / "project").glob("*.py")) + list((PKG / "report").glob("*.py")) + [PKG / "cli.py"]:
        for i, line in enumerate(_source(path).splitlines(), 1):
            if re.search(r"\bsession\._[a-z]", line) or re.search(r"from regbench\.session import [^\n]*\b_[A-Za-z]", line):
                offenders.append(f"{path.name}:{i}: {line.strip()}")
    assert offenders == []


def test_every_session_event_is_documented():
    src = _source(PKG / "session.py")
    emitted = set(re.findall(r'_notify\("([a-z_]+)"', src))
    emitted |= set(re.findall(r'self\._edit\([^\n]*?,\s*"([a-z_]+)"', src))
    assert emitted and emitted <= set(EVENTS), emitted - set(EVENTS)


def test_observers_hear_one_event_per_kind_of_change(tmp_path):
    import numpy as np
    import pandas as pd

    from regbench.data import Roles, table_from_frame
    from regbench.models.results import FitSettings

    rng = np.random.default_rng(0)
    frame = pd.DataFrame({"a": rng.normal(size=40), "b": rng.normal(size=40)})
    frame["y"] = frame["a"] - frame["b"] + rng.normal(size=40)
    s = Session.from_table(table_from_frame(frame), Roles(target="y"), FitSettings(folds=3, n_penalties=10))
    s.set_bootstrap(0)
    heard = []
    s.subscribe(lambda event, detail: heard.append(event))
    s.compute()
    s.set_alpha("ridge", 0.5)
    s.apply_alpha_update(s.compute_for_alpha())
    s.set_notes("checked")
    s.undo()
    from regbench.project import save_project

    save_project(s, tmp_path / "p.regbench")
    assert heard == ["results", "alpha", "derived", "notes", "undo", "saved"]
    assert all(e in EVENTS for e in heard)


def test_numbers_and_word_lists_for_people_have_one_home():
    from regbench.formatting import MISSING, cell_text, join_words, number_text, percent, sentence_number

    # The helpers themselves (values by hand: the format rules stated in formatting.py).
    assert join_words([]) == "" and join_words(["a"]) == "a" and join_words(["a", "b"], "or") == "a or b"
    assert join_words(["a", "b", "c"]) == "a, b and c"
    assert number_text(float("nan")) == MISSING and percent(float("inf")) == MISSING and percent(0.125) == "12.5%"
    assert sentence_number(float("nan")) == "undefined" and sentence_number(0.0123456) == "0.0123"
    assert number_text(-0.5, unicode_minus=True) == "−0.5" and number_text(2e-5, 3) == "2.00e-05"
    # A small negative rounded to nothing in a fixed-decimals cell reads "0", never "-0".
    assert cell_text(-0.0002, 3) == "0" and cell_text(-0.0006, 3) == "-0.001" and cell_text(0.0004, 3) == "0"
    # No other module writes its own word-joiner or missing-number mark.
    defs = []
    for path in PKG.rglob("*.py"):
        if path.name == "formatting.py":
            continue
        src = _source(path)
        defs += [f"{path.name}: def {m}" for m in re.findall(r"^def (_join|join_words|_fmt|fmt)\(", src, re.M)]
        defs += [f"{path.name}: {m}" for m in re.findall(r'"[—–]"', src) if path.name != "sentences.py"]
    assert defs == [], defs

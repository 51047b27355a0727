"""Declared settings: one limit per setting, the same on every route.

The limits are our own product decisions (stated in FitSettings' declarations);
these tests check that the command line, the session, the engine and the
project loader all refuse the same values with the same words, and that a new
setting needs one declaration only.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import pathlib
import zipfile
from typing import Optional

import numpy as np
import pytest

from regbench.cli import main
from regbench.errors import DataError, ModelError, ProjectError
from regbench.models import spec
from regbench.models.engine import fit_all
from regbench.models.results import FitSettings
from regbench.project import load_project
from regbench.session import Session
from regbench.data import Roles, build_design, table_from_frame

ROOT = pathlib.Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_projects" / "greenhouse.regbench"

# (field, CLI flag and text, bad value, words every route must say)
BAD = [
    ("folds", ["--folds", "1"], 1, "1 is too few; cross-validation needs at least 2 folds"),
    ("folds", ["--folds", "1001"], 1001, "1001 is too many; cross-validation takes at most 1000 folds"),
    ("seed", ["--seed", "-1"], -1, "-1 is out of range; use a whole number from 0 to"),
    ("n_penalties", ["--penalties", "1"], 1, "a path needs at least 2 α values"),
    ("n_penalties", ["--penalties", "10001"], 10001, "a path takes at most 10000 α values"),
    ("l1_ratios", ["--l1-ratio", "1.5"], (1.5,), "1.5 is outside (0, 1)"),
    ("l1_ratios", ["--l1-ratio", "0.5,0.5"], (0.5, 0.5), "lists 0.5 twice"),
    ("l1_ratios", ["--l1-ratio", ",".join(["0.1"] * 21)], (0.1,) * 21, "give from 1 to 20 L1 ratios"),
    ("alpha", ["--alpha", "-2"], -2.0, "-2 must be a positive number"),
]


def _frame():
    rng = np.random.default_rng(3)
    import pandas as pd

    x = rng.normal(size=(60, 3))
    return pd.DataFrame({"a": x[:, 0], "b": x[:, 1], "c": x[:, 2], "y": x @ [1.0, -2.0, 0.5] + rng.normal(size=60)})


@pytest.mark.parametrize("field,argv,value,words", BAD)
def test_every_route_refuses_the_same_value_with_the_same_words(tmp_path, capsys, field, argv, value, words):
    csv = tmp_path / "t.csv"
    _frame().to_csv(csv, index=False)
    # command line: names the flag
    assert main(["fit", str(csv), "--target", "y", *argv]) == 2
    err = capsys.readouterr().err
    assert f"{argv[0]}: " in err and words in err, err
    bad = dataclasses.replace(FitSettings(), **{field: value})
    # session: names the setting
    table = table_from_frame(_frame(), source="t.csv")
    s = Session.from_table(table, Roles(target="y"))
    with pytest.raises(DataError, match=f"setting '{field}'") as exc:
        s.set_settings(bad)
    assert words in str(exc.value)
    # engine: names the field
    with pytest.raises(ModelError) as exc:
        fit_all(build_design(table, Roles(target="y")), bad)
    assert str(exc.value).startswith(f"{field}: ") and words in str(exc.value)


@pytest.mark.parametrize("field,value,words", [
    ("folds", 1001, "cross-validation takes at most 1000 folds"),
    ("folds", "five", "'five' is not a whole number"),
    ("l1_ratios", [0.5, 0.5], "lists 0.5 twice"),
    ("penalty_ratio", 0, "0 is outside [1e-12, 1)"),
    ("penalty_ratio", 5e-324, "is outside [1e-12, 1)"),  # a grid from it underflows to 0
    ("seed", True, "True is not a whole number"),
])
def test_project_loader_uses_the_same_limits(tmp_path, field, value, words):
    with zipfile.ZipFile(SAMPLE) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    doc = json.loads(members["session.json"])
    doc["settings"][field] = value
    members["session.json"] = json.dumps(doc).encode()
    m = json.loads(members["manifest.json"])
    m["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                    for n, b in members.items() if n != "manifest.json"]
    members["manifest.json"] = json.dumps(m).encode()
    path = tmp_path / "p.regbench"
    with zipfile.ZipFile(path, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    with pytest.raises(ProjectError) as exc:
        load_project(path, compute=False)
    msg = str(exc.value)
    assert "session.json" in msg and f"settings.{field}" in msg and words in msg, msg


def test_cli_options_follow_the_declarations():
    from regbench.cli import build_parser

    args = build_parser().parse_args(["fit", "t.csv", "--target", "y"])
    for name, (declared, default) in spec.specs(FitSettings).items():
        if declared.flag:
            assert hasattr(args, name), name
    from regbench.cli import settings_from_args

    assert settings_from_args(args) == FitSettings()


def test_a_new_setting_is_one_declaration():
    @dataclasses.dataclass(frozen=True)
    class Options:
        depth: int = spec.setting(3, spec.Whole(1, 9, unit="levels", purpose="a tree"), "tree depth")
        share: Optional[float] = spec.setting(None, spec.OrNone(spec.Number(0.0, 1.0, high_closed=True)), "a share")
        names: tuple = spec.setting(("a",), spec.ListOf(spec.Text(), "name", min_len=1), "names")

    o = Options()
    assert spec.to_dict(o) == {"depth": 3, "share": None, "names": ["a"]}
    assert spec.from_dict(Options, spec.to_dict(o)) == o
    assert spec.problems(Options, o) == []
    assert spec.problems(Options, {"depth": 10, "share": 1.0}) == [("depth", "10 is too many; a tree takes at most 9 levels")]
    assert spec.problems(Options, {"share": 1.5})[0][1].startswith("1.5 is outside (0, 1]")
    assert spec.problems(Options, {"colour": "red"})[0][0] == "colour"
    with pytest.raises(ValueError, match="^names: lists 0 names; give at least 1 names$"):
        spec.check(Options, {"names": []}, ValueError, spec.label_plain)


def test_numpy_scalars_pass_and_booleans_do_not():
    assert FitSettings(folds=np.int64(3), alpha=np.float64(0.5), l1_ratios=(np.float32(0.25),)).problems() == []
    assert [f for f, _ in FitSettings(folds=True).problems()] == ["folds"]
    assert [f for f, _ in FitSettings(alpha=float("inf")).problems()] == ["alpha"]

"""The CLI turns every bad-input case into exit status 2 and one line naming the problem."""

from __future__ import annotations

import subprocess
import sys

import pytest

from regbench.cli import main

CASES = [
    # (file name, content, extra args, expected fragment)
    ("empty.csv", b"", ["--target", "y"], "empty.csv: the file is empty"),
    ("dup.csv", b"y,x,x\n1,2,3\n", ["--target", "y"], "duplicate column names 'x'"),
    # Three names: a two-valued text target would be a yes/no outcome.
    ("text.csv", b"name,c\nann,red\nbo,blue\ncy,red\n", ["--target", "name"], "target 'name' is categorical, not numeric"),
    ("unk.csv", b"y,x\n1,2\n2,3\n3,1\n", ["--target", "y", "--predictors", "nope"], "column 'nope' is not in the table"),
    # x is out of order: 1, 2, 3 down the rows would be a row number, left out by the identifier rule.
    ("const.csv", b"y,x\n2,1\n2,3\n2,2\n", ["--target", "y"], "target 'y' has the same value (2)"),
    # The identifier rule leaves the only column out; the line says which and how to use it.
    ("rownum.csv", b"y,n\n2,1\n3,2\n1,3\n5,4\n", ["--target", "y"],
     "left out: 'n' (looks like an identifier: counts up by 1 from row to row, like a row number); "
     "name it in --predictors to use it"),
    ("wide.csv", b"y,a,b,c\n1,1,2,3\n2,3,1,4\n3,2,5,1\n", ["--target", "y"], "only 3 rows for 5 folds; choose at most 3 folds"),
    ("enc.csv", "y,place\n1,K\xf6ln\n".encode("cp1252"), ["--target", "y"], "not UTF-8 text"),
    ("weights.csv", b"y,x,w\n1,1,a\n2,2,b\n3,1,c\n", ["--target", "y", "--weights", "w"], "weights column 'w' is categorical"),
]


@pytest.mark.parametrize("name,content,extra,fragment", CASES, ids=[c[0] for c in CASES])
def test_fit_bad_input_exits_2_with_one_line(tmp_path, capsys, name, content, extra, fragment):
    p = tmp_path / name
    p.write_bytes(content)
    code = main(["fit", str(p), *extra])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("regbench fit: ")
    assert fragment in err
    assert "Traceback" not in err


def test_bad_option_values(tmp_path, capsys):
    p = tmp_path / "ok.csv"
    p.write_bytes(b"y,x\n1,2\n2,3\n3,1\n4,4\n")
    assert main(["fit", str(p), "--target", "y", "--l1-ratio", "1.5"]) == 2
    assert "--l1-ratio: 1.5 is outside (0, 1)" in capsys.readouterr().err
    assert main(["fit", str(p), "--target", "y", "--folds", "1"]) == 2
    assert "--folds: 1 is too few" in capsys.readouterr().err


def test_real_process_prints_no_traceback(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_bytes(b"y,x,x\n1,2,3\n")
    r = subprocess.run([sys.executable, "-m", "regbench", "fit", str(p), "--target", "y"],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2
    assert r.stderr.strip().splitlines() == [f"regbench fit: dup.csv: duplicate column names 'x'; rename them so each column has its own name"]


def test_bench_without_statsmodels_says_which_extra_to_install(capsys, monkeypatch):
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "statsmodels" else real(name, *a))
    code = main(["bench", "--quick"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and err.startswith("regbench bench: ")
    assert "pip install 'regbench[bench]'" in err and "Traceback" not in err

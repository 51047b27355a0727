"""CLI: ``regbench new``, ``inspect`` and ``report`` on the greenhouse table; damaged projects exit 2."""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys
import zipfile

import pytest

from regbench.cli import main

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"
NEW_ARGS = ["--target", "yield_kg_m2", "--weights", "plants_per_bed", "--groups", "glasshouse",
            "--predictors", "variety,day_temp_c,night_temp_c,mean_temp_c,light_hours,co2_ppm,ec_ms_cm",
            "--folds", "4", "--penalties", "20", "--bootstrap", "3"]


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "g.regbench"
    assert main(["new", str(CSV), *NEW_ARGS, "-o", str(out)]) == 0
    return out


def one_line_error(capsys, code, command):
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith(f"regbench {command}: "), err
    assert "Traceback" not in err
    return err


def test_new_writes_a_project_that_loads(project, capsys):
    from regbench.project import load_project

    s = load_project(project, compute=False)
    assert s.cache_status == "used" and s.stability is not None and s.stability.n_boot == 3
    assert s.settings.folds == 4 and s.roles.groups == "glasshouse"
    # 5 rows of the greenhouse table have an empty cell in the used columns (see test_report's CSV count).
    assert s.design.n == 571


def test_inspect_text_and_json(project, capsys):
    assert main(["inspect", str(project)]) == 0
    out = capsys.readouterr().out
    assert "hash check   ok" in out and "yield_kg_m2" in out and "cached results present" in out
    assert main(["inspect", str(project), "--json", "-"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["hash_check"] == "ok" and info["format"] == "regbench-project"
    assert info["table_rows"] == 576 and info["roles"]["weights"] == "plants_per_bed"


def test_report_writes_html(project, tmp_path, capsys):
    out = tmp_path / "r.html"
    assert main(["report", str(project), "-o", str(out)]) == 0
    html = out.read_text(encoding="utf-8")
    assert html.startswith("<!DOCTYPE html>") and "How sure are we?" in html


def test_damaged_projects_exit_2_with_one_line(project, tmp_path, capsys):
    junk = tmp_path / "junk.regbench"
    junk.write_bytes(b"not a zip at all")
    err = one_line_error(capsys, main(["report", str(junk), "-o", str(tmp_path / "x.html")]), "report")
    assert "not a regbench project" in err
    assert not (tmp_path / "x.html").exists()
    cut = tmp_path / "cut.regbench"
    cut.write_bytes(project.read_bytes()[:5000])
    one_line_error(capsys, main(["inspect", str(cut)]), "inspect")
    members = {}
    with zipfile.ZipFile(project) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    m = json.loads(members["manifest.json"])
    m["format_version"] = 99
    members["manifest.json"] = json.dumps(m).encode()
    new = tmp_path / "new.regbench"
    with zipfile.ZipFile(new, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    err = one_line_error(capsys, main(["report", str(new), "-o", str(tmp_path / "y.html")]), "report")
    assert "made by a newer regbench (format 99)" in err
    one_line_error(capsys, main(["inspect", str(tmp_path / "absent.regbench")]), "inspect")


def test_bad_bootstrap_count_exits_2(tmp_path, capsys):
    code = main(["new", str(CSV), *NEW_ARGS[:-2], "--bootstrap", "-4", "-o", str(tmp_path / "b.regbench")])
    assert "bootstrap count -4" in one_line_error(capsys, code, "new")
    assert not (tmp_path / "b.regbench").exists()


def test_damaged_project_in_a_real_process(tmp_path):
    junk = tmp_path / "junk.regbench"
    with zipfile.ZipFile(junk, "w") as zf:
        zf.writestr("manifest.json", "{\"format\": \"regbench-project\", \"format_version\": 1")
    out = subprocess.run([sys.executable, "-m", "regbench", "report", str(junk), "-o", str(tmp_path / "r.html")],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == 2
    assert out.stderr.count("\n") == 1 and "manifest.json" in out.stderr and "not valid JSON" in out.stderr
    assert "Traceback" not in out.stderr

"""Cached results in a project file: stable stored names, keyed on the engine version, stale not refused.

Checked against the format's own definition (regbench/project/FORMAT.md): the
stored type names it lists, and its rule that a cache this version cannot use
makes the project open and fit again with one line saying why.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import pathlib
import re
import zipfile

import numpy as np
import pytest

from regbench.analysis.stress import StressConfig
from regbench.cli import main
from regbench.data import Roles
from regbench.models import ENGINE_VERSION
from regbench.models.results import FitSettings
from regbench.project import load_project, save_project
from regbench.project.codec import STORED_TYPES, _class_of, stored_name
from regbench.session import Session

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"
FORMAT = (ROOT / "regbench" / "project" / "FORMAT.md").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    s = Session.from_table_file(CSV, Roles(target="yield_kg_m2", predictors=("day_temp_c", "night_temp_c",
                                                                             "mean_temp_c", "co2_ppm"),
                                           groups="glasshouse"),
                                FitSettings(folds=3, n_penalties=15))
    s.add_stress(StressConfig("co2_ppm", "noise", 1.0))
    s.set_bootstrap(3)
    s.compute()
    path = tmp_path_factory.mktemp("cache") / "c.regbench"
    save_project(s, path)
    return s, path


def _members(path) -> dict:
    with zipfile.ZipFile(path) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def _write(path, members: dict) -> None:
    m = json.loads(members["manifest.json"])
    m["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                    for n, b in members.items() if n != "manifest.json"]
    members = {**members, "manifest.json": json.dumps(m).encode()}
    with zipfile.ZipFile(path, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)


def _with_results(saved_path, tmp_path, change) -> pathlib.Path:
    members = _members(saved_path)
    doc = json.loads(members["results.json"])
    change(doc)
    members["results.json"] = json.dumps(doc).encode()
    out = tmp_path / "changed.regbench"
    _write(out, members)
    return out


def _first_node(node, stored_type):
    """The first encoded object of a stored type in a results.json tree."""
    if isinstance(node, dict):
        if node.get("$type") == stored_type:
            return node
        children = node.values()
    elif isinstance(node, list):
        children = node
    else:
        return None
    for v in children:
        hit = _first_node(v, stored_type)
        if hit is not None:
            return hit
    return None


def _stale_then_refit(path, original, why):
    s = load_project(path, compute=False)
    assert s.cache_status == "stale" and s.results is None
    assert why in s.cache_note and "\n" not in s.cache_note and "fitted again" in s.cache_note
    assert s.roles == original.roles and s.settings == original.settings and s.notes == original.notes
    s = load_project(path)  # opens and fits again
    assert s.cache_status == "stale" and s.results is not None and s.dirty
    # The refit reproduces the saved numbers: same table, settings and seed.
    np.testing.assert_allclose(s.models()["ridge"].coef, original.models()["ridge"].coef, rtol=1e-9, atol=1e-12)
    return s


def test_saved_cache_is_used_and_names_no_python_class(saved):
    original, path = saved
    doc = json.loads(_members(path)["results.json"])
    assert doc["engine_version"] == ENGINE_VERSION
    text = json.dumps(doc)
    assert "regbench." not in text and "FitResults" not in text
    assert set(re.findall(r'"\$type": "([^"]+)"', text)) <= set(STORED_TYPES)
    s = load_project(path, compute=False)
    assert s.cache_status == "used" and s.cache_note is None


def test_a_cache_missing_one_field_opens_and_fits_again(saved, tmp_path):
    original, path = saved

    def drop(doc):
        del _first_node(doc["fit"], "ols-fit")["fields"]["residual_sd"]

    _stale_then_refit(_with_results(path, tmp_path, drop), original, "residual_sd")


def test_a_cache_of_another_engine_version_opens_and_fits_again(saved, tmp_path):
    original, path = saved

    def other(doc):
        doc["engine_version"] = ENGINE_VERSION + 1

    _stale_then_refit(_with_results(path, tmp_path, other), original, f"engine version {ENGINE_VERSION + 1}")

    def none(doc):
        del doc["engine_version"]

    _stale_then_refit(_with_results(path, tmp_path, none), original, "without a version")


def test_a_cache_with_an_unknown_kind_of_result_opens_and_fits_again(saved, tmp_path):
    original, path = saved

    def unknown(doc):
        _first_node(doc["fit"], "collinearity")["$type"] = "regbench.models.results:Diagnostics"

    _stale_then_refit(_with_results(path, tmp_path, unknown), original, "does not know")

    def extra(doc):
        _first_node(doc["fit"], "linear-model")["fields"]["curvature"] = 1.0

    _stale_then_refit(_with_results(path, tmp_path, extra), original, "curvature")


def test_report_command_says_in_one_line_that_it_fits_again(saved, tmp_path, capsys):
    _, path = saved

    def other(doc):
        doc["engine_version"] = -1

    changed = _with_results(path, tmp_path, other)
    assert main(["report", str(changed), "-o", str(tmp_path / "r.html")]) == 0
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip() and "\r" not in line]
    # One line: what happened, that the same choices are fitted again, that nothing is lost.
    assert err == [f"regbench report: {changed.name}: the saved results were not used because they were "
                   f"computed by engine version -1, this is {ENGINE_VERSION}; the models are fitted again "
                   "with the same choices, and nothing in the project is lost"]


def test_a_damaged_member_is_still_refused(saved, tmp_path):
    from regbench.errors import ProjectError

    _, path = saved
    members = _members(path)
    name = next(n for n in members if n.startswith("results/"))
    out = tmp_path / "d.regbench"
    with zipfile.ZipFile(out, "w") as zf:   # bytes changed, manifest not: the file itself is damaged
        for n, b in members.items():
            zf.writestr(n, b[:-1] + bytes([b[-1] ^ 1]) if n == name else b)
    with pytest.raises(ProjectError, match="SHA-256"):
        load_project(out, compute=False)


def test_every_stored_type_is_a_result_class_and_documented():
    for name in STORED_TYPES:
        cls = _class_of(name)
        assert cls is not None and dataclasses.is_dataclass(cls), name
        assert f"`{name}`" in FORMAT, f"FORMAT.md does not list the stored type {name}"
        for f in dataclasses.fields(cls):
            if f.compare:
                assert re.search(rf"`{name}`[^\n]*\b{re.escape(stored_name(f))}\b", FORMAT), \
                    f"FORMAT.md does not list field {stored_name(f)} of {name}"


def test_results_compare_by_value_after_a_round_trip(saved):
    original, path = saved
    loaded = load_project(path, compute=False)
    # == on result objects compares arrays by value (a plain dataclass == would raise on them).
    assert loaded.results == original.results
    assert loaded.stability == original.stability
    assert loaded.agreement() == original.agreement() and loaded.structure() == original.structure()
    assert loaded.stress_results() == original.stress_results()
    ridge = original.models()["ridge"]
    moved = dataclasses.replace(ridge, coef=ridge.coef + np.where(np.arange(ridge.coef.size) == 0, 1e-9, 0.0))
    assert moved != ridge and dataclasses.replace(ridge) == ridge
    # Columns are found by name.
    c = ridge.columns[1]
    assert ridge.coef[ridge.index(c)] == ridge.by_column(ridge.coef)[c]
    with pytest.raises(KeyError, match="not a column of this result"):
        ridge.index("no such column")


def test_a_cache_on_other_columns_says_in_plain_words_that_it_fits_again(saved, tmp_path, capsys):
    """A project whose cached fit was made on other design columns (as an older version's column
    rules would give) opens and refits; the line first says what happened and that nothing is lost,
    then the stored detail (FORMAT.md: stale, never refused, one line saying why)."""
    original, path = saved

    def other_columns(doc):
        doc["fit"]["fields"]["columns"]["$tuple"][0] = "row_id"

    changed = _with_results(path, tmp_path, other_columns)
    s = _stale_then_refit(changed, original, "fit.columns")
    assert s.cache_note.startswith(f"{changed.name}: the saved results were not used because this version of "
                                   "regbench stores them differently; the models are fitted again with the same "
                                   "choices, and nothing in the project is lost (detail: ")
    assert main(["report", str(changed), "-o", str(tmp_path / "r.html")]) == 0
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip() and "\r" not in line]
    assert err == [f"regbench report: {s.cache_note}"]

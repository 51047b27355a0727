"""The .regbench project file: round trip, refusals, migration, atomic save.

Checks are against the format's own definition (FORMAT.md) and mathematical
facts: bit-equal arrays after a round trip, SHA-256 from hashlib, zip layout
from Python's zipfile, the table against pandas' own equality test.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import math
import os
import pathlib
import signal
import struct
import subprocess
import sys
import textwrap
import time
import zipfile

import numpy as np
import pandas as pd
import pytest

from regbench.analysis.stress import StressConfig
from regbench.data.design import Roles
from regbench.data.reader import table_from_frame
from regbench.errors import ProjectError
from regbench.models.results import FitSettings
from regbench.project import inspect_project, inspect_text, load_project, save_project
from regbench.project.migrate import FORMAT_VERSION, migrate_0_to_1
from regbench.session import Session

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"
ROLES = Roles(target="yield_kg_m2", predictors=("variety", "day_temp_c", "night_temp_c", "mean_temp_c", "light_hours",
                                                 "light_sum_mol_m2", "co2_ppm", "ec_ms_cm"),
              weights="plants_per_bed", groups="glasshouse")
SETTINGS = FitSettings(folds=4, seed=5, n_penalties=25, l1_ratios=(0.5, 0.9))


def same(a, b, where="value"):
    """Deep equality: arrays bit-equal with the same dtype, NaN equal to NaN."""
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        assert isinstance(a, np.ndarray) and isinstance(b, np.ndarray), where
        assert a.dtype == b.dtype and a.shape == b.shape, where
        assert a.tobytes() == b.tobytes(), f"{where}: arrays differ"
    elif dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for f in dataclasses.fields(a):
            if f.compare:
                same(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, dict):
        assert isinstance(b, dict) and list(a) == list(b), f"{where}: keys {list(a)} vs {list(b)}"
        for k in a:
            same(a[k], b[k], f"{where}[{k!r}]")
    elif isinstance(a, (tuple, list)):
        assert type(a) is type(b) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            same(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and math.isnan(a):
        assert isinstance(b, float) and math.isnan(b), where
    else:
        assert a == b, f"{where}: {a!r} != {b!r}"


def assert_same_session(a: Session, b: Session):
    pd.testing.assert_frame_equal(a.table.frame, b.table.frame, check_dtype=True, check_exact=True)
    assert dict(a.table.columns) == dict(b.table.columns)
    assert (a.table.source, a.table.notes) == (b.table.source, b.table.notes)
    assert a.roles == b.roles and a.settings == b.settings
    assert a.chosen_alpha == b.chosen_alpha and a.extra_fits == b.extra_fits
    assert a.stress_configs == b.stress_configs and a.bootstrap == b.bootstrap
    assert a.notes == b.notes and a.view_state == b.view_state
    same(a.design, b.design, "design")


@pytest.fixture(scope="module")
def session():
    s = Session.from_table_file(CSV, ROLES, SETTINGS)
    s.add_stress(StressConfig("day_temp_c", "rescale", 1.8))
    s.add_stress(StressConfig("co2_ppm", "shuffle", seed=2))
    s.set_bootstrap(6)
    s.set_notes("Ask the growers about <GH03> & the CO₂ logger.\nSecond line.")
    s.set_view_state("panel", "stress")
    s.set_view_state("splitter", [300, 700])
    s.compute()
    s.set_alpha("lasso", 0.004)
    s.add_extra_fit("ridge", 2.5)
    return s


@pytest.fixture(scope="module")
def saved(session, tmp_path_factory):
    path = tmp_path_factory.mktemp("proj") / "g.regbench"
    save_project(session, path)
    return path


def read_members(path) -> dict:
    with zipfile.ZipFile(path) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def write_members(path, members: dict, fix_manifest: bool = True) -> None:
    """Write members as a zip; optionally refresh the manifest's sizes and hashes."""
    members = dict(members)
    if fix_manifest and "manifest.json" in members:
        m = json.loads(members["manifest.json"])
        m["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                        for n, b in members.items() if n != "manifest.json"]
        if "table.parquet" in members:
            m["table_sha256"] = hashlib.sha256(members["table.parquet"]).hexdigest()
        members["manifest.json"] = json.dumps(m).encode()
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for n, b in members.items():
            zf.writestr(n, b)


def test_round_trip_equal_session_and_bit_equal_results(session, saved):
    loaded = load_project(saved, compute=False)
    assert loaded.cache_status == "used"
    assert_same_session(session, loaded)
    same(session.results, loaded.results, "results")
    same(session.stability, loaded.stability, "stability")
    assert loaded.stability_alphas == session.stability_alphas
    for part in ("models", "heldout", "agreement", "structure", "stress_results", "stress_sweeps"):
        same(getattr(session, part)(), getattr(loaded, part)(), part)
    assert not loaded.dirty and loaded.path == os.fspath(saved)
    # The engine cache (FitResults.gram) is rebuilt, so a new α gives the same model bit for bit.
    a, b = session.models()["lasso"], loaded.models()["lasso"]
    same(a, b, "lasso at the user's α")
    from regbench.models.engine import model_at

    same(model_at(session.design, session.results, "elastic_net", 0.01),
         model_at(loaded.design, loaded.results, "elastic_net", 0.01), "elastic net at a new α")
    # Saving the loaded session again gives the same members (apart from the manifest's times).
    again = saved.parent / "again.regbench"
    save_project(loaded, again)
    m1, m2 = read_members(saved), read_members(again)
    assert set(m1) == set(m2)
    for name in m1:
        if name != "manifest.json":
            assert m1[name] == m2[name], name


def test_manifest_records_every_member_with_sha256(saved):
    members = read_members(saved)
    m = json.loads(members["manifest.json"])
    assert m["format"] == "regbench-project" and m["format_version"] == FORMAT_VERSION
    listed = {e["name"]: e for e in m["members"]}
    assert set(listed) == set(members) - {"manifest.json"}
    for name, data in members.items():
        if name != "manifest.json":
            assert listed[name]["size"] == len(data)
            assert listed[name]["sha256"] == hashlib.sha256(data).hexdigest()  # hashlib as the reference
    assert m["table_sha256"] == hashlib.sha256(members["table.parquet"]).hexdigest()
    for name, data in members.items():
        if name.endswith(".npy"):
            np.load(io.BytesIO(data), allow_pickle=False)  # every array reads without pickle


def test_table_reloads_identically_with_missing_values(tmp_path):
    rng = np.random.default_rng(0)
    n = 20
    x = list(rng.normal(size=n))
    x[1], x[3], x[7] = float("inf"), -0.0, "oops"
    y = list(rng.normal(size=n))
    y[2] = None
    frame = pd.DataFrame({
        "y": y,
        "x": x,
        "flag": ["yes", "no", "yes", None] + ["no", "yes"] * 8,
        "site": ["a", None] + ["b", "c", "a"] * 6,
        "code": [1, 2] * 10,
        "blank": [None] * n,
    })
    table = table_from_frame(frame, "hand-made")
    s = Session.from_table(table, Roles(target="y", predictors=("x", "flag", "site", "code", "blank"),
                                        categorical=("code",)))
    s.set_notes("ünïcode ✓")
    path = tmp_path / "t.regbench"
    save_project(s, path)
    t = load_project(path, compute=False)
    assert t.results is None and t.cache_status == "none"
    assert_same_session(s, t)
    assert t.table.frame["site"].isna().tolist() == [False, True] + [False] * 18
    assert np.signbit(t.table.frame["x"].to_numpy()[3])  # -0.0 kept
    assert t.table.columns["x"].bad_cells == ((8, "oops"),)
    assert t.table.columns["blank"].kind == "empty" and t.table.columns["flag"].kind == "boolean"
    assert [e.row for e in t.design.excluded] == [e.row for e in s.design.excluded]


def test_cache_is_ignored_when_settings_change(saved, tmp_path):
    members = read_members(saved)
    doc = json.loads(members["session.json"])
    doc["settings"]["folds"] = 3
    doc["bootstrap"] = 0
    members["session.json"] = json.dumps(doc).encode()
    path = tmp_path / "changed.regbench"
    write_members(path, members)
    s = load_project(path, compute=False)
    assert s.cache_status == "stale" and s.results is None
    s = load_project(path, compute=True)
    assert s.results is not None and s.results.settings.folds == 3
    assert int(s.results.fold_ids.max()) == 2


def test_too_new_format_is_refused_with_the_message(saved, tmp_path):
    members = read_members(saved)
    m = json.loads(members["manifest.json"])
    m["format_version"] = FORMAT_VERSION + 4
    members["manifest.json"] = json.dumps(m).encode()
    path = tmp_path / "new.regbench"
    write_members(path, members, fix_manifest=False)
    with pytest.raises(ProjectError) as exc:
        load_project(path)
    assert (f"made by a newer regbench (format {FORMAT_VERSION + 4}); this version reads up to {FORMAT_VERSION}; "
            "update regbench") in str(exc.value)


def test_migration_from_format_0(session, saved, tmp_path):
    members = read_members(saved)
    doc = json.loads(members["session.json"])
    # The format 0 layout (see regbench/project/migrate.py): flat roles, fit_settings, alphas, stress_tests.
    v0 = {**doc["roles"], "fit_settings": doc["settings"], "alphas": doc["chosen_alpha"],
          "stress_tests": doc["stress"], "bootstrap": doc["bootstrap"], "notes": doc["notes"], "table": doc["table"]}
    assert migrate_0_to_1(v0)["roles"] == doc["roles"]
    old = {"manifest.json": members["manifest.json"], "table.parquet": members["table.parquet"],
           "session.json": json.dumps(v0).encode()}
    m = json.loads(old["manifest.json"])
    m["format_version"] = 0
    old["manifest.json"] = json.dumps(m).encode()
    path = tmp_path / "old.regbench"
    write_members(path, old)
    s = load_project(path, compute=False)
    assert s.roles == session.roles and s.settings == session.settings
    assert s.chosen_alpha == session.chosen_alpha and s.stress_configs == session.stress_configs
    assert s.extra_fits == [] and s.view_state == {} and s.notes == session.notes
    assert s.dirty  # migrated: saving writes the current format
    info = inspect_project(path)
    assert info["format_version"] == 0 and info["roles"] == doc["roles"]


def _refused(path, *needles):
    with pytest.raises(ProjectError) as exc:
        load_project(path, compute=False)
    for n in needles:
        assert n in str(exc.value), str(exc.value)
    return str(exc.value)


def test_refuses_not_a_zip_and_foreign_zip(tmp_path):
    p = tmp_path / "a.regbench"
    p.write_bytes(b"glasshouse,yield\nGH01,1.0\n")
    _refused(p, "not a regbench project", "zip")
    with zipfile.ZipFile(p, "w") as zf:
        zf.writestr("word/document.xml", "<x/>")
    _refused(p, "without manifest.json")
    with zipfile.ZipFile(p, "w") as zf:
        zf.writestr("manifest.json", json.dumps({"format": "someone-else", "format_version": 1}))
    _refused(p, "manifest.json", "field format", "not made by regbench")
    _refused(tmp_path / "missing.regbench", "no such file")


def test_refuses_missing_members_bad_json_and_hash_mismatch(saved, tmp_path):
    members = read_members(saved)
    p = tmp_path / "b.regbench"
    write_members(p, {k: v for k, v in members.items() if k != "session.json"}, fix_manifest=False)
    _refused(p, "session.json", "missing")
    write_members(p, {k: v for k, v in members.items() if k != "table.parquet"}, fix_manifest=True)
    _refused(p, "table.parquet")
    write_members(p, {**members, "session.json": b"{not json"}, fix_manifest=True)
    _refused(p, "session.json", "not valid JSON")
    tampered = bytearray(members["table.parquet"])
    tampered[len(tampered) // 2] ^= 0xFF
    write_members(p, {**members, "table.parquet": bytes(tampered)}, fix_manifest=False)
    _refused(p, "table.parquet", "SHA-256")
    write_members(p, {**members, "extra.bin": b"x"}, fix_manifest=False)
    _refused(p, "extra.bin", "not listed")


@pytest.mark.parametrize("name", ["/etc/passwd", "../outside.txt", "results/../../x.npy", "C:/x.npy",
                                  "results\\a.npy"])
def test_refuses_unsafe_member_paths(saved, tmp_path, name):
    members = read_members(saved)
    p = tmp_path / "c.regbench"
    with zipfile.ZipFile(p, "w") as zf:
        for n, b in members.items():
            zf.writestr(n, b)
        info = zipfile.ZipInfo("placeholder")
        info.filename = name  # zipfile would otherwise tidy the name
        zf.writestr(info, b"data")
    _refused(p, "unsafe path")
    assert not (tmp_path.parent / "outside.txt").exists()


def test_refuses_duplicate_members(saved, tmp_path):
    members = read_members(saved)
    p = tmp_path / "d.regbench"
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # zipfile warns about the duplicate we write on purpose
        with zipfile.ZipFile(p, "w") as zf:
            for n, b in members.items():
                zf.writestr(n, b)
            zf.writestr("session.json", b"{}")
    _refused(p, "appears twice")


def test_refuses_oversized_and_bomb_members(saved, tmp_path):
    members = read_members(saved)
    p = tmp_path / "e.regbench"
    # A zip bomb: 60 MB of zeros compress about a thousandfold.
    with zipfile.ZipFile(p, "w", zipfile.ZIP_DEFLATED) as zf:
        for n, b in members.items():
            zf.writestr(n, b)
        zf.writestr("results/a99999.npy", bytes(60 * 1024 * 1024))
    _refused(p, "zip bomb")
    # A member whose central-directory entry declares more than 2 GiB.
    write_members(p, members, fix_manifest=False)
    raw = bytearray(p.read_bytes())
    cd = raw.find(b"PK\x01\x02")  # first central directory header (zip spec: APPNOTE 4.3.12)
    struct.pack_into("<I", raw, cd + 24, 0x90000000)  # uncompressed size field
    p.write_bytes(bytes(raw))
    _refused(p, "more than 2 GiB")


def test_refuses_columns_not_in_the_table(saved, tmp_path):
    members = read_members(saved)
    doc = json.loads(members["session.json"])
    doc["roles"]["predictors"][1] = "soil_ph"
    p = tmp_path / "f.regbench"
    write_members(p, {**members, "session.json": json.dumps(doc).encode()})
    msg = _refused(p, "session.json", "roles.predictors[1]", "soil_ph")
    assert "not a column of the table" in msg
    doc = json.loads(members["session.json"])
    doc["table"]["columns"][0]["kind"] = "date"
    write_members(p, {**members, "session.json": json.dumps(doc).encode()})
    _refused(p, "table.columns[0].kind", "date")
    doc = json.loads(members["session.json"])
    doc["macro"] = "import os"
    write_members(p, {**members, "session.json": json.dumps(doc).encode()})
    _refused(p, "session.json: field macro is not part of this format")
    doc = json.loads(members["session.json"])
    doc["settings"]["folds"] = "five"
    write_members(p, {**members, "session.json": json.dumps(doc).encode()})
    _refused(p, "settings.folds")


def test_inspect_reports_hashes_and_contents(saved, tmp_path):
    info = inspect_project(saved)
    assert info["hash_check"] == "ok" and info["cached_results"]
    assert info["table_rows"] == 576 and info["table_columns"] == 17
    assert info["roles"]["target"] == "yield_kg_m2"
    text = inspect_text(info)
    assert "hash check   ok" in text and "yield_kg_m2" in text
    members = read_members(saved)
    bad = bytearray(members["session.json"])
    bad[5] ^= 0x20
    p = tmp_path / "g.regbench"
    write_members(p, {**members, "session.json": bytes(bad)}, fix_manifest=False)
    info = inspect_project(p)
    assert info["hash_check"] == "failed" and info["member_checks"]["session.json"].startswith("failed")
    assert "hash check   failed" in inspect_text(info)


def test_save_to_missing_folder_is_a_project_error(session, tmp_path):
    with pytest.raises(ProjectError, match="does not exist"):
        save_project(session, tmp_path / "no" / "such" / "x.regbench")


KILL_SCRIPT = textwrap.dedent("""
    import sys
    import numpy as np, pandas as pd
    from regbench.data.table import ColumnInfo, Table
    from regbench.data.design import Roles
    from regbench.session import Session
    from regbench.project import save_project
    rng = np.random.default_rng(1)
    n, p = 700_000, 10
    cols = {f"x{j}": rng.normal(size=n) for j in range(p)}
    cols["y"] = rng.normal(size=n)
    frame = pd.DataFrame(cols)
    info = {c: ColumnInfo(c, "numeric", 0, n) for c in frame.columns}
    s = Session.from_table(Table(frame, info, "big"), Roles(target="y"))
    s.set_notes("new version")
    print("saving", flush=True)
    save_project(s, sys.argv[1])
    print("saved", flush=True)
""")


def test_kill_during_save_keeps_the_old_file(session, tmp_path):
    path = tmp_path / "keep.regbench"
    save_project(session, path)
    before = path.read_bytes()
    proc = subprocess.Popen([sys.executable, "-c", KILL_SCRIPT, str(path)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "saving"
    deadline = time.time() + 60
    killed_mid_write = False
    while time.time() < deadline and proc.poll() is None:
        tmps = [f for f in os.listdir(tmp_path) if f.startswith(".keep.regbench.") and f.endswith(".tmp")]
        if tmps and os.path.getsize(tmp_path / tmps[0]) > 0:
            os.kill(proc.pid, signal.SIGKILL)
            killed_mid_write = True
            break
        time.sleep(0.001)
    proc.wait(timeout=30)
    assert killed_mid_write, "the save finished before it could be interrupted"
    assert proc.returncode == -signal.SIGKILL
    assert path.read_bytes() == before  # the old file is untouched
    s = load_project(path, compute=False)
    assert s.notes == session.notes and s.cache_status == "used"


def test_committed_sample_project_matches_its_table():
    from regbench.data.reader import read_table
    from regbench.demo import GREENHOUSE_ROLES
    from regbench.session import table_fingerprint

    sample = ROOT / "sample_projects" / "greenhouse.regbench"
    s = load_project(sample, compute=False)
    assert s.cache_status == "used" and s.stability is not None and s.stability.n_boot == 200
    assert s.roles == Roles.from_dict(GREENHOUSE_ROLES)
    assert [(c.column, c.kind) for c in s.stress_configs] == [
        ("co2_ppm", "shuffle"), ("light_sum_mol_m2", "noise"), ("day_temp_c", "rescale")]
    # The project's table is the CSV beside it, value for value.
    assert table_fingerprint(read_table(ROOT / "sample_projects" / "greenhouse.csv")) == s.table_hash
    assert [x.column for x in s.results.ols.set_aside] == ["mean_temp_c", "day_temp_f"]


def test_settings_of_other_number_types_keep_the_cache(tmp_path):
    s = Session.from_table_file(CSV, ROLES, FitSettings(folds=np.int64(3), alpha=1, n_penalties=10))
    s.set_bootstrap(0)
    s.compute()
    path = tmp_path / "n.regbench"
    save_project(s, path)
    t = load_project(path, compute=False)
    assert t.cache_status == "used" and t.settings == s.settings and type(t.settings.folds) is int

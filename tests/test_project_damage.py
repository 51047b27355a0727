"""Damaged projects that once passed the loader and failed later: each is now refused at load
with one line naming the member and field, or shown by `inspect` without failing."""

from __future__ import annotations

import hashlib
import io
import json
import re
import pathlib
import zipfile

import pytest

from regbench.cli import main
from regbench.errors import ProjectError
from regbench.project import inspect_project, inspect_text, load_project

ROOT = pathlib.Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_projects" / "greenhouse.regbench"


def members() -> dict:
    with zipfile.ZipFile(SAMPLE) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def pack(tmp_path, m: dict, name="d.regbench") -> pathlib.Path:
    man = json.loads(m["manifest.json"])
    man["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                      for n, b in m.items() if n != "manifest.json"]
    man["table_sha256"] = hashlib.sha256(m["table.parquet"]).hexdigest()
    m = dict(m, **{"manifest.json": json.dumps(man).encode()})
    path = tmp_path / name
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for n, b in m.items():
            zf.writestr(n, b)
    return path


def edited(doc_bytes: bytes, edit) -> bytes:
    doc = json.loads(doc_bytes)
    edit(doc)
    return json.dumps(doc).encode()


@pytest.mark.parametrize("literal,fragment", [
    ("1e999", "is out of range (it would be read as infinity)"),
    ("-1e999", "is out of range (it would be read as infinity)"),
    ("1" + "0" * 40, "has 41 digits, more than a project holds"),
])
def test_numbers_json_cannot_hold_are_refused_by_name(tmp_path, literal, fragment):
    m = members()
    m["session.json"] = edited(m["session.json"], lambda d: d["settings"].__setitem__("seed", "@@")).replace(
        b'"@@"', literal.encode())
    with pytest.raises(ProjectError) as err:
        load_project(pack(tmp_path, m), compute=False)
    assert "member 'session.json' is not valid JSON" in str(err.value) and fragment in str(err.value)
    assert "\n" not in str(err.value)


def test_penalty_ratio_that_underflows_is_refused(tmp_path):
    m = members()
    m["session.json"] = edited(m["session.json"], lambda d: d["settings"].__setitem__("penalty_ratio", 5e-324))
    with pytest.raises(ProjectError, match=r"settings\.penalty_ratio .*is outside \[1e-12, 1\)"):
        load_project(pack(tmp_path, m))


def test_stability_tables_with_mismatched_models_make_the_cache_stale(tmp_path):
    m = members()

    def rename_one(d):
        d["stability"]["fields"]["coef_mean"]["$dict"][0][0] = "no_such_model"

    m["results.json"] = edited(m["results.json"], rename_one)
    # Cached results are only a cache (FORMAT.md): the project opens without them and says why in one line.
    s = load_project(pack(tmp_path, m), compute=False)
    assert s.cache_status == "stale" and s.results is None
    assert re.search(r"field stability\.coef_mean must hold exactly the models", s.cache_note), s.cache_note


def test_parquet_that_would_expand_far_beyond_its_rows_is_refused_before_reading(tmp_path):
    """A decompression bomb (scaled down): each text cell 128 KiB long, compressing to almost nothing;
    the same check refuses a 2 GB table in a 1 MB file."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    m = members()
    doc = json.loads(m["session.json"])
    cols = doc["table"]["columns"]
    rows = doc["table"]["rows"]
    big = "a" * (128 * 1024)
    arrays = []
    for c in cols:
        if c["kind"] == "categorical":
            arrays.append(pa.array([big] * rows, type=pa.string()))
        else:
            arrays.append(pa.array([1.0] * rows, type=pa.float64()))
    buf = io.BytesIO()
    pq.write_table(pa.Table.from_arrays(arrays, names=[c["name"] for c in cols]), buf, compression="zstd",
                   use_dictionary=False)
    m["table.parquet"] = buf.getvalue()
    assert len(m["table.parquet"]) < 1024 * 1024  # small on disk, many times larger once read
    with pytest.raises(ProjectError, match=r"member 'table.parquet' would decompress to [\d,]+ bytes, far more than "
                                           rf"{rows} rows × {len(cols)} columns need"):
        load_project(pack(tmp_path, m), compute=False)


def test_parquet_row_count_checked_against_session_before_reading(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    m = members()
    buf = io.BytesIO()
    pq.write_table(pa.table({"x": pa.array([0.0] * 100_000)}), buf)
    m["table.parquet"] = buf.getvalue()
    with pytest.raises(ProjectError, match=r"table\.rows says 576 but table\.parquet declares 100000 rows"):
        load_project(pack(tmp_path, m), compute=False)


@pytest.mark.parametrize("field,value", [("roles", ["not", "an", "object"]), ("settings", "text"),
                                         ("roles", {"target": 5, "predictors": "x\ny"}),
                                         ("stress", {"a": 1}), ("bootstrap", [1])])
def test_inspect_text_shows_damaged_session_fields(tmp_path, capsys, field, value):
    m = members()
    m["session.json"] = edited(m["session.json"], lambda d: d.__setitem__(field, value))
    path = pack(tmp_path, m)
    text = inspect_text(inspect_project(path))
    assert "hash check   ok" in text
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert out.startswith("project ") and "Traceback" not in out
    # Each line of the listing is one line: a newline inside a field is shown as \n.
    assert all(not line.startswith("y") for line in out.splitlines())


def test_inspect_on_a_damaged_file_exits_2_with_one_line(tmp_path, capsys):
    p = tmp_path / "cut.regbench"
    p.write_bytes(SAMPLE.read_bytes()[:5000])
    assert main(["inspect", str(p)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("regbench inspect: cut.regbench: ")


@pytest.mark.parametrize("change,fragment", [
    ("swap", r"columns\[0\]\.name is 'glasshouse' but table\.parquet has 'bed' there"),
    ("twice", r"table\.columns names a column of table\.parquet twice"),
])
def test_parquet_columns_that_disagree_with_the_session_are_refused_by_name(tmp_path, change, fragment):
    """The stored table is read a group of columns at a time; its names are still checked one by one
    against session.json, and a name the Parquet file holds twice is refused before any is read."""
    import pyarrow.parquet as pq

    m = members()
    tab = pq.read_table(io.BytesIO(m["table.parquet"]))
    names = list(tab.column_names)
    assert names[:2] == ["glasshouse", "bed"]
    names[:2] = [names[1], names[0]] if change == "swap" else [names[1], names[1]]
    buf = io.BytesIO()
    pq.write_table(tab.rename_columns(names), buf)
    m["table.parquet"] = buf.getvalue()
    with pytest.raises(ProjectError, match=fragment) as err:
        load_project(pack(tmp_path, m), compute=False)
    assert "\n" not in str(err.value)

"""Damaged project files: every mutation loads cleanly or raises ProjectError, nothing else.

Hypothesis mutates the bytes of a valid project (flipped bytes, truncation),
removes members, and retypes or replaces JSON fields in manifest.json,
session.json and results.json — with the manifest's hashes refreshed, so the
field validation itself is exercised and not only the SHA-256 check.

Cases run: ``MAX_EXAMPLES`` per hypothesis test below (4 tests, 4 × 150 = 600 mutated files
per run), then a seeded sweep of ``SWEEP`` = 2000 mutations (numbers that overflow or underflow,
retyped fields, flipped bytes, truncation, missing members, a pickle payload in an array member, a
table whose Parquet footer disagrees with session.json); the counts are printed.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import pathlib
import zipfile

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from regbench.analysis.stress import StressConfig
from regbench.data.design import Roles
from regbench.errors import ProjectError
from regbench.models.results import FitSettings
from regbench.project import inspect_project, load_project, save_project
from regbench.report import report_html
from regbench.session import Session

ROOT = pathlib.Path(__file__).resolve().parents[1]
MAX_EXAMPLES = 150
RUNS = {"count": 0, "loaded": 0}


@pytest.fixture(scope="module")
def project_bytes(tmp_path_factory):
    from regbench.data.reader import read_table, table_from_frame

    full = read_table(ROOT / "sample_projects" / "greenhouse.csv")
    # A small project keeps each load fast: the first 288 rows (four glasshouses).
    table = table_from_frame(full.frame.iloc[:288].reset_index(drop=True), "greenhouse.csv, first 288 rows")
    s = Session.from_table(table, Roles(target="yield_kg_m2", predictors=("variety", "day_temp_c", "night_temp_c",
                                                                          "mean_temp_c", "co2_ppm", "ec_ms_cm"),
                                        weights="plants_per_bed", groups="glasshouse"),
                           FitSettings(folds=3, n_penalties=12))
    s.add_stress(StressConfig("co2_ppm", "noise", 1.0))
    s.set_bootstrap(3)
    s.compute()
    path = tmp_path_factory.mktemp("fuzz") / "base.regbench"
    save_project(s, path)
    # The unmutated file must load with its cache, or every case below would be refused for nothing.
    base = load_project(path, compute=False)
    assert base.cache_status == "used" and base.stability is not None and base.stress_results()
    return path.read_bytes()


def members_of(data: bytes) -> dict:
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        return {i.filename: zf.read(i) for i in zf.infolist()}


def pack(members: dict, fix: bool) -> bytes:
    members = dict(members)
    if fix and "manifest.json" in members:
        try:
            m = json.loads(members["manifest.json"])
            m["members"] = [{"name": n, "size": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                            for n, b in members.items() if n != "manifest.json"]
            if "table.parquet" in members:
                m["table_sha256"] = hashlib.sha256(members["table.parquet"]).hexdigest()
            members["manifest.json"] = json.dumps(m).encode()
        except (ValueError, TypeError, AttributeError):
            pass
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    return buf.getvalue()


def check_load(tmp_path, data: bytes) -> str:
    path = tmp_path / "case.regbench"
    path.write_bytes(data)
    RUNS["count"] += 1
    outcome = "loaded"
    try:
        s = load_project(path, compute=False)
        # A loaded session must be usable: its models, comparisons and report come out.
        if s.results is not None:
            s.models()
            s.agreement()
        report_html(s)
    except ProjectError:
        outcome = "refused"
    RUNS["loaded"] += outcome == "loaded"
    try:
        inspect_project(path)
    except ProjectError:
        pass
    return outcome


def json_paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from json_paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from json_paths(v, prefix + (i,))


def replace_at(node, path, value):
    if not path:
        return value
    node = node.copy() if isinstance(node, (dict, list)) else node
    node[path[0]] = replace_at(node[path[0]], path[1:], value)
    return node


JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-10**12, 10**12) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=12) | st.sampled_from(["", "nan", "ols", "ridge", "day_temp_c", "categorical", "$array"])
    # Tagged nodes of the result encoding, so the decoder's own checks are reached.
    | st.sampled_from([{"$array": "results/a00001.npy"}, {"$tuple": []}, {"$tuple": [1, "x"]}, {"$float": "nan"},
                       {"$dict": []}, {"$dict": [[{"$tuple": []}, 1]]}, {"$type": "linear-model",
                                                                     "fields": {}}]),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=6,
)

COMMON = dict(max_examples=MAX_EXAMPLES, deadline=None,
              suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@settings(**COMMON)
@given(flips=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(1, 255)), min_size=1, max_size=8))
def test_flipped_bytes(project_bytes, tmp_path, flips):
    data = bytearray(project_bytes)
    for where, xor in flips:
        data[int(where * len(data))] ^= xor
    check_load(tmp_path, bytes(data))


@settings(**COMMON)
@given(cut=st.floats(0, 1, exclude_max=True))
def test_truncated(project_bytes, tmp_path, cut):
    assert check_load(tmp_path, project_bytes[: int(cut * len(project_bytes))]) == "refused"


@settings(**COMMON)
@given(data=st.data(), fix=st.booleans())
def test_removed_members(project_bytes, tmp_path, data, fix):
    members = members_of(project_bytes)
    names = sorted(members)
    drop = data.draw(st.sets(st.sampled_from(names), min_size=1, max_size=4))
    outcome = check_load(tmp_path, pack({k: v for k, v in members.items() if k not in drop}, fix))
    if drop & {"manifest.json", "table.parquet", "session.json"} or not fix:
        assert outcome == "refused"


@settings(**COMMON)
@given(data=st.data(), fix=st.booleans())
def test_retyped_json_fields(project_bytes, tmp_path, data, fix):
    members = members_of(project_bytes)
    name = data.draw(st.sampled_from(["manifest.json", "session.json", "results.json"]))
    doc = json.loads(members[name])
    paths = list(json_paths(doc))
    for _ in range(data.draw(st.integers(1, 3))):
        path = data.draw(st.sampled_from(paths))
        doc = replace_at(doc, path, data.draw(JSON_VALUES))
        paths = list(json_paths(doc))
    members[name] = json.dumps(doc).encode()
    check_load(tmp_path, pack(members, fix))


def test_zz_report_case_count():
    """Print how many mutated files the fuzz tests above loaded (run after them in file order)."""
    print(f"project fuzz: {RUNS['count']} mutated project files, {RUNS['loaded']} loaded, "
          f"{RUNS['count'] - RUNS['loaded']} refused with ProjectError, no other exception")
    assert RUNS["count"] >= 4 * MAX_EXAMPLES or RUNS["count"] == 0
    if RUNS["count"]:
        assert RUNS["loaded"] > 0  # some mutations are harmless (notes, view state): not everything is refused


# -- a seeded sweep of a few thousand mutations ------------------------------------------------
#
# Hypothesis above explores; this sweep is the same every run (seeded), cheap per case (a small
# project, loads without the report except every 50th), and checks the four promises together:
# no exception but ProjectError, every refusal one line, memory bounded, nothing executed.

SWEEP = 2000
#: Values that broke loaders before: huge and tiny numbers, wrong types, overflowing literals.
NASTY = [10**40, -10**40, 2**63, 2**64, -1, 0, 5e-324, 1e-300, 1e308, -1e308, 0.5, 3, True, None, "", "x",
         [], {}, "1e999", "-1e999", "9" * 30]


@pytest.fixture(scope="module")
def small_project(tmp_path_factory):
    from regbench.data.reader import read_table, table_from_frame

    full = read_table(ROOT / "sample_projects" / "greenhouse.csv")
    table = table_from_frame(full.frame.iloc[:216].reset_index(drop=True), "greenhouse.csv, first 216 rows")
    s = Session.from_table(table, Roles(target="yield_kg_m2", predictors=("variety", "day_temp_c", "mean_temp_c",
                                                                          "night_temp_c", "co2_ppm"),
                                        groups="glasshouse"), FitSettings(folds=3, n_penalties=6))
    s.add_stress(StressConfig("co2_ppm", "noise", 1.0))
    s.set_bootstrap(2)
    s.compute()
    path = tmp_path_factory.mktemp("sweep") / "small.regbench"
    save_project(s, path)
    assert load_project(path, compute=False).cache_status == "used"
    return path.read_bytes()


def _mutate(rng, members: dict) -> bytes:
    """One seeded mutation of the project's members (hashes refreshed unless the bytes are flipped)."""
    kind = rng.choice(["number", "number", "number", "retype", "flip", "truncate", "drop", "pickle", "parquet"])
    members = dict(members)
    if kind in ("number", "retype"):
        name = rng.choice(["session.json", "results.json", "manifest.json"])
        doc = json.loads(members[name])
        paths = [p for p in json_paths(doc) if p]
        if kind == "number":
            numeric = [p for p in paths if isinstance(_at(doc, p), (int, float))]
            paths = numeric or paths
        path = rng.choice(paths)
        value = rng.choice(NASTY)
        literal = None
        if isinstance(value, str) and (value.endswith("e999") or value.isdigit()):
            literal, value = value, "@@literal@@"
        text = json.dumps(replace_at(doc, path, value))
        if literal is not None:
            text = text.replace('"@@literal@@"', literal)
        members[name] = text.encode()
        return pack(members, True)
    if kind == "drop":
        victim = rng.choice(sorted(members))
        members.pop(victim)
        return pack(members, rng.random() < 0.5)
    if kind == "pickle":
        # An object array whose unpickling would create a file: it must be refused, never loaded.
        import numpy as np

        class Boom:
            def __reduce__(self):
                return (open, (str(SENTINEL), "w"))

        arr = np.array([Boom()], dtype=object)
        buf = io.BytesIO()
        np.lib.format.write_array(buf, arr, allow_pickle=True)
        victim = rng.choice([n for n in sorted(members) if n.startswith("results/")])
        members[victim] = buf.getvalue()
        return pack(members, True)
    if kind == "parquet":
        # A table whose footer disagrees with session.json, or a row-count lie.
        import pyarrow as pa
        import pyarrow.parquet as pq

        n = rng.choice([0, 1, 215, 217, 10_000])
        t = pa.table({"x": pa.array([1.0] * n)})
        buf = io.BytesIO()
        pq.write_table(t, buf)
        members["table.parquet"] = buf.getvalue()
        return pack(members, True)
    data = bytearray(pack(members, False))
    if kind == "flip":
        for _ in range(rng.randint(1, 6)):
            data[rng.randrange(len(data))] ^= rng.randint(1, 255)
        return bytes(data)
    return bytes(data[: rng.randrange(len(data))])


def _at(doc, path):
    for k in path:
        doc = doc[k]
    return doc


SENTINEL = pathlib.Path("/tmp") / f"regbench-fuzz-executed-{os.getpid()}"


def test_seeded_sweep(small_project, tmp_path):
    import random
    import resource

    from regbench.project import inspect_text

    rng = random.Random(20261203)
    members = members_of(small_project)
    path = tmp_path / "case.regbench"
    start_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    outcomes = {"loaded": 0, "refused": 0, "stale": 0}
    for k in range(SWEEP):
        path.write_bytes(_mutate(rng, members))
        try:
            s = load_project(path, compute=False)
            if s.results is not None:
                s.models()
            if k % 50 == 0:
                report_html(s)
            outcomes["loaded"] += 1
            if s.cache_status == "stale":  # a damaged cache is set aside with one line, the project opens
                assert s.cache_note and "\n" not in s.cache_note, s.cache_note
                outcomes["stale"] += 1
        except ProjectError as exc:
            text = str(exc)
            assert "\n" not in text and "\r" not in text and text.startswith("case.regbench"), text
            outcomes["refused"] += 1
        if k % 20 == 0:
            try:
                text = inspect_text(inspect_project(path))
                assert "Traceback" not in text
            except ProjectError as exc:
                assert "\n" not in str(exc)
    grown = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - start_rss
    assert not SENTINEL.exists(), "a project file executed code"
    assert grown < 1_000_000, f"peak memory grew by {grown} KiB during the sweep"
    # Every mutation is caught: refused with one line, or (in the cache) set aside as stale with one line.
    assert outcomes["loaded"] > 0 and outcomes["refused"] + outcomes["stale"] > SWEEP // 2
    print(f"project sweep: {SWEEP} seeded mutations, {outcomes['loaded']} loaded "
          f"({outcomes['stale']} with a stale cache), {outcomes['refused']} refused "
          f"with one line, peak memory +{grown // 1024} MiB, nothing executed")

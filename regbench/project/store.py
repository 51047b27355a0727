"""Saving and loading ``.regbench`` project files (see FORMAT.md).

Loading validates every member and field before anything is built and raises
:class:`ProjectError` naming the member, the field and what to do.  Nothing
from the file is executed: JSON is parsed as data, arrays are read with
``allow_pickle=False``, the table through pyarrow's Parquet reader.
"""

from __future__ import annotations

import functools
import hashlib
import io
import json
import math
import mmap
import os
import posixpath
import stat
import struct
import zipfile
from datetime import datetime, timezone

import numpy as np

from typing import Optional

from regbench import __version__
from regbench.analysis.stress import STRESS_KINDS
from regbench.batches import run_pass
from regbench.data.design import Roles, build_design
from regbench.data.reader import column_groups
from regbench.data.table import COLUMN_KINDS, ColumnInfo, Table, column_block, frame_of
from regbench.errors import DataError, ProjectError
from regbench.models import ENGINE_VERSION, spec
from regbench.models.gram import per_fold
from regbench.models.results import FitSettings
from regbench.models.spec import RowSource
from regbench.project.atomic import atomic_writer
from regbench.project.checks import check_derived, check_fit, check_stability, guarded
from regbench.project.codec import Decoder, Encoder, StaleCache, Unstorable
from regbench.project.migrate import FORMAT_VERSION, migrate
from regbench.session import (BOOTSTRAP, Session, SessionState, check_stress, penalized_names, stress_from_dict,
                              stress_to_dict)

FORMAT_NAME = "regbench-project"
MANIFEST = "manifest.json"
TABLE = "table.parquet"
SESSION = "session.json"
RESULTS = "results.json"
RESULTS_DIR = "results/"

MAX_MEMBER = 2 * 1024**3  # declared uncompressed size of any member
BOMB_RATIO = 200  # uncompressed / compressed ...
BOMB_SIZE = 50 * 1024**2  # ... above this size is refused
MAX_MEMBERS = 10_000
JSON_LIMITS = {MANIFEST: 4 * 1024**2, SESSION: 256 * 1024**2, RESULTS: 512 * 1024**2}


def _now() -> str:
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def _sha(b: bytes) -> str:
    return hashlib.sha256(b).hexdigest()


def _dumps(obj) -> bytes:
    return json.dumps(obj, indent=1, ensure_ascii=False, allow_nan=False).encode("utf-8")


# -- the table ------------------------------------------------------------------------------

def table_to_parquet(table) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrays, names = [], []
    for name in table.names:
        info = table.columns[name]
        col = table.frame[name]
        if info.kind == "categorical":
            vals = [None if (v is None or (isinstance(v, float) and math.isnan(v))) else str(v)
                    for v in col.to_numpy(dtype=object)]
            arrays.append(pa.array(vals, type=pa.string()))
        else:
            arrays.append(pa.array(col.to_numpy(dtype=np.float64), type=pa.float64(), from_pandas=False))
        names.append(name)
    buf = io.BytesIO()
    pq.write_table(pa.Table.from_arrays(arrays, names=names), buf, compression="zstd")
    return buf.getvalue()


def table_meta(table) -> dict:
    meta = {
        "source": table.source,
        "notes": [str(n) for n in table.notes],
        "rows": table.n_rows,
        "columns": [
            {"name": i.name, "kind": i.kind, "missing": int(i.missing), "distinct": int(i.distinct),
             "coded_categories": bool(i.coded_categories), "bad_cells": [[int(r), str(t)] for r, t in i.bad_cells],
             **({"note": i.note} if getattr(i, "note", "") else {}),
             **({"words": list(i.words)} if getattr(i, "words", ()) else {})}
            for i in (table.columns[n] for n in table.names)
        ],
    }
    if getattr(table, "line_numbers", ()):
        meta["line_numbers"] = [int(r) for r in table.line_numbers]
    return meta


# -- saving --------------------------------------------------------------------------------

def save_project(session, path) -> None:
    """Write ``session`` to ``path`` atomically (the old file stays whole until the new one is).

    Raises
    ------
    ProjectError
        When the folder does not exist or cannot be written, or a result cannot be stored.
    """
    path = os.fspath(path)
    members = []  # (name, bytes, compress)
    table_bytes = table_to_parquet(session.table)
    table_sha = _sha(table_bytes)
    members.append((TABLE, table_bytes, zipfile.ZIP_STORED))
    members.append((SESSION, _dumps(session_document(session)), zipfile.ZIP_DEFLATED))
    # A table read in batches is fitted again from its file on opening (the cache would need every row).
    members.extend(_results_members(session, table_sha) if session.results is not None and session.source is None
                   else [])
    saved = _now()
    manifest = {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "app_version": __version__,
        "created": getattr(session, "created", None) or saved,
        "saved": saved,
        "table_sha256": table_sha,
        "members": [{"name": n, "size": len(b), "sha256": _sha(b)} for n, b, _ in members],
    }
    stamp = tuple(int(x) for x in (saved[0:4], saved[5:7], saved[8:10], saved[11:13], saved[14:16], saved[17:19]))
    with atomic_writer(path) as fh:
        with zipfile.ZipFile(fh, "w") as zf:
            for name, data, comp in [(MANIFEST, _dumps(manifest), zipfile.ZIP_DEFLATED)] + members:
                info = zipfile.ZipInfo(name, date_time=stamp)
                info.compress_type = comp
                info.external_attr = 0o644 << 16
                zf.writestr(info, data)
    session.mark_saved(path, manifest["created"], saved)


def _results_members(session, table_sha: str) -> list:
    """results.json and its arrays; none when a result has no stored form (the cache is optional:
    the project is saved whole and is fitted again on opening).  ``table_sha`` is the SHA-256 of
    the stored table's bytes, which the fingerprint beside it was taken of."""
    enc = Encoder(RESULTS_DIR)
    try:
        doc = {
            "engine_version": ENGINE_VERSION,
            "table_fingerprint": session.table_hash,
            "table_sha256": table_sha,
            "settings_sha256": session.settings_hash(),
            "key": session.key(),
            "fit": enc.encode(session.results, "results"),
            "derived": enc.encode(session.derived_results(), "derived"),
            "stability": enc.encode(session.stability, "stability"),
            "stability_alphas": {k: float(v) for k, v in session.stability_alphas.items()},
        }
    except Unstorable:
        return []
    members = [(RESULTS, _dumps(doc), zipfile.ZIP_DEFLATED)]
    members.extend((name, data, zipfile.ZIP_DEFLATED) for name, data in enc.arrays)
    return members


def session_document(session) -> dict:
    return {
        "roles": session.roles.to_dict(),
        "settings": session.settings.to_dict(),
        "chosen_alpha": {k: float(v) for k, v in session.chosen_alpha.items()},
        "extra_fits": session.extra_fits,
        "stress": [stress_to_dict(c) for c in session.stress_configs],
        "bootstrap": session.bootstrap,
        "notes": session.notes,
        "view_state": session.view_state,
        "table": table_meta(session.table),
    } | ({"threshold": session.threshold} if session.threshold is not None else {}) | _rows_document(session)


def _rows_document(session) -> dict:
    """``rows`` (memory budget and cluster) when set, and ``table_file`` for a table read in batches, whose
    rows stay in their own file: the project keeps the row sample as its table and reads the file again."""
    out = {}
    if not session.rows.is_default:
        out["rows"] = session.rows.to_dict()
    if session.source is not None:
        st = session.streamed
        out["table_file"] = {"path": session.source, "fingerprint": session.table_hash}
        if st is not None:   # none before the first pass: the project then keeps the file's first rows
            out["table_file"].update(rows_used=int(st.rows_used), sampled=bool(st.sampled))
    return out


# -- reading the archive ------------------------------------------------------------------

class _Archive:
    """A checked, opened project archive: names validated, sizes bounded, hashes verified."""

    def __init__(self, path):
        self.path = os.fspath(path)
        self.label = os.path.basename(self.path)
        try:
            st = os.stat(self.path)
        except FileNotFoundError:
            raise ProjectError(f"{self.label}: no such file ({self.path}); check the path") from None
        except OSError as exc:
            raise ProjectError(f"{self.label}: cannot be read ({exc.strerror}); check the path and its "
                               "permissions") from None
        if stat.S_ISDIR(st.st_mode):
            raise ProjectError(f"{self.label}: is a folder, not a project file")
        if not stat.S_ISREG(st.st_mode):
            # Opening a pipe or a device for reading could block forever: never open one.
            raise ProjectError(f"{self.label}: is not a regular file (a pipe, socket or device), so it is not a "
                               "project file; open a .regbench file")
        try:
            self.zf = zipfile.ZipFile(self.path)
        except PermissionError as exc:
            raise ProjectError(f"{self.label}: cannot be read ({exc.strerror}); check the file's permissions") from None
        except Exception as exc:  # zipfile raises BadZipFile, NotImplementedError, OSError, ... on damaged files
            raise ProjectError(f"{self.label}: not a regbench project (not a readable zip archive: {exc}); "
                               "open a .regbench file, or load a table with 'new from table'") from None
        self.infos = {}
        self._map = None
        try:
            infolist = self.zf.infolist()
        except Exception as exc:  # zipfile can fail lazily on damaged central directories
            raise ProjectError(f"{self.label}: the archive's table of contents is damaged ({exc})") from None
        if len(infolist) > MAX_MEMBERS:
            raise ProjectError(f"{self.label}: holds {len(infolist)} members, more than a project ever has; refused")
        for info in infolist:
            name = info.filename
            if (name.startswith("/") or "\\" in name or (len(name) > 1 and name[1] == ":")
                    or ".." in name.split("/") or posixpath.normpath(name) != name.rstrip("/") or "\x00" in name):
                raise ProjectError(f"{self.label}: member '{name}' has an unsafe path (absolute or with '..'); "
                                   "the file is damaged or not a regbench project; refused")
            if name in self.infos:
                raise ProjectError(f"{self.label}: member '{name}' appears twice; the file is damaged; refused")
            if info.file_size > MAX_MEMBER:
                raise ProjectError(f"{self.label}: member '{name}' declares {info.file_size} bytes, "
                                   "more than 2 GiB; refused")
            if info.file_size > BOMB_SIZE and info.file_size > BOMB_RATIO * max(info.compress_size, 1):
                raise ProjectError(f"{self.label}: member '{name}' would expand {info.file_size // max(info.compress_size, 1)}"
                                   " times to over 50 MB (a zip bomb?); refused")
            if info.flag_bits & 0x1:
                raise ProjectError(f"{self.label}: member '{name}' is encrypted; regbench projects never are")
            self.infos[name] = info

    def close(self):
        self.zf.close()
        if self._map is not None:
            try:
                self._map.close()
            except BufferError:  # a view of it is still held by the caller: let it go with the view
                pass
            self._map = None

    def in_place(self, name: str):
        """A read-only view of a stored (uncompressed) member's bytes in the file itself, or None
        when the member is compressed or its local header does not agree with the directory (the
        caller then reads it through :meth:`raw`, which reports any damage).

        Reading in place saves copying the bytes and zipfile's CRC pass over them; the caller must
        check them against the manifest's SHA-256, which stands for the CRC.
        """
        info = self.infos.get(name)
        if info is None or info.compress_type != zipfile.ZIP_STORED or info.flag_bits & 0x1:
            return None
        try:
            if self._map is None:
                with open(self.path, "rb") as fh:
                    self._map = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ)
            m, h = self._map, info.header_offset
            if h < 0 or h + 30 > len(m) or m[h:h + 4] != b"PK\x03\x04":
                return None
            method, = struct.unpack("<H", m[h + 8:h + 10])
            n, e = struct.unpack("<HH", m[h + 26:h + 30])
            start = h + 30 + n + e
            if method != 0 or m[h + 30:h + 30 + n] != info.orig_filename.encode("utf-8", "replace") \
                    or start + info.file_size > len(m):
                return None
            return memoryview(m)[start:start + info.file_size]
        except (OSError, ValueError, OverflowError):
            return None

    def raw(self, name: str, limit: int = MAX_MEMBER) -> bytes:
        info = self.infos.get(name)
        if info is None:
            raise ProjectError(f"{self.label}: member '{name}' is missing; the file is damaged or incomplete")
        if info.file_size > limit:
            raise ProjectError(f"{self.label}: member '{name}' is {info.file_size} bytes, more than the "
                               f"{limit} a project needs; refused")
        try:
            with self.zf.open(info) as fh:
                data = fh.read(info.file_size + 1)
        except (zipfile.BadZipFile, EOFError, OSError, ValueError, NotImplementedError, RuntimeError) as exc:
            raise ProjectError(f"{self.label}: member '{name}' cannot be read ({exc}); the file is damaged") from None
        except Exception as exc:  # zlib.error and friends from a damaged stream
            raise ProjectError(f"{self.label}: member '{name}' cannot be read ({type(exc).__name__}: {exc}); "
                               "the file is damaged") from None
        if len(data) != info.file_size:
            raise ProjectError(f"{self.label}: member '{name}' does not hold the size its header declares; "
                               "the file is damaged")
        return data

    def json(self, name: str, data: bytes = None):
        if data is None:
            data = self.raw(name, JSON_LIMITS.get(name, MAX_MEMBER))
        try:
            return json.loads(data.decode("utf-8"), parse_constant=_no_constant, parse_float=_finite_float,
                              parse_int=_bounded_int)
        except (UnicodeDecodeError, ValueError) as exc:
            raise ProjectError(f"{self.label}: member '{name}' is not valid JSON ({exc}); the file is damaged") from None
        except RecursionError:
            raise ProjectError(f"{self.label}: member '{name}' is nested too deeply; the file is damaged") from None


def _no_constant(name):
    raise ValueError(f"{name} is not allowed in a project file")


#: The longest whole number a project holds (seeds are below 2**63: 19 digits).
MAX_INT_DIGITS = 20


def _finite_float(text):
    v = float(text)
    if not math.isfinite(v):
        raise ValueError(f"the number {text[:30]} is out of range (it would be read as infinity)")
    return v


def _bounded_int(text):
    if len(text.lstrip("-")) > MAX_INT_DIGITS:
        raise ValueError(f"the whole number {text[:12]}… has {len(text.lstrip('-'))} digits, more than a project holds")
    return int(text)


def _manifest(ar: _Archive) -> dict:
    if MANIFEST not in ar.infos:
        raise ProjectError(f"{ar.label}: not a regbench project (a zip archive without manifest.json); "
                           "open a .regbench file")
    m = ar.json(MANIFEST)
    if not isinstance(m, dict) or m.get("format") != FORMAT_NAME:
        found = m.get("format") if isinstance(m, dict) else None
        raise ProjectError(f"{ar.label}: manifest.json: field format is {found!r}, not '{FORMAT_NAME}'; "
                           "this zip was not made by regbench")
    v = m.get("format_version")
    if isinstance(v, bool) or not isinstance(v, int) or v < 0:
        raise ProjectError(f"{ar.label}: manifest.json: field format_version is {v!r}, not a whole number >= 0; "
                           "the file is damaged")
    if v > FORMAT_VERSION:
        raise ProjectError(f"{ar.label}: made by a newer regbench (format {v}); this version reads up to "
                           f"{FORMAT_VERSION}; update regbench")
    for key in ("app_version", "created", "saved", "table_sha256"):
        if not isinstance(m.get(key), str):
            raise ProjectError(f"{ar.label}: manifest.json: field {key} is missing or not text; the file is damaged")
    for key in ("created", "saved"):
        try:
            datetime.fromisoformat(m[key].replace("Z", "+00:00"))
        except ValueError:
            raise ProjectError(f"{ar.label}: manifest.json: field {key} ({m[key]!r}) is not an ISO time; "
                               "the file is damaged") from None
    members = m.get("members")
    if not isinstance(members, list):
        raise ProjectError(f"{ar.label}: manifest.json: field members must be a list; the file is damaged")
    seen = {}
    for i, e in enumerate(members):
        if not (isinstance(e, dict) and isinstance(e.get("name"), str) and isinstance(e.get("sha256"), str)
                and isinstance(e.get("size"), int) and not isinstance(e.get("size"), bool) and e["size"] >= 0):
            raise ProjectError(f"{ar.label}: manifest.json: field members[{i}] must have name, size and sha256; "
                               "the file is damaged")
        if e["name"] in seen or e["name"] == MANIFEST:
            raise ProjectError(f"{ar.label}: manifest.json: field members[{i}] lists '{e['name']}' twice; "
                               "the file is damaged")
        seen[e["name"]] = e
    for name in (TABLE, SESSION):
        if name not in seen:
            raise ProjectError(f"{ar.label}: manifest.json: field members does not list '{name}'; "
                               "the file is damaged or incomplete")
    for name in seen:
        if not (name in (TABLE, SESSION, RESULTS) or (name.startswith(RESULTS_DIR) and name.endswith(".npy"))):
            raise ProjectError(f"{ar.label}: manifest.json: field members lists unknown member '{name}'; "
                               "this regbench does not know it; the file is damaged or foreign")
    for name in ar.infos:
        if name != MANIFEST and name not in seen:
            raise ProjectError(f"{ar.label}: member '{name}' is not listed in manifest.json; the file is "
                               "damaged or was changed by another program; refused")
    if seen[TABLE]["sha256"] != m["table_sha256"]:
        raise ProjectError(f"{ar.label}: manifest.json: field table_sha256 disagrees with members; "
                           "the file is damaged")
    m["_members"] = seen
    return m


def _read_checked(ar: _Archive, m: dict, name: str, limit: int = MAX_MEMBER, in_place: bool = False):
    """A member's bytes, checked against the manifest's size and SHA-256 (``in_place``: a read-only
    view of them in the file when the member is stored uncompressed, as the table is)."""
    entry = m["_members"][name]
    if name not in ar.infos:
        raise ProjectError(f"{ar.label}: member '{name}' is listed in manifest.json but missing; "
                           "the file is damaged or incomplete")
    data = ar.in_place(name) if in_place and ar.infos[name].file_size <= limit else None
    if data is None:
        data = ar.raw(name, limit)
    if len(data) != entry["size"] or _sha(data) != entry["sha256"]:
        raise ProjectError(f"{ar.label}: member '{name}' fails its SHA-256 check (the manifest records "
                           f"{entry['size']} bytes, sha256 {entry['sha256'][:12]}…); the file is damaged. "
                           "Use a backup copy, or re-create the project from its table")
    return data


# -- the table on load ---------------------------------------------------------------------

def _read_table(ar: _Archive, data: bytes, meta, where="session.json: field table"):
    import pyarrow as pa
    import pyarrow.parquet as pq

    def bad(field, what):
        raise ProjectError(f"{ar.label}: {where}.{field} {what}; the file is damaged")

    cols, rows, notes, lines = _table_meta(ar, meta, where, bad)
    _check_parquet_sizes(ar, data, rows, cols, bad)
    try:
        pf = pq.ParquetFile(pa.BufferReader(data))
        schema = pf.schema_arrow
    except Exception as exc:  # pyarrow raises several types on damaged data
        raise _unreadable_parquet(ar, exc) from None
    if len(schema.names) != len(cols):
        bad("columns", f"lists {len(cols)} columns but table.parquet holds {len(schema.names)}")
    if len(set(schema.names)) != len(schema.names):
        bad("columns", "names a column of table.parquet twice")
    infos, data_cols = {}, {}
    # Number columns land in one block, as the reader puts them, so a design shares their memory; they
    # are decoded a group at a time, as the reader does, so the table is not held twice.
    floats = [j for j in range(len(schema.names)) if pa.types.is_float64(schema.field(j).type)]
    block = column_block(rows, len(floats))
    slot = {j: block[:, k] for k, j in enumerate(floats)}
    j = 0
    for group in column_groups(schema.names, rows):
        try:
            tab = pf.read(columns=group, use_threads=True)
        except Exception as exc:  # pyarrow raises several types on damaged data
            raise _unreadable_parquet(ar, exc) from None
        if tab.num_rows != rows:
            bad("rows", f"says {rows} but table.parquet holds {tab.num_rows} rows")
        for i in range(len(group)):
            name, values, info = _stored_column(j, cols[j], tab, infos, bad, slot.get(j), at=i)
            data_cols[name], infos[name] = values, info
            j += 1
        del tab
    frame = frame_of(list(data_cols), data_cols, rows)
    return Table(frame=frame, columns=infos, source=meta.get("source", ""), notes=tuple(notes),
                 line_numbers=tuple(lines))


def _table_meta(ar: _Archive, meta, where, bad):
    """The table's description in session.json, checked: its columns, rows, notes and line numbers."""
    if not isinstance(meta, dict):
        raise ProjectError(f"{ar.label}: {where} is missing or not an object; the file is damaged")
    cols = meta.get("columns")
    rows = meta.get("rows")
    if not isinstance(cols, list) or not cols:
        bad("columns", "must be a non-empty list")
    if isinstance(rows, bool) or not isinstance(rows, int) or rows < 1:
        bad("rows", f"is {rows!r}, not a whole number >= 1")
    if not isinstance(meta.get("source", ""), str):
        bad("source", "must be text")
    notes = meta.get("notes", [])
    if not (isinstance(notes, list) and all(isinstance(n, str) for n in notes)):
        bad("notes", "must be a list of text")
    lines = meta.get("line_numbers", [])
    if not (isinstance(lines, list) and all(isinstance(r, int) and not isinstance(r, bool) for r in lines)
            and (not lines or (len(lines) == rows and lines[0] >= 1
                               and all(a < b for a, b in zip(lines, lines[1:]))))):
        bad("line_numbers", "must list one increasing row number >= 1 per row")
    return cols, rows, notes, lines


def _unreadable_parquet(ar, exc) -> ProjectError:
    """The one line for a table.parquet member pyarrow cannot read (it raises several types)."""
    return ProjectError(f"{ar.label}: member 'table.parquet' is not a readable Parquet table "
                        f"({type(exc).__name__}: {str(exc)[:200]}); the file is damaged")


def _stored_column(j: int, c, tab, infos: dict, bad, out=None, at=None):
    """Column ``j`` of the stored table: its name, values and :class:`ColumnInfo`, its description
    checked against itself and against what table.parquet holds there (column ``at`` of ``tab``, a
    group of its columns; ``j`` when None).  A float column's values are written into ``out`` (its
    place in the table's block) when given."""
    import pyarrow as pa

    f = f"columns[{j}]"
    if not isinstance(c, dict):
        bad(f, "must be an object")
    name = c.get("name")
    if not isinstance(name, str) or not name:
        bad(f + ".name", "must be a non-empty column name")
    if name in infos:
        bad(f + ".name", f"repeats column '{name}'")
    at = j if at is None else at
    if tab.column_names[at] != name:
        bad(f + ".name", f"is '{name}' but table.parquet has '{tab.column_names[at]}' there")
    kind = c.get("kind")
    if kind not in COLUMN_KINDS:
        bad(f + ".kind", f"is {kind!r}; known kinds are {', '.join(COLUMN_KINDS)}")
    for k in ("missing", "distinct"):
        v = c.get(k)
        if isinstance(v, bool) or not isinstance(v, int) or v < 0:
            bad(f"{f}.{k}", f"is {v!r}, not a whole number >= 0")
    if not isinstance(c.get("coded_categories", False), bool):
        bad(f + ".coded_categories", "must be true or false")
    if not isinstance(c.get("note", ""), str):
        bad(f + ".note", "must be text")
    words = c.get("words", [])
    if not (isinstance(words, list) and all(isinstance(t, str) and t for t in words)
            and (not words or (len(words) == 2 and kind == "boolean"))):
        bad(f + ".words", "must be a boolean column's two values as text, [false, true]")
    cells = c.get("bad_cells", [])
    if not isinstance(cells, list):
        bad(f + ".bad_cells", "must be a list of [row, text]")
    for i, cell in enumerate(cells):
        if not (isinstance(cell, list) and len(cell) == 2 and isinstance(cell[0], int)
                and not isinstance(cell[0], bool) and cell[0] >= 1 and isinstance(cell[1], str)):
            bad(f"{f}.bad_cells[{i}]", "must be [row number >= 1, text]")
    arr = tab.column(at)
    if kind == "categorical":
        if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            bad(f + ".kind", f"is categorical but table.parquet stores '{name}' as {arr.type}")
        values = np.array(arr.to_pylist(), dtype=object)
    else:
        if not pa.types.is_float64(arr.type):
            bad(f + ".kind", f"is {kind} but table.parquet stores '{name}' as {arr.type}")
        if out is None:
            values = arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=True)
        else:
            a = 0
            for chunk in arr.chunks:
                out[a:a + len(chunk)] = chunk.to_numpy(zero_copy_only=False)
                a += len(chunk)
            values = out
    info = ColumnInfo(name, kind, c["missing"], c["distinct"], bool(c.get("coded_categories", False)),
                      tuple((int(r), str(t)) for r, t in cells), c.get("note", ""), tuple(words))
    return name, values, info


#: Bytes a table cell may take once decompressed (a float takes 8; text is held to this on average).
MAX_CELL_BYTES = 1024


def _check_parquet_sizes(ar, data: bytes, rows, cols, bad) -> None:
    """Compare the Parquet footer with session.json before any data page is decompressed, so a
    small file that would expand to gigabytes is refused by its metadata."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        meta = pq.ParquetFile(pa.BufferReader(data)).metadata
    except Exception as exc:  # pyarrow raises several types on a damaged footer
        raise _unreadable_parquet(ar, exc) from None
    if meta.num_rows != rows:
        bad("rows", f"says {rows} but table.parquet declares {meta.num_rows} rows")
    if meta.num_columns != len(cols):
        bad("columns", f"lists {len(cols)} columns but table.parquet declares {meta.num_columns}")
    limit = rows * len(cols) * MAX_CELL_BYTES + 16 * 1024**2
    total = 0
    try:
        for g in range(meta.num_row_groups):
            rg = meta.row_group(g)
            for j in range(rg.num_columns):
                total += max(int(rg.column(j).total_uncompressed_size), 0)
    except Exception as exc:
        raise ProjectError(f"{ar.label}: member 'table.parquet' has a damaged footer ({type(exc).__name__}); "
                           "the file is damaged") from None
    if total > limit:
        raise ProjectError(f"{ar.label}: member 'table.parquet' would decompress to {total:,} bytes, far more than "
                           f"{rows} rows × {len(cols)} columns need; the file is damaged or hostile; refused")


# -- session.json --------------------------------------------------------------------------

class _Refuse:
    """Refusals for one member: ``bad(field, what)`` raises one line naming the member and field."""

    def __init__(self, label: str):
        self.label = label

    def __call__(self, field, what, todo="the file is damaged"):
        raise ProjectError(f"{self.label}: field {field} {what}; {todo}")


_SESSION_KEYS = {"roles", "settings", "chosen_alpha", "extra_fits", "stress", "bootstrap", "notes", "view_state",
                 "table", "threshold", "rows", "table_file"}


def _session_state(ar: _Archive, doc, table):
    """The session as session.json describes it, every field checked against the stored table,
    and the design its roles make of the table (built once here, handed to the session)."""
    label = f"{ar.label}: session.json"
    bad = _Refuse(label)
    if not isinstance(doc, dict):
        raise ProjectError(f"{label}: the top level must be an object; the file is damaged")
    unknown = set(doc) - _SESSION_KEYS
    if unknown:
        bad(", ".join(sorted(map(str, unknown))[:5]), "is not part of this format",
            "the file is damaged or was written by another program")
    roles = _roles_of(doc, table, bad)
    settings = _settings_of(doc, bad)
    names = set(table.names) | {d.name for d in roles.derived}
    for c in doc["settings"].get("penalty_factors", {}):
        if c not in names:
            bad(f"settings.penalty_factors.{c}", "names a column that is not in the table")
    try:
        design = build_design(table, roles)
    except DataError as exc:
        bad("roles", f"cannot be used on the stored table ({exc})")
    for i, p in enumerate(settings.pins):
        if p not in design.columns:
            bad(f"settings.pins[{i}]", f"names '{p}', which is not a design column")
    chosen, extra = _choices_of(doc, set(penalized_names(settings)), bad)
    configs = _stress_of(doc, design, table, bad)
    boot = doc.get("bootstrap", 0)
    if BOOTSTRAP.rule.problem(boot) is not None:
        bad("bootstrap", f"is unusable: {BOOTSTRAP.rule.problem(boot)}")
    notes = doc.get("notes", "")
    if not isinstance(notes, str):
        bad("notes", "must be text")
    vs = doc.get("view_state", {})
    if not isinstance(vs, dict):
        bad("view_state", "must be an object")
    state = SessionState(roles=roles, settings=settings, chosen_alpha=chosen, extra_fits=extra,
                         stress_configs=configs, bootstrap=boot, notes=notes, view_state=vs,
                         threshold=_threshold_of(doc, design, bad), rows=_rows_of(doc, bad))
    return state, design


def _rows_of(doc, bad) -> RowSource:
    """The memory budget and cluster (absent: no limit, this computer), checked against their declaration."""
    d = doc.get("rows", {})
    if not isinstance(d, dict):
        bad("rows", "must be an object")
    for name, problem in spec.problems(RowSource, d):
        bad(f"rows.{name}", f"is unusable: {problem}")
    return RowSource.from_dict(d)


def _table_file_of(ar, doc) -> Optional[str]:
    """The path of a table read in batches (session.json field ``table_file``), checked; None when absent."""
    tf = doc.get("table_file")
    if tf is None:
        return None
    bad = _Refuse(f"{ar.label}: session.json")
    if not isinstance(tf, dict) or not isinstance(tf.get("path"), str) or not tf["path"]:
        bad("table_file", "must be an object with the table's path")
    if not os.path.exists(tf["path"]):
        raise ProjectError(f"{ar.label}: the project reads its rows from {tf['path']}, which is not there; put the "
                           "table back at that path (the project keeps only a sample of its rows)")
    return tf["path"]


def _open_batches(ar, path, state, table_file, progress, cancel):
    """A session on a table read in batches: the pass over its rows runs again (the fits need every row;
    the project keeps only their sample), under the stored roles, settings, memory budget and cluster."""
    try:
        streamed = run_pass(table_file, state.roles, state.settings, state.rows, progress=progress, cancel=cancel)
    except DataError as exc:
        raise ProjectError(f"{ar.label}: the rows of {table_file} cannot be read again with the stored roles ({exc})")
    return Session.from_streamed(table_file, streamed, state.roles, state=state)


def _roles_of(doc, table, bad) -> Roles:
    roles_d = doc.get("roles")
    if not isinstance(roles_d, dict):
        bad("roles", "is missing or not an object")
    try:
        derived = Roles.from_dict({"target": "", **roles_d}).derived
    except (DataError, TypeError) as exc:
        bad("roles.derived", f"is not usable ({exc})")
    names = set(table.names) | {d.name for d in derived}
    for key in ("target",):
        if not isinstance(roles_d.get(key), str):
            bad(f"roles.{key}", "must be a column name")
    for key in ("weights", "groups", "no_count", "positive_level"):
        if roles_d.get(key) is not None and not isinstance(roles_d.get(key), str):
            bad(f"roles.{key}", "must be a column name or empty" if key != "positive_level"
                else "must be a value of the target (text) or empty")
    if roles_d.get("outcome") not in (None, "numeric", "binary"):
        bad("roles.outcome", f"is {roles_d.get('outcome')!r}, not numeric, binary or empty")
    for key in ("predictors", "categorical"):
        v = roles_d.get(key, [])
        if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
            bad(f"roles.{key}", "must be a list of column names")
    for key in ("target", "weights", "groups", "no_count"):
        if roles_d.get(key) is not None and roles_d[key] not in names:
            bad(f"roles.{key}", f"names '{roles_d[key]}', which is not a column of the table")
    for key in ("predictors", "categorical"):
        for i, c in enumerate(roles_d.get(key, [])):
            if c not in names:
                bad(f"roles.{key}[{i}]", f"names '{c}', which is not a column of the table")
    if roles_d.get("weights_kind", "precision") not in ("precision", "counts"):
        bad("roles.weights_kind", f"is {roles_d.get('weights_kind')!r}; it must be 'counts' or 'precision'")
    return Roles.from_dict(roles_d)


def _settings_of(doc, bad) -> FitSettings:
    s = doc.get("settings")
    if not isinstance(s, dict):
        bad("settings", "is missing or not an object")
    found = spec.problems(FitSettings, s)
    if found:
        key, text = found[0]
        if key not in spec.specs(FitSettings):
            bad(f"settings.{key}", "is not a setting this version knows", "it may come from a newer regbench")
        bad(f"settings.{key}", f"is unusable: {text}")
    if not isinstance(s.get("penalty_factors", {}), dict):
        bad("settings.penalty_factors", "must be an object of column name -> factor")
    return FitSettings.from_dict(s)


def _positive(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and v > 0


def _choices_of(doc, families: set, bad):
    """The chosen α per family and the extra fits, as plain values."""
    ca = doc.get("chosen_alpha", {})
    if not isinstance(ca, dict):
        bad("chosen_alpha", "must be an object of model name -> α")
    for k, v in ca.items():
        if k not in families:
            bad(f"chosen_alpha.{k}", f"names an unknown model; known: {', '.join(sorted(families))}")
        if not _positive(v):
            bad(f"chosen_alpha.{k}", f"is {v!r}, not a positive number")
    extra = doc.get("extra_fits", [])
    if not isinstance(extra, list):
        bad("extra_fits", "must be a list")
    seen = set(families) | {"ols"}
    for i, e in enumerate(extra):
        if not (isinstance(e, dict) and set(e) == {"name", "family", "alpha"}):
            bad(f"extra_fits[{i}]", "must be an object with name, family and alpha")
        if not isinstance(e["name"], str) or not e["name"] or e["name"] in seen:
            bad(f"extra_fits[{i}].name", f"is {e['name']!r}: empty, not text or used twice")
        seen.add(e["name"])
        if not isinstance(e["family"], str) or e["family"] not in families:
            bad(f"extra_fits[{i}].family", f"is {e['family']!r}; known: {', '.join(sorted(families))}")
        if not _positive(e["alpha"]):
            bad(f"extra_fits[{i}].alpha", f"is {e['alpha']!r}, not a positive number")
    return ({k: float(v) for k, v in ca.items()},
            tuple({"name": e["name"], "family": e["family"], "alpha": float(e["alpha"])} for e in extra))


def _threshold_of(doc, design, bad):
    """The recorded threshold of a yes/no outcome ({'value', 'note'}) or None."""
    thr = doc.get("threshold")
    if thr is None:
        return None
    if not (isinstance(thr, dict) and set(thr) == {"value", "note"}):
        bad("threshold", "must be an object with value and note")
    v = thr["value"]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not 0.0 < float(v) < 1.0:
        bad("threshold.value", f"is {v!r}, not a probability between 0 and 1")
    if not isinstance(thr["note"], str):
        bad("threshold.note", "must be text")
    if design.outcome != "binary":
        bad("threshold", "is set but the target is not a yes/no outcome")
    return {"value": float(v), "note": thr["note"]}


def _stress_of(doc, design, table, bad) -> tuple:
    """The stress tests, each checked to run on the design."""
    stress = doc.get("stress", [])
    if not isinstance(stress, list):
        bad("stress", "must be a list")
    configs = []
    for i, c in enumerate(stress):
        if not (isinstance(c, dict) and "column" in c and "kind" in c):
            bad(f"stress[{i}]", "must be an object with at least column and kind")
        unknown = set(c) - {"column", "kind", "strength", "seed", "tolerance", "fill"}
        if unknown:
            bad(f"stress[{i}]", f"has unknown key(s) {', '.join(sorted(unknown))}")
        if not isinstance(c["kind"], str) or c["kind"] not in STRESS_KINDS:
            bad(f"stress[{i}].kind", f"is {c['kind']!r}; known kinds: {', '.join(STRESS_KINDS)}")
        if not isinstance(c["column"], str):
            bad(f"stress[{i}].column", "must be a column name")
        for key in ("strength", "tolerance", "fill"):
            v = c.get(key)
            if v is not None and (isinstance(v, bool) or not (isinstance(v, (int, float))
                                                            or (key == "fill" and v in ("nan", "inf", "-inf")))):
                bad(f"stress[{i}].{key}", f"is {v!r}, not a number or empty")
        if c.get("seed") is not None and (isinstance(c["seed"], bool) or not isinstance(c["seed"], int)):
            bad(f"stress[{i}].seed", f"is {c['seed']!r}, not a whole number")
        try:
            cfg = stress_from_dict(c)
            check_stress(cfg, design, table)
        except DataError as exc:
            bad(f"stress[{i}]", f"cannot run ({exc})")
        except (TypeError, ValueError) as exc:
            bad(f"stress[{i}]", f"is not a valid stress test ({exc})")
        configs.append(cfg)
    return tuple(configs)


# -- cached results ------------------------------------------------------------------------

def _load_results(ar, m, session, migrated: bool):
    """Install cached results when they belong to this table, these settings and this engine.

    Returns ``(status, note)``: status 'none' (no cache), 'used' or 'stale'; note is
    one line for the person when a cache was there but not used.  A cache this
    version cannot read is stale, never a reason to refuse the project: the table
    and settings are intact, so the session is simply fitted again.  Only a member
    whose bytes differ from the manifest (a damaged file) is refused.
    """
    if RESULTS not in m["_members"]:
        return "none", None
    raw = _read_checked(ar, m, RESULTS, JSON_LIMITS[RESULTS])
    blobs = {name: _read_checked(ar, m, name) for name in m["_members"] if name.startswith(RESULTS_DIR)}
    plain = True
    try:
        reason = _install_cache(ar, session, migrated, raw, blobs, m["table_sha256"])
    except ProjectError as exc:
        reason, plain = str(exc).replace(f"{ar.label}: ", "", 1), False
    if reason is None:
        return "used", None
    return "stale", stale_cache_line(ar.label, reason, plain)


#: What a refit after a stale cache keeps: said in every stale-cache line.
KEPT = "the models are fitted again with the same choices, and nothing in the project is lost"


def stale_cache_line(label: str, reason: str, plain: bool = True) -> str:
    """One line for a person on saved results this version does not use.

    ``plain`` reasons are already words for people ("they were computed by engine version 3,
    this is 4"); any other reason is a detail of the stored form, given last for whoever
    looks into it, so the line first says what happened and that nothing is lost.
    """
    if plain:
        return f"{label}: the saved results were not used because {reason}; {KEPT}"
    return (f"{label}: the saved results were not used because this version of regbench stores them "
            f"differently; {KEPT} (detail: {reason})")


def _install_cache(ar, session, migrated, raw: bytes, blobs: dict, table_sha: str):
    """Decode and install the cache; returns why it does not apply, or None once installed.

    ``table_sha`` is the SHA-256 of the stored table's bytes, checked against the manifest.  A cache
    that records the same SHA-256 was computed on these very bytes, so its table fingerprint is the
    table's and the cells need not be hashed again (files without it: the table is hashed).
    """
    doc = ar.json(RESULTS, raw)
    if not isinstance(doc, dict):
        raise StaleCache("results.json is not an object")
    for key in ("table_fingerprint", "settings_sha256", "key"):
        if not isinstance(doc.get(key), str):
            raise StaleCache(f"results.json field {key} is missing or not text")
    if migrated:
        return "the project was saved by an older version in an older format"
    version = doc.get("engine_version")
    if version != ENGINE_VERSION:
        return (f"they were computed by engine version {version}, this is {ENGINE_VERSION}" if version is not None
                else "they were computed by an engine without a version")
    if doc.get("table_sha256") == table_sha:
        session.adopt_table_hash(doc["table_fingerprint"])
    if doc["table_fingerprint"] != session.table_hash:
        return "the table differs from the one they were computed on"
    if doc["settings_sha256"] != session.settings_hash():
        return "the roles or settings differ from the ones they were computed with"
    arrays = {}
    for name, data in blobs.items():
        try:
            arrays[name] = np.load(io.BytesIO(data), allow_pickle=False)
        except Exception as exc:  # numpy raises ValueError/OSError/EOFError/... on bad headers
            raise StaleCache(f"member '{name}' is not a readable array ({type(exc).__name__})") from None
        if not isinstance(arrays[name], np.ndarray):
            raise StaleCache(f"member '{name}' is not a single array")
    dec = Decoder(arrays, "results.json")
    results = dec.decode(doc.get("fit"), "fit")
    guarded(ar.label, check_fit, results, session.design)
    results = _restore_engine_cache(session.design, results)
    stab_alphas = doc.get("stability_alphas", {})
    if not (isinstance(stab_alphas, dict) and all(isinstance(v, (int, float)) and not isinstance(v, bool)
                                                  for v in stab_alphas.values())):
        raise StaleCache("results.json: field stability_alphas must map model names to numbers")
    stability = dec.decode(doc.get("stability"), "stability")
    if stability is not None:
        guarded(ar.label, check_stability, stability, session.design)
    derived = {}
    if doc["key"] == session.key():
        derived = dec.decode(doc.get("derived"), "derived")
        guarded(ar.label, check_derived, derived, session.design, len(session.stress_configs))
    # Stability is kept even when computed at another α; Session.stability_current says so.
    session.install_cached(results, stability, {k: float(v) for k, v in stab_alphas.items()}, derived)
    return None


def _restore_engine_cache(design, results):
    """FitResults.gram is a cache of the engine and is not stored: it is gathered the way
    ``fit_all`` gathers it (whole design, accumulated fold by fold, so later refits at a new
    α match a fresh session bit for bit), but only when a refit first needs it, not on
    opening (:meth:`FitResults.whole_stats`)."""
    from dataclasses import replace

    ids = np.asarray(results.fold_ids)
    if ids.size == 0 or ids.min() < 0:
        raise ProjectError("results.json: field fit.fold_ids holds a negative fold; the cached results are damaged")
    source = functools.partial(_whole_design_stats, design.X, design.y, design.weights, ids, int(ids.max()) + 1)
    return replace(results, gram=None, gram_source=source)


def _whole_design_stats(X, y, w, ids, K):
    """The whole design's cross-products, accumulated fold by fold as ``fit_all`` does."""
    return per_fold(X, y, w, ids, K)[0]


# -- public entry points -------------------------------------------------------------------

def load_project(path, compute: bool = True, progress=None, cancel=None):
    """Open a project file as a :class:`~regbench.session.Session`.

    Parameters
    ----------
    path : str or os.PathLike
    compute : bool
        When cached results are absent or do not match the table and settings,
        fit again now (True) or leave ``session.results`` empty (False, for a GUI
        that computes on its worker thread).

    Raises
    ------
    ProjectError
        Naming the member and field that is wrong and what to do.
    """
    ar = _Archive(path)
    try:
        m = _manifest(ar)
        table_bytes = _read_checked(ar, m, TABLE, in_place=True)
        doc = ar.json(SESSION, _read_checked(ar, m, SESSION, JSON_LIMITS[SESSION]))
        migrated = m["format_version"] < FORMAT_VERSION
        if migrated:
            doc = migrate(doc, m["format_version"])
        if not isinstance(doc, dict):
            raise ProjectError(f"{ar.label}: session.json: the top level must be an object; the file is damaged")
        table = _read_table(ar, table_bytes, doc.get("table"))
        # The design checked here serves the session too: a table is coded once per opening.
        state, design = _session_state(ar, doc, table)
        table_file = _table_file_of(ar, doc)
        if table_file is not None:
            session = _open_batches(ar, path, state, table_file, progress, cancel)
            status, note = "none", None
            if doc["table_file"].get("fingerprint") != session.table_hash:
                note = (f"{ar.label}: {table_file} changed since the project was saved (its size or time); the "
                        "models were fitted again on it as it is now")
        else:
            session = Session.from_state(table, state, design=design)
            status, note = _load_results(ar, m, session, migrated)
    finally:
        ar.close()
    # A table read in batches has its fits from the pass just run; the comparisons and stability follow here.
    if compute and (session.results is None or table_file is not None):
        session.compute(progress=progress, cancel=cancel)
    session.mark_loaded(os.fspath(path), m["created"], m["saved"], status,
                        dirty=migrated or (status == "stale" and session.results is not None), note=note)
    return session


def inspect_project(path) -> dict:
    """What a project file holds, with its hash checks, without fitting anything."""
    ar = _Archive(path)
    try:
        m = _manifest(ar)
        checks = {}
        for name, entry in m["_members"].items():
            try:
                _read_checked(ar, m, name)
                checks[name] = "ok"
            except ProjectError as exc:
                checks[name] = f"failed: {exc}"
        doc = ar.json(SESSION, ar.raw(SESSION, JSON_LIMITS[SESSION])) if checks.get(SESSION) == "ok" else {}
        if m["format_version"] < FORMAT_VERSION and isinstance(doc, dict) and doc:
            doc = migrate(doc, m["format_version"])
        doc = doc if isinstance(doc, dict) else {}
        tmeta = doc.get("table") if isinstance(doc.get("table"), dict) else {}
        cols = tmeta.get("columns") if isinstance(tmeta.get("columns"), list) else []
        info = {
            "path": os.fspath(path),
            "format": m["format"],
            "format_version": m["format_version"],
            "app_version": m["app_version"],
            "created": m["created"],
            "saved": m["saved"],
            "table_sha256": m["table_sha256"],
            "hash_check": "ok" if all(v == "ok" for v in checks.values()) else "failed",
            "member_checks": checks,
            "members": [{"name": e["name"], "size": e["size"]} for e in m["_members"].values()],
            "table_rows": tmeta.get("rows"),
            "table_columns": len(cols),
            "roles": doc.get("roles"),
            "settings": doc.get("settings"),
            "stress_tests": len(doc.get("stress", [])) if isinstance(doc.get("stress"), list) else 0,
            "bootstrap": doc.get("bootstrap"),
            "threshold": doc.get("threshold"),
            "cached_results": RESULTS in m["_members"],
            "cached_arrays": sum(1 for n in m["_members"] if n.startswith(RESULTS_DIR)),
        }
        # A table read in batches: where its rows are, and the memory budget and cluster (present when set).
        for key in ("table_file", "rows"):
            if key in doc:
                info[key] = doc[key]
    finally:
        ar.close()
    return info

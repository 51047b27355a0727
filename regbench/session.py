"""The session document: table, roles, settings, results, stress tests, notes.

Plain Python, no Qt.  Every change goes through a small set of methods that
record an undo step and tell observers what changed, so a Qt view can listen
(``subscribe``) without the core knowing about Qt.  Long work is split so a GUI
worker thread can run the pure part (:meth:`Session.compute_results`) and the
GUI thread installs the outcome (:meth:`Session.apply_results`)::

    computed = session.compute_results(progress, cancel)   # worker thread
    session.apply_results(computed)                         # GUI thread; False if stale

A project opened with ``load_project(path, compute=False)`` comes back without
results when its cache did not match; compute them the same way.
"""

from __future__ import annotations

import contextlib
import copy
import hashlib
import json
import math
from collections import deque
from dataclasses import dataclass, field, replace
from typing import Callable, Dict, Optional, Tuple

import numpy as np

from regbench.analysis.agreement import Agreement, compare_models
from regbench.analysis.calibration import Classification, assess
from regbench.analysis.fit_quality import fit_quality
from regbench.analysis.ranges import Ranges, compute_ranges
from regbench.analysis.stability import Stability, bootstrap_stability
from regbench.analysis.stress import StressConfig, StressResult, StressSweep, resolve_column, run_stress, stress_sweep
from regbench.analysis.structure import Structure, compare_structure
from regbench.batches import check_roles, check_rows, file_fingerprint, run_pass, sample_table
from regbench.data.derive import apply_derived, make_derived
from regbench.data.design import Roles, build_design
from regbench.data.reader import read_table
from regbench.data.table import Table
from regbench.errors import DataError
from regbench.models import engine, spec
from regbench.models.ols import one_blas_thread
from regbench.models.results import FitResults, FitSettings, LinearModel
from regbench.models.spec import RowSource
from regbench.progress import check, report
from regbench.sentences import NOT_ON_SAMPLE, row_sample_sentence

#: How many edits :meth:`Session.undo` can take back.
UNDO_DEPTH = 50
#: Stability refits of a new session; declared like the fields of FitSettings.
DEFAULT_BOOTSTRAP = 200
BOOTSTRAP = spec.Spec(spec.Whole(0, 100_000), "stability refits (0 skips the stability check)", flag="--bootstrap")


def relaxations_of(results) -> dict:
    """Relaxation γ of each relaxed family in ``results`` (empty when none is fitted)."""
    return {n: float(pf.relaxation) for n, pf in results.penalized.items() if pf.relaxation is not None}


def penalized_names(settings: FitSettings) -> tuple:
    """Names of the penalized families ``fit_all`` produces for ``settings``."""
    return tuple(name for name, _ in engine.families(settings))


def table_fingerprint(table: Table) -> str:
    """SHA-256 over the table's content (names, kinds, values), independent of file encoding."""
    h = hashlib.sha256()
    frame = table.frame
    for name in table.names:
        info = table.columns[name]
        h.update(b"\x00col\x00" + name.encode("utf-8") + b"\x00" + info.kind.encode())
        col = frame[name]
        if info.kind in ("numeric", "boolean", "empty"):
            h.update(np.ascontiguousarray(col.to_numpy(dtype=np.float64)).tobytes())
        else:
            h.update(_text_bytes(col.to_numpy(dtype=object)))
    return h.hexdigest()


def _text_bytes(values) -> bytes:
    """A text column as the fingerprint hashes it: b"\\x01" for a missing cell, else b"\\x02", the
    length of its UTF-8 text (8 bytes, little-endian) and the text.  Each distinct value is
    encoded once; the pieces are joined in row order (the same bytes as cell after cell)."""
    import pandas as pd

    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    if not all(isinstance(v, str) for v in uniques):
        # Hashing merges equal values of different types (1, 1.0, True) whose texts differ.
        codes, uniques = np.arange(len(values)), [None if _missing(v) else v for v in values]
    pieces = []
    for v in uniques:
        if _missing(v):
            pieces.append(b"\x01")
        else:
            b = str(v).encode("utf-8")
            pieces.append(b"\x02" + len(b).to_bytes(8, "little") + b)
    pieces.append(b"\x01")  # factorize's code -1: a missing cell
    return b"".join([pieces[c] for c in codes])


def _missing(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def _digest(obj) -> str:
    return hashlib.sha256(json.dumps(obj, sort_keys=True, allow_nan=True).encode("utf-8")).hexdigest()


def stress_to_dict(config) -> dict:
    """A StressConfig as plain JSON values (column, kind, strength, seed, tolerance, fill)."""
    return config.to_dict()


def stress_from_dict(d: dict):
    return StressConfig.from_dict(d)


@dataclass(frozen=True)
class ComputedResults:
    """What :meth:`Session.compute_results` produced, ready to install.

    ``fit_key`` identifies table + roles + settings; ``key`` adds the chosen α,
    extra fits, stress configurations and bootstrap count.  A result computed
    for another state is installed only as far as its keys still match.
    """

    fit_key: str
    key: str
    results: FitResults
    models: Dict[str, LinearModel] = field(default_factory=dict)
    heldout: Dict[str, np.ndarray] = field(default_factory=dict)
    agreement: Optional[Agreement] = None
    structure: Optional[Structure] = None
    stress: Tuple[StressResult, ...] = ()
    sweeps: Tuple[StressSweep, ...] = ()
    ranges: Optional[Ranges] = None
    stability: Optional[Stability] = None
    stability_alphas: Dict[str, float] = field(default_factory=dict)
    #: Calibration and discrimination of a yes/no outcome's probabilities; None for a numeric target.
    classification: Optional[Classification] = None
    #: The streamed pass that produced ``results`` (a table read in batches), else None, and its row
    #: sample as a Table (built on the worker thread: typing the rows is not GUI-thread work).
    streamed: object = None
    sample: Optional[Table] = None


@dataclass(frozen=True)
class AlphaUpdate:
    """What :meth:`Session.compute_for_alpha` produced: the comparisons at one set of α choices.

    ``key`` is the session key (see :meth:`Session.key`) the update was computed
    for; :meth:`Session.apply_alpha_update` installs it only while that key holds.
    """

    key: str
    name: Optional[str]
    alpha: Optional[float]
    models: Dict[str, LinearModel] = field(default_factory=dict)
    heldout: Dict[str, np.ndarray] = field(default_factory=dict)
    agreement: Optional[Agreement] = None
    structure: Optional[Structure] = None
    stress: Tuple[StressResult, ...] = ()
    sweeps: Tuple[StressSweep, ...] = ()
    ranges: Optional[Ranges] = None
    classification: Optional[Classification] = None


_DERIVED_KEYS = ("models", "heldout", "agreement", "structure", "stress", "sweeps", "ranges")
#: Derived results only a yes/no outcome has (None for a numeric target).
_BINARY_KEYS = ("classification",)


@dataclass(frozen=True)
class SessionState:
    """The editable part of a session: what undo restores and the project file keeps."""

    roles: Roles
    settings: FitSettings
    chosen_alpha: dict
    extra_fits: tuple  # of dict(name, family, alpha)
    stress_configs: tuple
    bootstrap: int
    notes: str
    view_state: dict
    #: The threshold the person chose for a yes/no outcome's probabilities, with their note:
    #: {"value": float in (0, 1), "note": str}, or None.
    threshold: Optional[dict] = None
    #: How the rows are read: memory budget and cluster (see :class:`regbench.models.spec.RowSource`).
    rows: RowSource = RowSource()


_State = SessionState  # older name, kept for code written before SessionState was public

#: What :meth:`Session.subscribe` callbacks receive as ``event``, one kind per kind of change
#: (``detail`` in brackets).  A view redraws only what an event touches.
EVENTS = {
    "roles": "the column roles changed; the design was rebuilt and the fits cleared (the new Roles)",
    "settings": "the engine settings changed; the fits were cleared (the new FitSettings)",
    "alpha": "a family's chosen α changed ({name, alpha}; alpha None: back to the CV choice)",
    "extra_fits": "an extra fit was added or removed (the entry, or {removed: name})",
    "stress": "a stress test was added or removed ({added: i} or {removed: i})",
    "bootstrap": "the stability refit count changed (the count)",
    "notes": "the notes text changed (the text)",
    "threshold": "the recorded threshold of a yes/no outcome changed ({value, note}, or None when cleared)",
    "view_state": "a value the window keeps changed ({key, value})",
    "rows": "the memory budget or cluster changed (the new RowSource); it applies to the next pass over the rows",
    "undo": "an edit was taken back; anything may have changed (None)",
    "results": "new fits were installed, with stability and comparisons where computed (None)",
    "derived": "models, agreement, structure and stress results at the chosen α were installed (None)",
    "saved": "the session was written to a project file (the path)",
}


class Session:
    """The document a person works on.

    Parameters
    ----------
    table : Table
    roles : Roles
    settings : FitSettings, optional

    Attributes
    ----------
    table : Table
    design : Design
        Rebuilt whenever the roles change.
    results : FitResults or None
    path : str or None
        The project file this session was loaded from or last saved to.
    dirty : bool
        Changed since the last save or load.
    """

    def __init__(self, table: Table, roles: Roles, settings: Optional[FitSettings] = None, *, design=None):
        roles = _roles(roles)
        self.table = table
        settings = _normalized(settings or FitSettings())
        self._state = SessionState(roles=roles, settings=settings, chosen_alpha={},
                             extra_fits=(), stress_configs=(), bootstrap=DEFAULT_BOOTSTRAP,
                             notes="", view_state={})
        # ``design``: already built from this table and these roles (the project loader's check).
        self.design = design if design is not None else build_design(table, roles)
        self.results = None
        self.stability = None
        self.stability_alphas: dict = {}
        self._cache: dict = {}
        self._undo: deque = deque(maxlen=UNDO_DEPTH)
        self._last_tag = None
        self._observers: list = []
        self._fingerprint: Optional[str] = None
        self.path: Optional[str] = None
        self.dirty = False
        #: Times from the project file (UTC ISO), None until loaded or saved.
        self.created: Optional[str] = None
        self.saved: Optional[str] = None
        #: How a loaded project's cached results were treated: 'none', 'used' or 'stale'.
        self.cache_status = "none"
        #: One line for the person when a loaded project's cached results were not used, else None.
        self.cache_note: Optional[str] = None
        #: The table file read in batches (absolute path), or None when the table is in memory.
        self.source: Optional[str] = None
        #: The last pass over a table read in batches (a StreamedFit), else None.
        self.streamed = None
        #: A table read in batches: its first rows with every column (the roles are chosen from them;
        #: the pass's row sample holds only the columns the fit reads), else None.
        self.first_rows: Optional[Table] = None

    # -- constructors --------------------------------------------------------------------

    @classmethod
    def from_table_file(cls, path, roles, settings=None, encoding=None, sheet=None, **read_options) -> "Session":
        return cls(read_table(path, encoding=encoding, sheet=sheet, **read_options), roles, settings)

    @classmethod
    def from_table(cls, table: Table, roles, settings=None) -> "Session":
        return cls(table, roles, settings)

    @classmethod
    def from_batches(cls, path, roles, settings=None, rows: Optional[RowSource] = None, progress=None,
                     cancel=None) -> "Session":
        """A session on a table read in batches (or on a cluster): one pass fits every model.

        The pass (:func:`regbench.batches.run_pass`) is the long part; a window runs
        it on its worker thread and builds the session with :meth:`from_streamed`.
        """
        rows = check_rows(rows or RowSource())
        settings = _normalized(settings or FitSettings())
        streamed = run_pass(path, _roles(roles), settings, rows, progress=progress, cancel=cancel)
        return cls.from_streamed(path, streamed, roles, settings, rows)

    @classmethod
    def from_first_rows(cls, path, table: Table, roles, settings=None, rows: Optional[RowSource] = None) -> "Session":
        """A session on a table to be read in batches, before its pass: nothing long has run yet.

        ``table`` holds the file's first rows with every column, so the roles can be chosen as for a
        table in memory; the design is theirs until :meth:`compute_results` runs the pass over every
        row (when the person fits), which replaces table and design with the pass's row sample.
        :attr:`first_rows` keeps them for choosing roles afterwards.
        """
        from pathlib import Path

        session = cls(table, roles, settings)
        session.source = str(Path(path).resolve())
        session.first_rows = table
        session._state = replace(session._state, rows=check_rows(rows or RowSource()))
        return session

    @property
    def awaiting_pass(self) -> bool:
        """True for a table read in batches whose pass has not run yet (the rows at hand are its first rows)."""
        return self.source is not None and self.streamed is None

    @classmethod
    def from_streamed(cls, path, streamed, roles, settings=None, rows: Optional[RowSource] = None,
                      state: Optional[SessionState] = None) -> "Session":
        """A session on the table at ``path`` from a pass already run over it (a StreamedFit).

        The session's ``table`` holds the pass's seeded row sample, its ``design``
        the sample's rows and its ``results`` the fits on every usable row.
        ``state`` (as a project file keeps it) replaces roles, settings and rows
        when given; the session then has no undo history.
        """
        if state is not None:
            roles, settings, rows = state.roles, state.settings, state.rows
        from pathlib import Path

        source = str(Path(path).resolve())
        table = sample_table(streamed.design, source, _sample_sentence(streamed))
        session = cls(table, roles, settings, design=streamed.design)
        session.source = source
        session._state = replace(session._state, rows=check_rows(rows or RowSource()))
        session._install_pass(streamed, table)
        session.results = streamed.results
        if state is not None:
            session._install_loaded(state, results=streamed.results, design=streamed.design)
        session.dirty = False
        return session

    @classmethod
    def from_state(cls, table: Table, state: SessionState, design=None) -> "Session":
        """A session on ``table`` in ``state`` (as a project file keeps it), with no fits and no undo history.

        ``design``, when given, is the design of ``state.roles`` on ``table`` already built (and
        checked) by the caller, so the table is coded once.
        """
        session = cls(table, state.roles, state.settings, design=design)
        session._install_loaded(state, design=design)
        return session

    # -- read-only views of the state ------------------------------------------------------

    @property
    def roles(self) -> Roles:
        return self._state.roles

    @property
    def settings(self) -> FitSettings:
        return self._state.settings

    @property
    def chosen_alpha(self) -> dict:
        return dict(self._state.chosen_alpha)

    @property
    def extra_fits(self) -> list:
        return [dict(e) for e in self._state.extra_fits]

    @property
    def stress_configs(self) -> list:
        return list(self._state.stress_configs)

    @property
    def bootstrap(self) -> int:
        return self._state.bootstrap

    @property
    def notes(self) -> str:
        return self._state.notes

    @property
    def threshold(self) -> Optional[dict]:
        """The recorded threshold of a yes/no outcome ({'value', 'note'}) or None."""
        t = self._state.threshold
        return None if t is None else dict(t)

    @property
    def view_state(self) -> dict:
        return copy.deepcopy(self._state.view_state)

    @property
    def table_hash(self) -> str:
        if self._fingerprint is None:
            # A table read in batches is known by its file, never hashed cell by cell (a second pass).
            self._fingerprint = file_fingerprint(self.source) if self.source else table_fingerprint(self.table)
        return self._fingerprint

    def adopt_table_hash(self, fingerprint: str) -> None:
        """Take ``fingerprint`` as the table's (:attr:`table_hash`) instead of hashing every cell again.

        For a project file whose cached results were computed on the very bytes of its stored table
        (checked by SHA-256); nothing changes once the table has been hashed.
        """
        if self._fingerprint is None:
            self._fingerprint = str(fingerprint)

    @property
    def rows(self) -> RowSource:
        """How the rows are read: memory budget and cluster."""
        return self._state.rows

    @property
    def sampled(self) -> bool:
        """True when the rows at hand are a seeded sample of a table read in batches."""
        return bool(self.streamed is not None and self.streamed.sampled)

    @property
    def row_sample_note(self) -> Optional[str]:
        """One sentence on which rows the row-level views use (a table read in batches), else None."""
        return None if self.streamed is None else _sample_sentence(self.streamed)

    def sample_limits(self) -> dict:
        """What cannot be shown on a row sample, one line each ('heldout', 'stability'); empty otherwise."""
        if not self.sampled:
            return {}
        out = {k: v for k, v in NOT_ON_SAMPLE.items()
               if k != "stability" and (k != "heldout" or not self.streamed.fold_stats)}
        if self.bootstrap and getattr(self.streamed, "group_sums", None) is None:
            # Kept only with a group column and within the memory budget; the pass says which.
            out["stability"] = getattr(self.streamed, "group_sums_note", "") or NOT_ON_SAMPLE["stability"]
        return out

    def _sample_pass(self, streamed=None):
        """The pass whose row sample the design holds (``streamed``, a fresh one, else the session's), or None
        when the rows at hand are every row."""
        st = streamed if streamed is not None else self.streamed
        return st if st is not None and st.sampled else None

    def fit_key(self, state: Optional[SessionState] = None) -> str:
        s = state or self._state
        return _digest({"table": self.table_hash, "roles": s.roles.to_dict(), "settings": _fit_settings(s.settings)})

    def settings_hash(self) -> str:
        """Hash of roles + settings: cached fits are reused only when it matches."""
        return _digest({"roles": self.roles.to_dict(), "settings": _fit_settings(self.settings)})

    def key(self, state: Optional[SessionState] = None) -> str:
        s = state or self._state
        parts = {
            "fit": self.fit_key(s),
            "alpha": {k: s.chosen_alpha[k] for k in sorted(s.chosen_alpha)},
            "extra": list(s.extra_fits),
            "stress": [stress_to_dict(c) for c in s.stress_configs],
            "bootstrap": s.bootstrap,
        }
        if s.settings.range_tolerance is not None:  # absent for the default, so older keys still match
            parts["range_tolerance"] = s.settings.range_tolerance
        if s.threshold is not None:  # absent unless recorded, so numeric keys are unchanged
            parts["threshold"] = s.threshold
        return _digest(parts)

    @property
    def dirty(self) -> bool:
        """Changed since the last save or load (an undo back to that state makes it clean again)."""
        return self._dirty

    @dirty.setter
    def dirty(self, value: bool) -> None:
        self._dirty = bool(value)
        if not value:
            self._clean_state = self._state

    @contextlib.contextmanager
    def document_state_kept(self):
        """Within this block a save (a recovery copy elsewhere) leaves ``path`` and the unsaved state as they were."""
        kept = (self.path, self._dirty, getattr(self, "_clean_state", None))
        try:
            yield self
        finally:
            self.path, self._dirty, self._clean_state = kept

    # -- observers ------------------------------------------------------------------------

    def subscribe(self, callback: Callable[[str, object], None]) -> None:
        """Call ``callback(event, detail)`` after every change."""
        if callback not in self._observers:
            self._observers.append(callback)

    def unsubscribe(self, callback) -> None:
        if callback in self._observers:
            self._observers.remove(callback)

    def _notify(self, event: str, detail=None) -> None:
        for cb in list(self._observers):
            cb(event, detail)

    # -- edits ----------------------------------------------------------------------------

    def _snapshot(self):
        # The row sample (table and pass) goes with the design: a table read in batches changes both.
        return (self._state, self.design, self.results, self.stability, dict(self.stability_alphas),
                dict(self._cache), self.table, self.streamed)

    def _restore(self, snap) -> None:
        (self._state, self.design, self.results, self.stability, self.stability_alphas, self._cache,
         self.table, self.streamed) = snap

    def _edit(self, tag, new_state: SessionState, event: str, detail=None, coalesce: bool = False) -> None:
        if new_state == self._state:
            return
        if not (coalesce and self._last_tag == tag and self._undo):
            self._undo.append(self._snapshot())
        self._last_tag = tag if coalesce else None
        old = self._state
        self._state = new_state
        if new_state.roles != old.roles:
            self.design = self._design_for(new_state.roles)
        if new_state.roles != old.roles or _fit_settings(new_state.settings) != _fit_settings(old.settings):
            self.results = None
            self.stability = None
            self.stability_alphas = {}
            self._cache = {}
        elif (new_state.chosen_alpha != old.chosen_alpha or new_state.extra_fits != old.extra_fits):
            self._cache = {}
        elif new_state.stress_configs != old.stress_configs or new_state.threshold != old.threshold:
            self._cache.pop("stress", None)
            self._cache.pop("sweeps", None)
        if new_state.settings.range_tolerance != old.settings.range_tolerance:
            self._cache.pop("ranges", None)
        if new_state.threshold != old.threshold:
            self._cache.pop("classification", None)
        self.dirty = True
        self._notify(event, detail)

    def set_roles(self, roles: Roles) -> None:
        """Change the column roles; the design is rebuilt and the fits are cleared.

        Raises DataError (and changes nothing) when the roles cannot be used.
        """
        roles = _roles(roles)
        design = self._design_for(roles)  # raise before anything changes
        state = replace(self._state, roles=roles)
        # A penalty factor of a column that is no longer a predictor has nothing to act on.
        keep = set(design.sources) | {u.column for u in design.unusable}
        pf = tuple((c, v) for c, v in self.settings.penalty_factors if c in keep)
        if pf != tuple(self.settings.penalty_factors):
            state = replace(state, settings=replace(self.settings, penalty_factors=pf))
        self._edit("roles", state, "roles", roles)

    def _design_for(self, roles: Roles):
        """The design ``roles`` make of the table; raises DataError when they cannot be used.

        For a table read in batches the roles are checked against the file's columns and the
        design of the last pass is kept until the next pass replaces it (a design needs a pass).
        """
        if self.source is None:
            return build_design(self.table, roles)
        check_roles(self.source, roles)  # the schema only: the pass itself runs on a worker
        return self.design

    def set_rows(self, rows) -> None:
        """Set the memory budget and cluster (a RowSource or a dict of its fields).

        They decide how a table is read when it is opened, and where the next pass over a table read in
        batches runs; the fits stay (every route gives the same numbers).  Raises DataError naming the setting.
        """
        rows = check_rows(rows)
        self._edit("rows", replace(self._state, rows=rows), "rows", rows)

    def add_derived(self, operation: str, columns) -> str:
        """Add a derived column (see :mod:`regbench.data.derive`); returns its name.

        It joins the predictors when they are listed explicitly.  Raises DataError
        (and changes nothing) when the operation cannot take the column(s).
        """
        d = make_derived(operation, columns)
        roles = self.roles
        preds = roles.predictors + ((d.name,) if roles.predictors else ())
        self.set_roles(replace(roles, derived=roles.derived + (d,), predictors=preds))
        return d.name

    def remove_derived(self, name: str) -> None:
        """Remove a derived column and every role that names it (and derived columns built on it)."""
        roles = self.roles
        gone = {name}
        keep = []
        for d in roles.derived:
            if d.name in gone or gone.intersection(d.columns):
                gone.add(d.name)
            else:
                keep.append(d)
        if len(keep) == len(roles.derived):
            raise DataError(f"'{name}' is not a derived column")
        if roles.target in gone:
            raise DataError(f"'{name}' is the target; choose another target before removing it")
        self.set_roles(replace(
            roles, derived=tuple(keep),
            predictors=tuple(c for c in roles.predictors if c not in gone),
            categorical=tuple(c for c in roles.categorical if c not in gone),
            weights=None if roles.weights in gone else roles.weights,
            groups=None if roles.groups in gone else roles.groups))

    @property
    def columns_table(self) -> Table:
        """The table with the derived columns appended: every column a role may name."""
        derived = self.roles.derived
        if getattr(self, "_columns_table_for", None) != (id(self.table), derived):
            self._columns_table = apply_derived(self.table, derived)
            self._columns_table_for = (id(self.table), derived)
        return self._columns_table

    def set_settings(self, settings: FitSettings) -> None:
        settings = _normalized(settings)
        self._edit("settings", replace(self._state, settings=settings), "settings", settings)

    def set_penalty_factor(self, column: str, factor: Optional[float]) -> None:
        """Set the penalty factor of a predictor column (None or 1: back to the default).

        Every penalized model then penalizes the column's coefficient by α·factor
        (0: unpenalized and always kept); a categorical column's factor applies to
        all its indicators.  The fits are cleared.  Raises DataError (and changes
        nothing) for a column that is not a predictor or a factor out of range.
        """
        design = self._design_for(self.roles)
        if column not in set(design.sources) | {u.column for u in design.unusable}:
            raise DataError(f"'{column}' is not a predictor of this session; "
                            f"predictors are: {', '.join(dict.fromkeys(design.sources))}")
        given = dict(self.settings.penalty_factors)
        if factor is None or (isinstance(factor, (int, float)) and not isinstance(factor, bool) and factor == 1):
            given.pop(column, None)
        else:
            given[column] = factor  # checked with every other setting by set_settings
        self.set_settings(replace(self.settings, penalty_factors=tuple(given.items())))

    def set_alpha(self, name: str, alpha: Optional[float]) -> None:
        """Override the CV choice of α for model ``name`` (None: back to the CV choice)."""
        if name not in penalized_names(self.settings):
            raise DataError(f"'{name}' is not a penalized model of this session; "
                            f"choose one of {', '.join(penalized_names(self.settings))}")
        chosen = dict(self._state.chosen_alpha)
        if alpha is None:
            chosen.pop(name, None)
        else:
            alpha = _positive(alpha, f"α for {name}")
            chosen[name] = alpha
        self._edit(("alpha", name), replace(self._state, chosen_alpha=chosen), "alpha",
                   {"name": name, "alpha": alpha}, coalesce=True)

    def add_extra_fit(self, family: str, alpha: float, name: Optional[str] = None) -> str:
        """Add a fit of ``family`` at another α; returns its name."""
        if family not in penalized_names(self.settings):
            raise DataError(f"'{family}' is not a penalized model of this session; "
                            f"choose one of {', '.join(penalized_names(self.settings))}")
        alpha = _positive(alpha, f"α for {family}")
        taken = set(penalized_names(self.settings)) | {"ols"} | {e["name"] for e in self._state.extra_fits}
        if name is None:
            name = f"{family}@{alpha:.3g}"
            base, k = name, 2
            while name in taken:
                name, k = f"{base}#{k}", k + 1
        elif not isinstance(name, str) or not name.strip() or name in taken:
            raise DataError(f"extra fit name {name!r} is empty or already used; choose another name")
        entry = {"name": name, "family": family, "alpha": alpha}
        self._edit("extra", replace(self._state, extra_fits=self._state.extra_fits + (entry,)),
                   "extra_fits", entry)
        return name

    def remove_extra_fit(self, name: str) -> None:
        fits = tuple(e for e in self._state.extra_fits if e["name"] != name)
        if len(fits) == len(self._state.extra_fits):
            raise DataError(f"there is no extra fit named {name!r}")
        self._edit("extra", replace(self._state, extra_fits=fits), "extra_fits", {"removed": name})

    def add_stress(self, config) -> int:
        """Add a stress configuration; returns its index."""
        check_stress(config, self.design, self.table)
        configs = self._state.stress_configs + (config,)
        self._edit("stress", replace(self._state, stress_configs=configs), "stress", {"added": len(configs) - 1})
        return len(configs) - 1

    def remove_stress(self, index: int) -> None:
        configs = list(self._state.stress_configs)
        if not 0 <= index < len(configs):
            raise DataError(f"there is no stress configuration number {index + 1}")
        del configs[index]
        self._edit("stress", replace(self._state, stress_configs=tuple(configs)), "stress", {"removed": index})

    def set_bootstrap(self, n: int) -> None:
        _check_bootstrap(n)
        self._edit("bootstrap", replace(self._state, bootstrap=int(n)), "bootstrap", int(n))

    def set_threshold(self, value: Optional[float], note: str = "") -> None:
        """Record the threshold the person chose for the probabilities (None clears it).

        The tool recommends no threshold; it records the one chosen, with the note
        saying why, so the report and stress tests can show what it flags.
        """
        if value is None:
            new = None
        else:
            v = _positive(value, "threshold")
            if not 0.0 < v < 1.0:
                raise DataError(f"threshold {value!r} must be a probability between 0 and 1 (e.g. 0.2)")
            if not isinstance(note, str):
                raise DataError("the threshold's note must be text")
            new = {"value": v, "note": note}
        self._edit("threshold", replace(self._state, threshold=new), "threshold", new)

    def set_notes(self, text: str) -> None:
        if not isinstance(text, str):
            raise DataError("notes must be text")
        self._edit("notes", replace(self._state, notes=text), "notes", text, coalesce=True)

    def set_view_state(self, key: str, value) -> None:
        """Keep a JSON-able value the GUI wants back when the project reopens."""
        try:
            json.dumps(value, allow_nan=False)
        except (TypeError, ValueError):
            raise DataError(f"view state '{key}' must be plain JSON values (numbers, text, lists, dicts)") from None
        vs = copy.deepcopy(self._state.view_state)
        vs[str(key)] = copy.deepcopy(value)
        self._edit(("view", key), replace(self._state, view_state=vs), "view_state", {"key": key, "value": value},
                   coalesce=True)

    @property
    def can_undo(self) -> bool:
        return bool(self._undo)

    def undo(self) -> bool:
        """Take back the last edit; returns False when there is nothing to undo."""
        if not self._undo:
            return False
        self._restore(self._undo.pop())
        self._last_tag = None
        self._dirty = self._state != getattr(self, "_clean_state", None)
        self._notify("undo", None)
        return True

    # -- computation ---------------------------------------------------------------------

    def alphas(self) -> dict:
        """Chosen α per penalized family: the user's choice, else the engine's."""
        out = {}
        if self.results is None:
            return dict(self._state.chosen_alpha)
        for name, pf in self.results.penalized.items():
            out[name] = float(self._state.chosen_alpha.get(name, pf.alpha))
        return out

    def compute_results(self, progress=None, cancel=None, bootstrap=None, refit: bool = False) -> ComputedResults:
        """Fit and analyse without changing the session (safe on a worker thread).

        Parameters
        ----------
        progress : callable(done, total, message), optional
        cancel : callable() -> bool, optional
        bootstrap : int, optional
            Stability refits; default the session's bootstrap count (0 skips).
        refit : bool
            Fit again even when the installed fits match the current state.
        """
        state, design, table_results = self._state, self.design, self.results
        if bootstrap is not None:
            _check_bootstrap(bootstrap)
        n_boot = state.bootstrap if bootstrap is None else int(bootstrap)
        fit_key = self.fit_key(state)
        key = self.key(state) if n_boot == state.bootstrap else _digest({"base": self.key(state), "boot": n_boot})
        total = 3 if n_boot else 2  # fit, compare (agreement, structure, stress), stability
        streamed, sampled, sample = None, self.sampled, None
        if (table_results is None or refit) and self.source is not None:
            report(progress, 0, total * 100, "one pass over the rows of the table, read in batches")
            streamed = run_pass(self.source, state.roles, state.settings, state.rows,
                                progress=_within(progress, 0, total), cancel=cancel)
            design, results, sampled = streamed.design, streamed.results, streamed.sampled
            sample = sample_table(design, self.source, _sample_sentence(streamed))
        elif table_results is None or refit:
            report(progress, 0, total * 100, "fitting the models")
            results = engine.fit_all(design, state.settings, progress=_within(progress, 0, total), cancel=cancel)
        else:
            results = table_results
        check(cancel)
        report(progress, 100, total * 100, "comparing the models and running the stress tests")
        derived = _derive(design, results, state, cancel, sample=self._sample_pass(streamed))
        check(cancel)
        stability, alphas = None, _alphas_of(results, state)
        # On a row sample, grouped refits add up every group's cross-products kept by the pass; without
        # them (no group column, or more than the memory budget allows) stability is withheld, and
        # sample_limits says why.
        sums = getattr(self._sample_pass(streamed), "group_sums", None) if sampled else None
        if n_boot and sampled and sums is None:
            n_boot = 0
        if n_boot:
            report(progress, 200, total * 100, f"stability ({n_boot} refits)")
            stability = bootstrap_stability(design, state.settings, alphas, n_boot=n_boot, seed=state.settings.seed,
                                            progress=_within(progress, 2, total), cancel=cancel,
                                            relaxations=relaxations_of(results),
                                            full_ols=getattr(results, "ols", None), group_sums=sums)
        report(progress, total * 100, total * 100, "done")
        return ComputedResults(fit_key=fit_key, key=key, results=results, stability=stability,
                               stability_alphas=alphas if stability is not None else {}, streamed=streamed,
                               sample=sample, **derived)

    def apply_results(self, computed: ComputedResults) -> bool:
        """Install what :meth:`compute_results` produced (GUI thread).

        Returns False, changing nothing, when the table, roles or settings changed
        meanwhile; when only α, extra fits or stress tests changed, the fits are
        installed and the comparisons are recomputed on demand.
        """
        if computed.fit_key != self.fit_key():
            return False
        if computed.streamed is not None:
            self._install_pass(computed.streamed, computed.sample)
        self.results = computed.results
        if computed.key == self.key() or computed.stability_alphas == _alphas_of(computed.results, self._state):
            self.stability = computed.stability
            self.stability_alphas = dict(computed.stability_alphas)
        if computed.key == self.key():
            self._cache = {"models": computed.models, "heldout": computed.heldout, "agreement": computed.agreement,
                           "structure": computed.structure, "stress": computed.stress, "sweeps": computed.sweeps,
                           "ranges": computed.ranges, "classification": computed.classification}
        else:
            self._cache = {}
        self.dirty = True
        self._notify("results", None)
        return True

    def compute(self, progress=None, cancel=None, bootstrap=None, refit: bool = False) -> None:
        """compute_results + apply_results in one go (for scripts and the CLI)."""
        if bootstrap is not None:
            _check_bootstrap(bootstrap)
        if bootstrap is not None and int(bootstrap) != self.bootstrap:
            self._state = replace(self._state, bootstrap=int(bootstrap))
            bootstrap = None
        self.apply_results(self.compute_results(progress, cancel, bootstrap=bootstrap, refit=refit))

    @property
    def derived_ready(self) -> bool:
        """True when models, agreement, structure and stress results are at hand (no work to show them)."""
        return self.results is not None and all(k in self._cache for k in _DERIVED_KEYS)

    def compute_for_alpha(self, name: Optional[str] = None, alpha: Optional[float] = None,
                          cancel=None) -> AlphaUpdate:
        """Models, agreement, structure and stress results with ``name`` at ``alpha`` (safe on a worker thread).

        Changes nothing.  The other families keep their chosen α, extra fits and
        stress tests stay as they are.  ``name=None`` computes for the current
        choices (after an edit of extra fits or stress tests); ``alpha=None``
        means the CV choice of ``name``.

        Raises
        ------
        DataError
            When there are no fits yet or ``name`` is not a penalized family.
        """
        state, design, results, have = self._state, self.design, self.results, dict(self._cache)
        if results is None:
            raise DataError("there are no fits yet; fit the models before choosing an α")
        if name is not None:
            if name not in results.penalized:
                raise DataError(f"'{name}' is not a penalized model of this session; "
                                f"choose one of {', '.join(results.penalized)}")
            chosen = dict(state.chosen_alpha)
            if alpha is None:
                chosen.pop(name, None)
            else:
                chosen[name] = _positive(alpha, f"α for {name}")
            if chosen != state.chosen_alpha:
                state, have = replace(state, chosen_alpha=chosen), {}
        derived = _derive(design, results, state, cancel, have, sample=self._sample_pass())
        return AlphaUpdate(key=self.key(state), name=name, alpha=None if alpha is None else float(alpha), **derived)

    def apply_alpha_update(self, update: AlphaUpdate) -> bool:
        """Install what :meth:`compute_for_alpha` produced (GUI thread).

        Returns False, changing nothing, when the session's α choices, extra fits,
        stress tests or fits no longer match the ones the update was computed for.
        """
        if self.results is None or update.key != self.key():
            return False
        self._cache = {k: getattr(update, k) for k in _DERIVED_KEYS + _BINARY_KEYS}
        self._notify("derived", None)
        return True

    @property
    def stability_current(self) -> bool:
        """True when the stability result was computed at the α now chosen."""
        return self.stability is not None and self.stability_alphas == self.alphas()

    def derived_results(self) -> dict:
        """Models at the chosen α, held-out predictions, agreement, structure, stress results and sweeps
        (computed here when missing); empty before a fit.  The dict is the session's own: do not change it."""
        if self.results is None:
            return {}
        if any(k not in self._cache for k in ("agreement", "stress", "ranges")) or (
                self.design.outcome == "binary" and self._cache.get("classification") is None):
            self._cache.update(_derive(self.design, self.results, self._state, None, self._cache,
                                       sample=self._sample_pass()))
        return self._cache

    _derived = derived_results

    def models(self) -> dict:
        """name -> LinearModel at the chosen α (plus extra fits); empty before a fit."""
        return dict(self._derived().get("models", {}))

    def heldout(self) -> dict:
        return dict(self._derived().get("heldout", {}))

    def agreement(self):
        return self._derived().get("agreement")

    def structure(self):
        return self._derived().get("structure")

    def fit_quality(self):
        """Each model at the chosen α against the target (see :mod:`regbench.analysis.fit_quality`);
        None before a fit.  Cheap (one product per model), so it is computed when asked."""
        models = self.models()
        if not models:
            return None

        return fit_quality(self.design, models, self.heldout())

    def stress_results(self) -> tuple:
        return tuple(self._derived().get("stress", ()))

    def ranges(self):
        """Ranges over every near-best model (:class:`regbench.analysis.ranges.Ranges`), None before a fit."""
        return self._derived().get("ranges")

    def set_range_tolerance(self, tolerance: Optional[float]) -> None:
        """Set τ of the ranges over near-best models (None: one standard error of the lowest CV error).

        Only the ranges are recomputed; the fits stay.
        """
        self.set_settings(replace(self.settings, range_tolerance=None if tolerance is None else float(tolerance)))

    def stress_sweeps(self) -> tuple:
        return tuple(self._derived().get("sweeps", ()))

    def classification(self):
        """Calibration and discrimination of every model (a yes/no outcome), else None."""
        return self._derived().get("classification")

    def _install_pass(self, streamed, table: Optional[Table] = None) -> None:
        """Take the design and row sample of a pass over a table read in batches."""
        self.streamed = streamed
        self.design = streamed.design
        self.table = table if table is not None else sample_table(streamed.design, self.source,
                                                                  _sample_sentence(streamed))
        self._columns_table_for = None

    # -- used by the project layer --------------------------------------------------------

    @property
    def state(self) -> SessionState:
        """The editable part of the session (immutable; change it through the edit methods)."""
        return self._state

    def clear_history(self) -> None:
        """Forget the undo history (a freshly built or loaded document has nothing to undo)."""
        self._undo.clear()
        self._last_tag = None

    def install_cached(self, results, stability=None, stability_alphas=None, derived: Optional[dict] = None) -> None:
        """Install results read back from a project file's cache (no undo step, no event).

        ``stability`` is kept with the α it was computed at (``stability_alphas``);
        :attr:`stability_current` says whether that is still the chosen α.
        ``derived`` (see :meth:`derived_results`) is used as given; pass it only when
        the cache's key matched :meth:`key`.
        """
        self.results = results
        self.stability = stability
        self.stability_alphas = dict(stability_alphas or {}) if stability is not None else {}
        self._cache = dict(derived or {})

    def mark_saved(self, path: str, created: str, saved: str) -> None:
        """Record that the session was written to ``path`` (times in UTC ISO) and tell the observers."""
        self.path = path
        self.created = created
        self.saved = saved
        self.dirty = False
        self._notify("saved", path)

    def mark_loaded(self, path: str, created: Optional[str], saved: Optional[str], cache_status: str,
                    dirty: bool = False, note: Optional[str] = None) -> None:
        """Record where a loaded session came from and how its cached results were treated
        ('none', 'used' or 'stale'; ``note`` says why in one line when they were not used)."""
        self.path = path
        self.created = created
        self.saved = saved
        self.cache_status = cache_status
        self.cache_note = note
        self.dirty = dirty

    def _install_loaded(self, state: SessionState, results=None, stability=None, stability_alphas=None,
                        derived: Optional[dict] = None, design=None) -> None:
        self._state = state
        self.design = design if design is not None else build_design(self.table, state.roles)
        self.results = results
        self.stability = stability
        self.stability_alphas = dict(stability_alphas or {})
        self._cache = dict(derived or {})
        self._undo.clear()
        self.dirty = False


def _sample_sentence(streamed) -> str:
    """The one sentence on which rows a pass over a table read in batches left for the row-level views."""
    return row_sample_sentence(streamed.design.n, streamed.rows_used, streamed.results.settings.seed,
                               streamed.sampled, streamed.route)


def _within(progress, step: int, total: int):
    """Progress of one step's sub-work, reported on the whole computation's scale (×100)."""
    if progress is None:
        return None

    def sub(done, n, message):
        frac = min(max(done / n, 0.0), 1.0) if n else 0.0
        progress(step * 100 + int(100 * frac), total * 100, message)

    return sub


def _alphas_of(results, state: SessionState) -> dict:
    return {name: float(state.chosen_alpha.get(name, pf.alpha)) for name, pf in results.penalized.items()}


def _derive(design, results, state: SessionState, cancel, have: Optional[dict] = None, sample=None) -> dict:
    """Models at the chosen α, held-out predictions, agreement, structure, stress results.

    ``sample``: the pass (a StreamedFit) whose seeded row sample the design holds, when it is a sample of a
    table read in batches; held-out predictions then come from its folds' statistics over every row (none
    when the pass did not keep them; ``Session.sample_limits`` says so).

    On one BLAS thread, as the fit and the stability refits run: these are p×p solves and products
    of moderate size, and on shared cores BLAS threads waiting on each other cost more than they
    save (the 20,000 × 1,000 project's comparisons: see DEVELOPERS.md, "Wide projects").
    """
    with one_blas_thread():
        return _derive_all(design, results, state, cancel, have, sample)


def _derive_all(design, results, state: SessionState, cancel, have: Optional[dict] = None, sample=None) -> dict:
    """:func:`_derive`'s work."""
    have = have or {}
    models = have.get("models")
    if models is None:
        models = {}
        base = results.models()
        for name, model in base.items():
            if name in state.chosen_alpha and name in results.penalized:
                models[name] = engine.model_at(design, results, name, state.chosen_alpha[name])
            else:
                models[name] = model
        for e in state.extra_fits:
            if e["family"] in results.penalized:
                models[e["name"]] = replace(engine.model_at(design, results, e["family"], e["alpha"]), name=e["name"])
    check(cancel)
    heldout = have.get("heldout")
    if heldout is None:
        if sample is None:
            heldout = engine.heldout_predictions(design, results, models)
        elif sample.fold_stats:
            # Each fold's model from every row's cross-products, predicting the sampled rows of that fold.
            heldout = engine.heldout_predictions(design, results, models, fold_stats=sample.fold_stats)
        else:
            heldout = {}
    agreement, structure = have.get("agreement"), have.get("structure")
    if agreement is None:
        agreement = compare_models(design, models, heldout)
    if structure is None:
        structure = compare_structure(design, results, models)
    check(cancel)
    stress, sweeps = have.get("stress"), have.get("sweeps")
    if stress is None or sweeps is None:
        thr = None if state.threshold is None else float(state.threshold["value"])
        stress = tuple(run_stress(design, models, c, threshold=thr) for c in state.stress_configs)
        seen, sw = set(), []
        for c in state.stress_configs:
            if (c.column, c.kind) in seen:
                continue
            seen.add((c.column, c.kind))
            sw.append(stress_sweep(design, models, c.column, c.kind, seed=c.seed, tolerance=c.tolerance))
        sweeps = tuple(sw)
    ranges = have.get("ranges") if "models" in have else None
    # Exact for least squares; for a yes/no outcome the quadratic approximation, labelled in the result.
    if ranges is None:
        try:
            ranges = compute_ranges(design, results, state.settings.range_tolerance, models=models)
        except (ValueError, np.linalg.LinAlgError):
            # A separated yes/no outcome (ranges_unavailable says why), or a fit without OLS's factor or the
            # cross-products (never from fit_all): no ranges, the rest stands.
            ranges = None
    classification = have.get("classification")
    if classification is None and design.outcome == "binary":
        classification = assess(design, models, heldout,
                                None if state.threshold is None else float(state.threshold["value"]))
    return {"models": models, "heldout": heldout, "agreement": agreement, "structure": structure,
            "ranges": ranges, "stress": stress, "sweeps": sweeps, "classification": classification}


def _check_bootstrap(n) -> None:
    spec.check_value(BOOTSTRAP, n, DataError, "bootstrap count")


def _positive(x, what: str) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise DataError(f"{what} must be a positive number, not {x!r}") from None
    if isinstance(x, bool) or not (v > 0 and math.isfinite(v)):
        raise DataError(f"{what} must be a positive number, not {x!r}")
    return v


def _roles(roles) -> Roles:
    """Roles with tuples and plain text, from a Roles or a dict of the same fields."""
    d = roles.to_dict() if isinstance(roles, Roles) else dict(roles)
    return Roles.from_dict(d)


def _fit_settings(settings: FitSettings) -> dict:
    """The settings that decide the fits: all but the range tolerance, which only reads them."""
    d = settings.to_dict()
    d.pop("range_tolerance", None)
    return d


def _normalized(settings: FitSettings) -> FitSettings:
    """Checked settings with plain Python types, so they hash the same before and after a save."""
    check_settings(settings)
    return FitSettings.from_dict(settings.to_dict())


def check_settings(s: FitSettings) -> None:
    """Raise DataError naming the first setting out of range (the declared limits of FitSettings)."""
    if not isinstance(s, FitSettings):
        raise DataError("settings must be FitSettings")
    s.check(DataError)


def check_stress(config, design, table=None) -> None:
    """Raise DataError when a stress configuration cannot run on this design."""
    if isinstance(getattr(config, "column", None), str):
        resolve_column(design, config.column)
    else:
        raise DataError("a stress test needs the name of the column to damage")
    seed = getattr(config, "seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise DataError(f"stress test seed {seed!r} must be a whole number >= 0")
    fill = getattr(config, "fill", None)
    if fill is not None and (isinstance(fill, bool) or not isinstance(fill, (int, float))):
        raise DataError(f"stress test fill {fill!r} must be a number")
    config.resolved_strength()


SAMPLE_NOTE = (
    "Weekly tomato yield per bed across eight glasshouses. Mean temperature is the average of day and "
    "night, and the °F column repeats the °C one, so OLS must set columns aside; the light sum nearly "
    "tracks light hours. Question for the growers: which climate inputs can we trust the models on, "
    "and which model keeps its predictions if one sensor goes bad?"
)


def build_sample_session(csv_path, roles_dict: dict) -> Session:
    """The greenhouse sample project: roles, grouped 5-fold CV, three stress tests, 200 refits, computed."""
    settings = FitSettings(folds=5, seed=20261201, l1_ratios=(0.5,))
    session = Session.from_table_file(csv_path, Roles.from_dict(roles_dict), settings)
    # The window shows the latest test first: the °C-read-as-°F slip tells the clearest story.
    for cfg in (StressConfig("co2_ppm", "shuffle", None, seed=3), StressConfig("light_sum_mol_m2", "noise", 1.0),
                StressConfig("day_temp_c", "rescale", 1.8)):
        session.add_stress(cfg)
    session.set_bootstrap(200)
    session.set_notes(SAMPLE_NOTE)
    session.compute()
    session.clear_history()
    return session


GRADING_NOTE = (
    "Whether each harvested batch makes the top grade at the packhouse. Firmness is recorded in newtons and "
    "again in decanewtons, mean temperature is the average of day and night, the sugar/acid ratio sits "
    "beside sugar and acidity, and the camera's colour index nearly tracks the red share of the skin. Question "
    "for the packhouse: which measurements carry the grade, and what happens to the flagged batches if the "
    "firmness tester starts reporting decanewtons?"
)
#: The threshold the packhouse chose in the invented scenario, and why (the tool recommends none).
GRADING_THRESHOLD = (0.3, "Batches scored at 0.3 or above go to a second grader: a missed top batch costs more "
                          "than a second look, and the second grader can check about a third of the batches.")


def build_grading_session(csv_path, roles_dict: dict) -> Session:
    """The packhouse grading sample project (a yes/no outcome): roles, grouped 5-fold CV, a recorded
    threshold, two stress tests, 100 refits, computed."""
    from regbench.analysis.stress import StressConfig

    settings = FitSettings(folds=5, seed=20261203, l1_ratios=(0.5,))
    session = Session.from_table_file(csv_path, Roles.from_dict(roles_dict), settings)
    for cfg in (StressConfig("brix", "noise", 1.0, seed=2),
                StressConfig("firmness_n", "rescale", 0.1)):
        session.add_stress(cfg)
    session.set_threshold(*GRADING_THRESHOLD)
    session.set_bootstrap(100)
    session.set_notes(GRADING_NOTE)
    session.compute()
    session._undo.clear()
    return session

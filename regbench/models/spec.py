"""Declared settings: each setting's type, range, default and help text, stated once.

A settings class (``FitSettings`` in :mod:`regbench.models.results`) declares
each field with :func:`setting`, next to its type annotation::

    folds: int = setting(5, Whole(2, 1000, unit="folds", purpose="cross-validation"),
                         "cross-validation folds", flag="--folds")

Every route that accepts settings — the CLI, the session, the project loader
and the engine — calls :func:`check` (or :func:`problems`) on the same
declaration, so the limits cannot drift apart.  Each route only chooses how a
field is named to the person (``--folds`` on the command line, ``setting
'folds'`` in the window, ``settings.folds`` in a project file) and which error
class it raises.  Adding a setting is one declaration; ``to_dict``,
``from_dict``, the CLI options and the checks follow from it.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from dataclasses import dataclass
from typing import Callable, Optional as _Opt

#: Key under which a field's :class:`Spec` is kept in the dataclass field metadata.
SPEC_KEY = "regbench_spec"


# numbers.Integral / numbers.Real take numpy's scalars too, without importing numpy here.
def _is_bool(v) -> bool:
    return isinstance(v, bool) or type(v).__name__ in ("bool_", "bool")


def _is_whole(v) -> bool:
    return isinstance(v, numbers.Integral) and not _is_bool(v)


def _is_number(v) -> bool:
    return isinstance(v, numbers.Real) and not _is_bool(v) and math.isfinite(float(v))


def _g(v) -> str:
    """A value as a person typed it: numbers short, anything else quoted."""
    if _is_number(v):
        return f"{v}" if _is_whole(v) else f"{float(v):g}"
    return repr(v)


class Rule:
    """What values a setting accepts.

    Subclasses implement :meth:`problem` (None when the value is fine, else a
    phrase starting with the value, e.g. ``"1 is too few; ..."``) and
    :meth:`coerce` (the value in plain Python types, after it passed).
    """

    def problem(self, value) -> _Opt[str]:  # pragma: no cover - interface
        raise NotImplementedError

    def coerce(self, value):
        return value

    def dump(self, value):
        """The value as JSON (lists for tuples)."""
        return value


@dataclass(frozen=True)
class Whole(Rule):
    """A whole number ``low <= v <= high``.

    ``unit`` ('folds') and ``purpose`` ('cross-validation') make the message
    read "1 is too few; cross-validation needs at least 2 folds".
    """

    low: int
    high: int
    unit: str = ""
    purpose: str = ""

    def _range(self) -> str:
        unit = f" {self.unit}" if self.unit else ""
        return f"a whole number{' of' + unit if unit else ''} from {self.low} to {self.high}"

    def problem(self, value):
        if not _is_whole(value):
            return f"{_g(value)} is not a whole number; use {self._range()}"
        if value < self.low and self.unit:
            return f"{value} is too few; {self.purpose or 'it'} needs at least {self.low} {self.unit}"
        if value > self.high and self.unit:
            return f"{value} is too many; {self.purpose or 'it'} takes at most {self.high} {self.unit}"
        if not self.low <= value <= self.high:
            return f"{value} is out of range; use {self._range()}"
        return None

    def coerce(self, value):
        return int(value)


@dataclass(frozen=True)
class Number(Rule):
    """A finite number in ``(low, high)``; ``closed`` ends are allowed values.

    ``hint`` says what the number means, for the message.
    """

    low: float = -math.inf
    high: float = math.inf
    low_closed: bool = False
    high_closed: bool = False
    hint: str = ""

    def _inside(self, v: float) -> bool:
        lo_ok = v >= self.low if self.low_closed else v > self.low
        hi_ok = v <= self.high if self.high_closed else v < self.high
        return lo_ok and hi_ok

    def _range(self) -> str:
        if self.low == 0 and not self.low_closed and self.high == math.inf:
            return "a positive number"
        lo = "[" if self.low_closed else "("
        hi = "]" if self.high_closed else ")"
        return f"a number in {lo}{self.low:g}, {self.high:g}{hi}"

    def problem(self, value):
        tail = f"; {self.hint}" if self.hint else ""
        if not _is_number(value):
            return f"{_g(value)} is not {self._range()}{tail}"
        if not self._inside(float(value)):
            if self.high == math.inf:
                return f"{_g(value)} must be {self._range()}{tail}"
            lo = "[" if self.low_closed else "("
            hi = "]" if self.high_closed else ")"
            return f"{_g(value)} is outside {lo}{self.low:g}, {self.high:g}{hi}{tail}"
        return None

    def coerce(self, value):
        return float(value)


@dataclass(frozen=True)
class Choice(Rule):
    """One of a fixed set of words."""

    choices: tuple

    def problem(self, value):
        if not isinstance(value, str) or value not in self.choices:
            return f"{_g(value)} is not one of {', '.join(self.choices)}"
        return None

    def coerce(self, value):
        return str(value)


@dataclass(frozen=True)
class Flag(Rule):
    """True or False."""

    def problem(self, value):
        if not _is_bool(value):
            return f"{_g(value)} is not true or false"
        return None

    def coerce(self, value):
        return bool(value)


@dataclass(frozen=True)
class Text(Rule):
    """A string (e.g. a column name)."""

    def problem(self, value):
        if not isinstance(value, str):
            return f"{_g(value)} is not text"
        return None


@dataclass(frozen=True)
class OrNone(Rule):
    """``rule`` or empty (None); ``empty`` says what empty means, for the message."""

    rule: Rule
    empty: str = ""

    def problem(self, value):
        if value is None:
            return None
        p = self.rule.problem(value)
        if p is not None and self.empty:
            p = f"{p} (or empty for {self.empty})"
        return p

    def coerce(self, value):
        return None if value is None else self.rule.coerce(value)


@dataclass(frozen=True)
class ListOf(Rule):
    """A list of values that each pass ``each``; ``noun`` names one value ('L1 ratio')."""

    each: Rule
    noun: str
    min_len: int = 0
    max_len: int = 10_000
    unique: bool = False

    def problem(self, value):
        if not isinstance(value, (tuple, list)):
            return f"{_g(value)} is not a list; give {self._count()}"
        if not self.min_len <= len(value) <= self.max_len:
            return f"lists {len(value)} {self.noun}s; give {self._count()}"
        for v in value:
            p = self.each.problem(v)
            if p is not None:
                return p
        if self.unique:
            keys = [_g(self.each.coerce(v)) for v in value]
            if len(set(keys)) != len(keys):
                twice = next(k for k in keys if keys.count(k) > 1)
                return f"lists {twice} twice; give each {self.noun} once"
        return None

    def _count(self) -> str:
        if self.max_len >= 10_000:
            return f"at least {self.min_len} {self.noun}s" if self.min_len else f"a list of {self.noun}s"
        return f"from {self.min_len} to {self.max_len} {self.noun}s"

    def coerce(self, value):
        return tuple(self.each.coerce(v) for v in value)

    def dump(self, value):
        return [self.each.dump(v) for v in value]


@dataclass(frozen=True)
class PerColumn(Rule):
    """Column name → value pairs, each value passing ``each``: a tuple of pairs in
    Python, an object ``{column: value}`` in JSON."""

    each: Rule

    def problem(self, value):
        items = list(value.items()) if isinstance(value, dict) else value
        if not isinstance(items, (tuple, list)):
            return f"{_g(value)} is not a list of column = value pairs"
        seen = set()
        for pair in items:
            if not (isinstance(pair, (tuple, list)) and len(pair) == 2 and isinstance(pair[0], str)):
                return f"{_g(pair)} is not a column = value pair"
            col, v = pair
            p = self.each.problem(v)
            if p is not None:
                return f"{col}: {p}"
            if col in seen:
                return f"names '{col}' twice; give each column once"
            seen.add(col)
        return None

    def coerce(self, value):
        items = value.items() if isinstance(value, dict) else value
        return tuple((str(c), self.each.coerce(v)) for c, v in items)

    def dump(self, value):
        return {c: self.each.dump(v) for c, v in value}


@dataclass(frozen=True)
class Spec:
    """One declared setting: rule, help text and, when it has one, its CLI flag."""

    rule: Rule
    help: str
    flag: _Opt[str] = None


def setting(default, rule: Rule, help: str, flag: _Opt[str] = None):
    """Declare a settings field: default, accepted values, help text, CLI flag.

    Use as the default of a field of a frozen dataclass; the declaration is kept
    in the field's metadata, where :func:`specs` finds it.
    """
    return dataclasses.field(default=default, metadata={SPEC_KEY: Spec(rule, help, flag)})


def specs(cls) -> dict:
    """name -> (Spec, default) for every declared field of a settings class, in order."""
    out = {}
    for f in dataclasses.fields(cls):
        spec = f.metadata.get(SPEC_KEY)
        if spec is not None:
            out[f.name] = (spec, f.default)
    return out


def _values(obj) -> dict:
    if isinstance(obj, dict):
        return obj
    return {f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)}


def problems(cls, values) -> list:
    """Every (field, problem) of ``values`` (an instance of ``cls`` or a dict of its fields).

    Missing keys of a dict take the declared default; keys that are not
    declared fields are reported as unknown.
    """
    d = _values(values)
    declared = specs(cls)
    out = [(k, f"{k!r} is not a setting of this version; known: {', '.join(declared)}")
           for k in d if k not in declared]
    for name, (spec, default) in declared.items():
        p = spec.rule.problem(d.get(name, default))
        if p is not None:
            out.append((name, p))
    return out


def label_plain(name: str, spec: Spec) -> str:
    """How the engine names a field: its name."""
    return name


def label_setting(name: str, spec: Spec) -> str:
    """How the session and window name a field."""
    return f"setting '{name}'"


def label_flag(name: str, spec: Spec) -> str:
    """How the command line names a field: its flag, else the setting."""
    return spec.flag or f"setting '{name}'"


def check(cls, values, error: Callable[[str], Exception],
          label: Callable[[str, Spec], str] = label_setting) -> None:
    """Raise ``error(message)`` for the first field of ``values`` that is out of range.

    The message names the field as ``label`` says and what to do, e.g.
    ``--folds: 1 is too few; cross-validation needs at least 2 folds``.
    """
    found = problems(cls, values)
    if found:
        name, text = found[0]
        declared = specs(cls)
        where = label(name, declared[name][0]) if name in declared else "settings"
        raise error(f"{where}: {text}")


def from_dict(cls, d: dict):
    """An instance of ``cls`` from plain values, missing keys taking their defaults.

    Values are coerced to the declared types (int, float, tuple) without a
    range check; call :func:`check` first where the values come from outside.
    """
    kwargs = {}
    for name, (spec, default) in specs(cls).items():
        v = d.get(name, default)
        kwargs[name] = spec.rule.coerce(v)
    return cls(**kwargs)


def to_dict(obj) -> dict:
    """Plain JSON values of every declared field, in declaration order."""
    return {name: spec.rule.dump(getattr(obj, name)) for name, (spec, _) in specs(type(obj)).items()}


def check_value(declared: Spec, value, error: Callable[[str], Exception], where: str):
    """Check one value of a declared setting outside a settings class; return it coerced.

    ``where`` names it to the person (``"bootstrap count"``); the message reads
    ``"<where> <problem>"``, e.g. ``bootstrap count -4 is out of range; ...``.
    """
    p = declared.rule.problem(value)
    if p is not None:
        raise error(f"{where} {p}")
    return declared.rule.coerce(value)


# -- where the rows are read --------------------------------------------------------------------

#: Scheduler addresses a cluster route accepts besides ``'local'``.
_SCHEDULER_PREFIXES = ("tcp://", "tls://", "inproc://")


@dataclass(frozen=True)
class Address(Rule):
    """Where the pass over the rows runs: ``'local'`` (a cluster started on this machine) or a
    scheduler address such as ``tcp://HOST:8786``."""

    def problem(self, value):
        if isinstance(value, str) and (value == "local" or (
                value.startswith(_SCHEDULER_PREFIXES) and value.split("://", 1)[1].strip()
                and not any(ch.isspace() for ch in value))):
            return None
        return f"{_g(value)} is not 'local' or a scheduler address like tcp://HOST:8786"

    def coerce(self, value):
        return str(value)


@dataclass(frozen=True)
class RowSource:
    """How a project's rows are read: the memory they may take and where the pass over them runs.

    Declared like :class:`regbench.models.settings.FitSettings`; the command line
    (``--memory-budget``, ``--cluster``), the session, the project loader
    (``session.json`` field ``rows``) and the window check through :func:`check`.
    A table whose in-memory form would exceed ``memory_budget`` (or any table
    when ``cluster`` is set) is read in batches, and every fitted number comes
    from its cross-products.

    Attributes
    ----------
    memory_budget : int or None
        Bytes the table may take in memory; None: no limit.
    cluster : str or None
        ``'local'`` or a scheduler address; None: this computer, no cluster.
    """

    memory_budget: _Opt[int] = setting(
        None, OrNone(Whole(10**6, 2**50), empty="no limit"),
        "memory the table may take, e.g. 500MB or 2GB; a larger Parquet/CSV table (or a folder of Parquet files) "
        "is read in batches and row-level views use a seeded sample of its rows", flag="--memory-budget")
    cluster: _Opt[str] = setting(
        None, OrNone(Address(), empty="this computer"),
        "run the pass over the rows on a Dask cluster: 'local' starts one on this machine, tcp://HOST:PORT uses a "
        "running scheduler whose workers can read the table's path", flag="--cluster")

    def to_dict(self) -> dict:
        return to_dict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "RowSource":
        return from_dict(cls, d)

    def check(self, error: Callable[[str], Exception], label: Callable[[str, Spec], str] = label_setting) -> None:
        check(type(self), self, error, label)

    @property
    def is_default(self) -> bool:
        return self.memory_budget is None and self.cluster is None

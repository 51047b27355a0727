"""A code-free serializer for the frozen result dataclasses, under stable stored names.

Arrays go to ``.npy`` members (written and read with ``allow_pickle=False``);
everything else becomes a JSON tree with a few tagged nodes::

    {"$array": "results/a0003.npy"}          a numpy array member
    {"$tuple": [...]}                         a tuple
    {"$dict": [[key, value], ...]}            a dict (keys of any storable kind, order kept)
    {"$float": "nan" | "inf" | "-inf"}        a float JSON cannot spell
    {"$type": "linear-model", "fields": {}}   a result object, by its stored name

Each result class is stored under the name :data:`STORED_TYPES` gives it (the
list in FORMAT.md), never under its Python module or class name, so moving or
renaming a class in the code does not change the file.  A field is stored
under its name unless its declaration says otherwise
(``field(metadata={"stored_as": "old_name"})`` keeps the stored name when
the field is renamed).

The cache is only a cache: a tree this version cannot rebuild (an unknown
stored type, a missing or extra field, a value of another type) raises
:class:`StaleCache`, and the loader fits again instead of refusing the
project.  Reading builds only the listed classes, checks each field against
its annotation, and never runs code from the file.
"""

from __future__ import annotations

import dataclasses
import importlib
import io
import math
import re

import numpy as np

from regbench.errors import DataError, ModelError, ProjectError

#: Stored name -> "module:Class" of every result class a cache may hold.  The stored names
#: are part of the file format (FORMAT.md): never change one; point it at the moved class.
STORED_TYPES = {
    "fit-results": "regbench.models.results:FitResults",
    "settings": "regbench.models.settings:FitSettings",
    "linear-model": "regbench.models.results:LinearModel",
    "ols-fit": "regbench.models.results:OLSResult",
    "set-aside": "regbench.models.results:SetAside",
    "collinearity": "regbench.models.results:Diagnostics",
    "near-dependency": "regbench.models.results:NearDependency",
    "penalty-path": "regbench.models.results:PathResult",
    "cross-validation": "regbench.models.results:CVResult",
    "penalized-fit": "regbench.models.results:PenalizedFit",
    "convergence": "regbench.models.results:Convergence",
    "relaxation-cv": "regbench.models.results:RelaxationCV",
    "agreement": "regbench.analysis.agreement:Agreement",
    "pair-agreement": "regbench.analysis.agreement:PairAgreement",
    "structure": "regbench.analysis.structure:Structure",
    "collinear-set": "regbench.analysis.structure:CollinearSet",
    "sign-flip": "regbench.analysis.structure:SignFlip",
    "stress-test": "regbench.analysis.stress:StressConfig",
    "stress-result": "regbench.analysis.stress:StressResult",
    "model-shift": "regbench.analysis.stress:ModelShift",
    "stress-sweep": "regbench.analysis.stress:StressSweep",
    "column-ranking": "regbench.analysis.stress:ColumnRanking",
    "stability": "regbench.analysis.stability:Stability",
    "ranges": "regbench.analysis.ranges:Ranges",
    "model-place": "regbench.analysis.ranges:ModelPlace",
    "logistic-fit": "regbench.models.results:LogisticResult",
    "separation": "regbench.models.results:Separation",
    "calibration": "regbench.analysis.calibration:Calibration",
    "discrimination": "regbench.analysis.calibration:Discrimination",
    "classification": "regbench.analysis.calibration:Classification",
}
_STORED_NAME = {path: name for name, path in STORED_TYPES.items()}
_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
MAX_DEPTH = 64


class StaleCache(ProjectError):
    """The cached results were written by another version of the engine or its result classes."""


class Unstorable(ProjectError):
    """A value has no stored form (a class missing from STORED_TYPES, an object array)."""


def stored_name(f: dataclasses.Field) -> str:
    """The name a field is stored under (its own name unless declared otherwise)."""
    return f.metadata.get("stored_as", f.name)


def _class_of(name: str):
    """The class a stored name stands for, or None when this version has none."""
    path = STORED_TYPES.get(name)
    if path is None:
        return None
    module, qual = path.split(":")
    cls = getattr(importlib.import_module(module), qual, None)
    return cls if isinstance(cls, type) and dataclasses.is_dataclass(cls) else None


def _skip_field(f: dataclasses.Field) -> bool:
    # Fields kept out of equality (e.g. FitResults.gram, a cache of the engine) are
    # recomputed after loading, never stored.
    return not f.compare


class Encoder:
    """Turns a result object into a JSON tree plus a list of array members."""

    def __init__(self, prefix: str = "results/"):
        self.prefix = prefix
        self.arrays: list = []  # (member name, bytes)

    def encode(self, obj, where: str = "results"):
        if obj is None or isinstance(obj, (bool, str)):
            return obj
        if isinstance(obj, (np.bool_,)):
            return bool(obj)
        if isinstance(obj, (int, np.integer)):
            return int(obj)
        if isinstance(obj, (float, np.floating)):
            x = float(obj)
            if math.isnan(x):
                return {"$float": "nan"}
            if math.isinf(x):
                return {"$float": "inf" if x > 0 else "-inf"}
            return x
        if isinstance(obj, np.ndarray):
            if obj.dtype.hasobject:
                raise Unstorable(f"cannot store {where}: an array of Python objects has no safe file form")
            name = f"{self.prefix}a{len(self.arrays):05d}.npy"
            buf = io.BytesIO()
            np.save(buf, np.ascontiguousarray(obj), allow_pickle=False)
            self.arrays.append((name, buf.getvalue()))
            return {"$array": name}
        if isinstance(obj, tuple):
            return {"$tuple": [self.encode(v, f"{where}[{i}]") for i, v in enumerate(obj)]}
        if isinstance(obj, list):
            return [self.encode(v, f"{where}[{i}]") for i, v in enumerate(obj)]
        if isinstance(obj, dict):
            return {"$dict": [[self.encode(k, f"{where} key"), self.encode(v, f"{where}[{k!r}]")]
                              for k, v in obj.items()]}
        if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
            cls = type(obj)
            name = _STORED_NAME.get(f"{cls.__module__}:{cls.__qualname__}")
            if name is None:
                raise Unstorable(f"cannot store {where}: {cls.__name__} has no stored name (codec.STORED_TYPES)")
            fields = {}
            for f in dataclasses.fields(obj):
                if _skip_field(f):
                    continue
                fields[stored_name(f)] = self.encode(getattr(obj, f.name), f"{where}.{f.name}")
            return {"$type": name, "fields": fields}
        raise Unstorable(f"cannot store {where}: values of type {type(obj).__name__} have no file form")


class Decoder:
    """Rebuilds result objects from a JSON tree and loaded arrays.

    Parameters
    ----------
    arrays : dict
        Member name -> ndarray, already read with ``allow_pickle=False``.
    member : str
        The member the tree came from, for error messages.
    """

    def __init__(self, arrays: dict, member: str = "results.json"):
        self.arrays = arrays
        self.member = member
        self.used: set = set()

    def fail(self, where: str, what: str):
        raise StaleCache(f"{self.member}: field {where}: {what}")

    def decode(self, node, where: str = "results", depth: int = 0):
        if depth > MAX_DEPTH:
            self.fail(where, "nested too deeply")
        if node is None or isinstance(node, (bool, str, int)):
            return node
        if isinstance(node, float):
            return node
        if isinstance(node, list):
            return [self.decode(v, f"{where}[{i}]", depth + 1) for i, v in enumerate(node)]
        if not isinstance(node, dict):
            self.fail(where, f"unexpected {type(node).__name__}")
        if len(node) == 1 and "$float" in node:
            v = node["$float"]
            if v not in ("nan", "inf", "-inf"):
                self.fail(where, f"'$float' must be nan, inf or -inf, not {v!r}")
            return float(v)
        if len(node) == 1 and "$array" in node:
            name = node["$array"]
            if not isinstance(name, str) or name not in self.arrays:
                self.fail(where, f"refers to array member {name!r}, which the project does not hold")
            self.used.add(name)
            return self.arrays[name]
        if len(node) == 1 and "$tuple" in node:
            items = node["$tuple"]
            if not isinstance(items, list):
                self.fail(where, "'$tuple' must be a list")
            return tuple(self.decode(v, f"{where}[{i}]", depth + 1) for i, v in enumerate(items))
        if len(node) == 1 and "$dict" in node:
            pairs = node["$dict"]
            if not isinstance(pairs, list):
                self.fail(where, "'$dict' must be a list of [key, value] pairs")
            out = {}
            for i, pair in enumerate(pairs):
                if not (isinstance(pair, list) and len(pair) == 2):
                    self.fail(f"{where}[{i}]", "must be a [key, value] pair")
                key = self.decode(pair[0], f"{where} key {i}", depth + 1)
                if not isinstance(key, (str, int, float, bool, type(None), tuple)):
                    self.fail(f"{where} key {i}", "a dict key must be a number, text or tuple")
                out[key] = self.decode(pair[1], f"{where}[{key!r}]", depth + 1)
            return out
        if set(node) == {"$type", "fields"}:
            return self._dataclass(node, where, depth)
        self.fail(where, f"unknown object with keys {sorted(node)[:5]}")

    def _dataclass(self, node, where, depth):
        name = node["$type"]
        fields = node["fields"]
        if not isinstance(name, str):
            self.fail(where, f"'$type' {name!r} is not a stored type name")
        cls = _class_of(name)
        if cls is None:
            self.fail(where, f"holds a kind of result this version does not know ('{name}')")
        qual = name
        if not isinstance(fields, dict):
            self.fail(where, "'fields' must be an object")
        known = {stored_name(f): f for f in dataclasses.fields(cls) if not _skip_field(f)}
        unknown = set(fields) - set(known)
        if unknown:
            self.fail(where, f"'{qual}' has no field(s) {', '.join(sorted(map(str, unknown)))} in this version")
        kwargs = {}
        for key, f in known.items():
            if not f.init:
                continue
            if key not in fields:
                if f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
                    self.fail(f"{where}.{key}", f"missing (this version's '{qual}' needs it)")
                continue
            value = self.decode(fields[key], f"{where}.{key}", depth + 1)
            _check_annotation(self, f"{where}.{key}", f.type, value)
            kwargs[f.name] = value
        try:
            return cls(**kwargs)
        except (TypeError, ValueError, OverflowError, DataError, ModelError) as exc:
            # A result class that checks its own fields (a stress configuration's tolerance, ...) refuses here.
            self.fail(where, f"cannot rebuild {qual} ({exc})")


_SIMPLE = {
    "float": (float, int), "int": (int,), "str": (str,), "bool": (bool,), "tuple": (tuple,),
    "dict": (dict,), "list": (list,), "np.ndarray": (np.ndarray,), "ndarray": (np.ndarray,),
}


_GENERIC_OUTER = {"Tuple": "tuple", "tuple": "tuple", "Dict": "dict", "dict": "dict", "Mapping": "dict",
                  "List": "list", "list": "list"}


_TYPING_NAMES = frozenset({"Any", "Tuple", "Dict", "List", "Sequence", "Mapping", "Iterable", "Union", "Callable"})


def _check_annotation(dec: Decoder, where: str, annotation, value) -> None:
    """Check a decoded value against a dataclass field annotation (a string under
    ``from __future__ import annotations``).  Unknown annotations are not checked."""
    if not isinstance(annotation, str):
        annotation = getattr(annotation, "__name__", str(annotation))
    ann = annotation.replace(" ", "")
    optional = False
    m = re.fullmatch(r"Optional\[(.+)\]", ann)
    if m:
        ann, optional = m.group(1), True
    elif ann.endswith("|None"):
        ann, optional = ann[: -len("|None")], True
    elif ann.startswith("None|"):
        ann, optional = ann[len("None|"):], True
    generic = re.fullmatch(r"([A-Za-z_.]+)\[.*\]", ann)
    if generic:  # Tuple[X, ...], Dict[K, V], ...: the container is checked, not its items
        ann = _GENERIC_OUTER.get(generic.group(1), "object")
    if value is None:
        if optional or ann in ("object", "Any", "None"):
            return
        if ann in _SIMPLE or _NAME_RE.match(ann):
            dec.fail(where, f"is empty but must be {ann}")
        return
    if ann in _SIMPLE:
        types = _SIMPLE[ann]
        if isinstance(value, bool) and bool not in types:
            dec.fail(where, f"is true/false but must be {ann}")
        if not isinstance(value, types):
            dec.fail(where, f"is {type(value).__name__} but must be {ann}")
        if ann in ("np.ndarray", "ndarray") and value.dtype.hasobject:
            dec.fail(where, "array of objects")
        return
    if _NAME_RE.match(ann) and ann[0].isupper() and ann not in _TYPING_NAMES:
        # A nested dataclass named by its class name.
        if not (dataclasses.is_dataclass(value) and type(value).__name__ == ann):
            dec.fail(where, f"is {type(value).__name__} but must be {ann}")

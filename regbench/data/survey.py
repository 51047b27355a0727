"""The cheap pass before a streamed fit: what the table's columns hold, read column by column.

A table read in batches has no typed columns to look at before its rows go by, yet the
design must be fixed before the pass that gathers the statistics.  This pass reads only
the columns that decide it (Parquet column projection; a CSV through pyarrow's streaming
reader with ``include_columns``) and learns, over every row of the table:

- the levels of each text (category) predictor, so every batch codes it alike;
- the target's first three distinct values, so a yes/no outcome is spotted before the
  full pass (the target is dropped from the reading once three are seen);
- what the identifier rule (:mod:`regbench.data.identifiers`) needs when the predictors
  are chosen by default: a text column's distinct values, a whole-number column's run
  (0, 1, 2, … or 1, 2, 3, …) and, for a column named like an identifier, whether every
  value differs.  Parquet row-group statistics settle most numeric columns without
  reading them (a column whose minimum and maximum cannot belong to a row count);
- for derived columns (:mod:`regbench.data.derive`), the rows outside an operation's
  domain and the mean and SD a standardized column is made with.

What comes back from a part is a :class:`Survey` of counts and small sets; surveys of
parts merge in row order, so the pass runs as cluster tasks like the others.
"""

from __future__ import annotations

import functools
import os
from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from regbench.data.derive import _values as derived_values
from regbench.errors import DataError

#: Distinct texts kept per text column; beyond it the column is counted as "more than this".
MAX_TEXT_LEVELS = 200_000

#: Column kinds as the survey sees them in the file's schema.
NUMBER, BOOL, TEXT, NULL, OTHER = "number", "bool", "text", "null", "other"


def arrow_kind(t) -> str:
    """The survey's kind of a pyarrow type."""
    import pyarrow as pa

    if pa.types.is_boolean(t):
        return BOOL
    if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t):
        return NUMBER
    if pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_dictionary(t):
        return TEXT
    if pa.types.is_null(t):
        return NULL
    return OTHER


@dataclass
class ColumnSurvey:
    """What one column holds over the rows surveyed so far (one part, or parts merged in order)."""

    rows: int = 0
    filled: int = 0
    texts: Optional[dict] = None  # stripped text -> count (text columns)
    too_many: bool = False  # more distinct texts than MAX_TEXT_LEVELS
    whole: bool = True
    run_ok: bool = True  # the filled values so far count up by 1 (checked against the start at the end)
    first: Optional[float] = None
    last: Optional[float] = None
    values: Optional[list] = None  # kept for a whole-number column named like an identifier
    distinct: Optional[set] = None  # the first few distinct values (the target)

    def merge(self, o: "ColumnSurvey") -> "ColumnSurvey":
        out = ColumnSurvey(rows=self.rows + o.rows, filled=self.filled + o.filled, whole=self.whole and o.whole,
                           too_many=self.too_many or o.too_many)
        out.run_ok = self.run_ok and o.run_ok and (
            self.last is None or o.first is None or o.first == self.last + 1)
        out.first = self.first if self.first is not None else o.first
        out.last = o.last if o.last is not None else self.last
        if self.texts is not None or o.texts is not None:
            out.texts = dict(self.texts or {})
            for k, v in (o.texts or {}).items():
                out.texts[k] = out.texts.get(k, 0) + v
            if len(out.texts) > MAX_TEXT_LEVELS:
                out.too_many, out.texts = True, {}
        if self.values is not None and o.values is not None and out.whole:
            out.values = self.values + o.values
        if self.distinct is not None or o.distinct is not None:
            out.distinct = set(self.distinct or ()) | set(o.distinct or ())
        return out


@dataclass
class DerivedSurvey:
    """One derived column over the rows surveyed: its domain's refusals, its source's moments."""

    seen: bool = False  # evaluated on some batch (not waiting for another standardized column)
    bad: int = 0
    first_bad: Optional[tuple] = None  # (table row, source value)
    overflow: Optional[int] = None  # first table row whose value is too large to hold
    count: int = 0  # finite source values (standardize)
    mean: float = 0.0
    m2: float = 0.0

    def merge(self, o: "DerivedSurvey") -> "DerivedSurvey":
        n = self.count + o.count
        if n:
            d = o.mean - self.mean
            mean = self.mean + d * o.count / n
            m2 = self.m2 + o.m2 + d * d * self.count * o.count / n
        else:
            mean, m2 = 0.0, 0.0
        firsts = [f for f in (self.first_bad, o.first_bad) if f is not None]
        flows = [f for f in (self.overflow, o.overflow) if f is not None]
        return DerivedSurvey(seen=self.seen or o.seen, bad=self.bad + o.bad, first_bad=min(firsts) if firsts else None,
                             overflow=min(flows) if flows else None, count=n, mean=mean, m2=m2)


@dataclass(frozen=True)
class SurveyPlan:
    """What the survey reads and gathers.

    Attributes
    ----------
    columns : tuple of str
        Table columns read.
    text : frozenset
        Columns whose distinct texts are counted (text categories, text candidates of the rule).
    levels : frozenset
        Numeric columns whose distinct values are gathered (numbers marked as categories).
    runs : frozenset
        Numeric columns checked for a row count (and for whole numbers).
    keep_values : frozenset
        Whole-number columns named like an identifier, whose values are kept to test that each differs.
    target : str or None
        The target, when its first distinct values are wanted.
    derived : tuple of (Derived, affine or None)
        Derived columns in order; ``affine`` (mean, SD) of a standardized column once known.
    """

    columns: tuple
    text: frozenset = frozenset()
    levels: frozenset = frozenset()
    runs: frozenset = frozenset()
    keep_values: frozenset = frozenset()
    target: Optional[str] = None
    derived: tuple = ()


@dataclass
class Survey:
    """What a part's survey learnt (merged over parts in row order)."""

    columns: dict = field(default_factory=dict)  # name -> ColumnSurvey
    derived: dict = field(default_factory=dict)  # derived name -> DerivedSurvey
    rows: int = 0

    def merge(self, o: "Survey") -> "Survey":
        out = Survey(rows=self.rows + o.rows)
        for name in dict.fromkeys(list(self.columns) + list(o.columns)):
            a, b = self.columns.get(name), o.columns.get(name)
            out.columns[name] = a.merge(b) if a is not None and b is not None else (a or b)
        for name in dict.fromkeys(list(self.derived) + list(o.derived)):
            a, b = self.derived.get(name), o.derived.get(name)
            out.derived[name] = a.merge(b) if a is not None and b is not None else (a or b)
        return out


def _stripped(arr):
    """A text column's cells without surrounding blanks (None where missing), as the reader strips them."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(pa.string())
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        arr = arr.cast(pa.string())
    return pc.utf8_trim_whitespace(arr)


def _count_texts(cs: ColumnSurvey, arr) -> None:
    import pyarrow.compute as pc

    if cs.texts is None:
        cs.texts = {}
    if cs.too_many:
        return
    counts = pc.value_counts(_stripped(arr).drop_null())
    for v, c in zip(counts.field("values").to_pylist(), counts.field("counts").to_pylist()):
        cs.texts[v] = cs.texts.get(v, 0) + c
    if len(cs.texts) > MAX_TEXT_LEVELS:
        cs.too_many, cs.texts = True, {}


def _numbers(arr) -> np.ndarray:
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_boolean(arr.type):
        arr = pc.cast(arr, pa.int8())
    return arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)


def _note_run(cs: ColumnSurvey, x: np.ndarray, keep_values: bool) -> None:
    v = x[np.isfinite(x)]
    cs.filled += int(v.size)
    if not v.size:
        return
    if cs.whole and not np.all(v == np.round(v)):
        cs.whole = False
        cs.values = None
    if cs.run_ok:
        inner = bool(np.all(np.diff(v) == 1)) if v.size > 1 else True
        joins = cs.last is None or v[0] == cs.last + 1
        cs.run_ok = inner and joins
    if cs.first is None:
        cs.first = float(v[0])
    cs.last = float(v[-1])
    if keep_values and cs.whole:
        cs.values = (cs.values or []) + [v.copy()]


def _note_distinct(cs: ColumnSurvey, arr, kind: str) -> None:
    """The first three distinct values of the target, as level texts."""
    from regbench.data.design import _level_text

    if cs.distinct is None:
        cs.distinct = set()
    if len(cs.distinct) > 2:
        return
    if kind == TEXT:
        vals = [v for v in _stripped(arr).drop_null().unique().to_pylist()]
        cs.distinct.update(v for v in vals[:3] if v.lower() not in _missing_texts())
    else:
        x = _numbers(arr)
        cs.distinct.update(_level_text(float(v)) for v in np.unique(x[np.isfinite(x)])[:3])


def _missing_texts():
    from regbench.data.reader import MISSING_TEXTS

    return MISSING_TEXTS


def _batches(part, columns, batch_rows: int, kinds: dict):
    """Batches of ``part`` as dicts of column -> pyarrow array (projection: only ``columns``)."""
    import pyarrow as pa

    if part.kind == "parquet":
        import pyarrow.parquet as pq

        f = pq.ParquetFile(part.path, pre_buffer=False, buffer_size=1 << 20)
        it = f.iter_batches(batch_size=batch_rows, row_groups=[part.row_group], columns=list(columns))
    else:
        import pyarrow.csv as pacsv

        types = {c: (pa.string() if kinds.get(c) == TEXT else pa.float64()) for c in columns
                 if kinds.get(c) in (TEXT, NUMBER)}
        try:
            reader = pacsv.open_csv(part.path, convert_options=pacsv.ConvertOptions(
                column_types=types, include_columns=list(columns)))
        except pa.ArrowInvalid as exc:
            raise DataError(f"{part.path}: cannot be read as a table ({exc}); read it in memory (without "
                            "--memory-budget) to have bad cells listed row by row") from None
        it = reader
    for batch in it:
        yield {name: batch.column(i) for i, name in enumerate(batch.schema.names)}
    pa.default_memory_pool().release_unused()


def survey_pass(part, plan: SurveyPlan, kinds: dict, batch_rows: int = 65_536, cancel=None) -> Survey:
    """The survey of one part (see the module's text).

    Parameters
    ----------
    part : regbench.data.stream.Part
    plan : SurveyPlan
    kinds : dict of column -> kind (:func:`arrow_kind` of the schema)
    """
    from regbench.progress import check

    out = Survey()
    for c in plan.columns:
        out.columns[c] = ColumnSurvey()
    for d, _ in plan.derived:
        out.derived[d.name] = DerivedSurvey()
    columns = list(plan.columns)
    offset = 0
    for b in _batches(part, columns, batch_rows, kinds):
        check(cancel)
        n = len(next(iter(b.values()))) if b else 0
        first = (part.first_row if part.kind == "parquet" else 0) + offset
        offset += n
        out.rows += n
        numbers = {}
        for c, arr in b.items():
            cs = out.columns[c]
            cs.rows += n
            if c == plan.target:
                _note_distinct(cs, arr, kinds.get(c))
            if c in plan.text:
                _count_texts(cs, arr)
            elif kinds.get(c) in (NUMBER, BOOL):
                x = numbers[c] = _numbers(arr)
                if c in plan.runs:
                    _note_run(cs, x, c in plan.keep_values)
                if c in plan.levels:
                    if cs.distinct is None:
                        cs.distinct = set()
                    cs.distinct.update(np.unique(x[np.isfinite(x)]).tolist())
                if c not in plan.runs:
                    cs.filled += int(np.isfinite(x).sum())
        _survey_derived(out, plan, numbers, first)
        if plan.columns == (plan.target,) and len(out.columns[plan.target].distinct or ()) > 2:
            break  # a target of three values or more is a number: nothing else to learn here
    return out


def _survey_derived(out: Survey, plan: SurveyPlan, numbers: dict, first: int) -> None:
    """Each derived column of the batch: rows outside its domain, its overflow, its source's moments."""
    for d, affine in plan.derived:
        try:
            sources = [numbers[c] for c in d.columns]
        except KeyError:
            continue  # built on a standardized column whose mean and SD are not known yet
        ds = out.derived[d.name]
        ds.seen = True
        x = sources[0]
        have = np.isfinite(x)
        op = d.operation
        bad = None
        if op == "log":
            bad = x <= 0
        elif op == "log1p":
            bad = x <= -1
        elif op == "sqrt":
            bad = x < 0
        if bad is not None:
            rows = np.flatnonzero(bad & have)
            if rows.size:
                ds.bad += int(rows.size)
                if ds.first_bad is None:
                    ds.first_bad = (first + int(rows[0]) + 1, float(x[rows[0]]))
        if op == "standardize" and affine is None:
            v = x[have]
            if v.size:
                part = DerivedSurvey(count=int(v.size), mean=float(v.mean()), m2=float(((v - v.mean()) ** 2).sum()))
                merged = ds.merge(part)
                ds.count, ds.mean, ds.m2 = merged.count, merged.mean, merged.m2
            continue
        values = derived_values(d, sources, affine)
        flow = np.flatnonzero(np.isinf(values))
        if flow.size and ds.overflow is None:
            ds.overflow = first + int(flow[0]) + 1
        numbers[d.name] = values


# --------------------------------------------------------------------------- what the survey decides


@dataclass(frozen=True)
class Findings:
    """What the streamed route takes from the survey.

    Attributes
    ----------
    predictors : tuple of str
        The predictors (the roles' own, or the default ones the identifier rule leaves).
    levels : dict of predictor -> tuple of str
        Every level of each category predictor seen on the table's rows, sorted as the
        in-memory route sorts them.
    number_levels : dict of predictor -> dict of float -> str
        For numbers marked as categories: each value's level text.
    set_aside : tuple of UnusableColumn
        Columns the default choice leaves out (identifier, empty, numbers written as text).
    derived : tuple of (Derived, affine)
        Each derived column with the (mean, SD) a standardized one is made with (else None).
    booleans : tuple of str
        Text predictors of yes/no words, read as 1 ("yes", "true" …) and 0.
    """

    predictors: tuple
    levels: dict
    number_levels: dict
    set_aside: tuple
    derived: tuple
    booleans: tuple = ()


def _yes_no_line(src: str, target: str, values) -> str:
    a, b = sorted(values)[:2]
    return (f"{src}: target '{target}' holds two distinct values ('{a}' and '{b}'), a yes/no outcome, which is fitted with "
            "the rows in memory, not on the streamed or cluster route (a logistic fit needs a pass over the rows per "
            "step); read the table in memory (without --memory-budget or --cluster), or pass --outcome numeric to "
            "fit the target as a number")


def _check_derived_roles(src, roles, kinds: dict) -> None:
    """The in-memory route's refusals of a derived column's name and sources (:func:`derive.apply_derived`)."""
    known = dict(kinds)
    for d in roles.derived:
        name = d.name
        if name in known:
            raise DataError(f"derived column '{name}' ({d.spec}) already exists in the table; "
                            "remove the duplicate or rename the table's column")
        for c in d.columns:
            if c not in known:
                raise DataError(f"derived column '{name}': '{c}' is not a column of the table; "
                                f"its columns are: {', '.join(known)}")
            if known[c] not in (NUMBER, BOOL):
                word = {TEXT: "categorical", NULL: "empty"}.get(known[c], known[c])
                raise DataError(f"derived column '{name}': '{c}' is {word}, not numeric; "
                                f"{d.operation} takes numeric columns")
        known[name] = NUMBER


@functools.lru_cache(maxsize=32)
def _metadata(path: str, mtime_ns: int):
    """A Parquet file's footer and the position of each column, read once per file version."""
    import pyarrow.parquet as pq

    meta = pq.ParquetFile(path).metadata
    schema = meta.schema
    return meta, {schema.column(i).path: i for i in range(meta.num_columns)}


def _row_group_stats(parts, column: str):
    """(rows, nulls, min, max) of ``column`` in each Parquet part from its statistics (min and max
    None for a part with no value); None when a part is not Parquet or lacks them."""
    out = []
    for part in parts:
        if part.kind != "parquet":
            return None
        meta, at = _metadata(part.path, os.stat(part.path).st_mtime_ns)
        if column not in at:
            return None
        rg = meta.row_group(part.row_group)
        st = rg.column(at[column]).statistics
        if st is None or not st.has_null_count:
            return None
        filled = rg.num_rows - st.null_count
        if filled and not st.has_min_max:
            return None
        out.append((rg.num_rows, st.null_count, float(st.min) if filled else None,
                    float(st.max) if filled else None))
    return out


def filled_from_stats(parts, column: str) -> Optional[int]:
    """Filled cells of a Parquet column from its statistics (None when they are not there)."""
    st = _row_group_stats(parts, column)
    return None if st is None else sum(r - nulls for r, nulls, _, _ in st)


def _stats_rule_out_runs(parts, column: str) -> bool:
    """True when a Parquet column's row-group statistics show it cannot count rows
    (0, 1, 2, … or 1, 2, 3, … down the file), so it need not be read to apply the rule."""
    st = _row_group_stats(parts, column)
    if st is None:
        return False
    prev_max = None
    for rows, nulls, lo, hi in st:
        k = rows - nulls
        if not k:
            continue
        # A count up by 1 holds whole numbers, spans exactly its filled cells, and joins the previous group.
        if lo != round(lo) or hi - lo + 1 != k or (prev_max is None and lo not in (0.0, 1.0)) or (
                prev_max is not None and lo != prev_max + 1):
            return True
        prev_max = hi
    return False


def plan_survey(roles, kinds: dict, parts, default: bool) -> SurveyPlan:
    """The columns to read and what to gather from each (see :class:`SurveyPlan`)."""
    from regbench.data.identifiers import named_like_identifier

    taken = {roles.target, roles.weights, roles.groups, roles.no_count}
    derived_names = {d.name for d in roles.derived}
    if default:
        candidates = [c for c in kinds if c not in taken and c not in derived_names]
    else:
        candidates = [c for c in roles.predictors if c not in taken and c not in derived_names]
    text = {c for c in candidates if kinds[c] == TEXT}
    levels = {c for c in roles.categorical if c in candidates and kinds[c] in (NUMBER, BOOL)}
    runs, keep = set(), set()
    if default:
        for c in candidates:
            if kinds[c] != NUMBER:
                continue
            named = named_like_identifier(str(c))
            if named or not _stats_rule_out_runs(parts, c):
                runs.add(c)
                if named:
                    keep.add(c)
    derived = tuple((d, None) for d in roles.derived)
    sources = {c for d in roles.derived for c in d.columns if c not in derived_names}
    target = roles.target if roles.outcome != "numeric" else None
    cols = [c for c in kinds if c in text | levels | runs | sources or c == target]
    return SurveyPlan(columns=tuple(cols), text=frozenset(text), levels=frozenset(levels), runs=frozenset(runs),
                      keep_values=frozenset(keep), target=target, derived=derived)


def resolve_derived(src, plan: SurveyPlan, survey: Survey) -> tuple:
    """(Derived, affine) of each derived column, refusing as the in-memory route refuses.

    A standardized column built on another standardized column keeps ``affine`` None
    until a further survey, made with the first one's mean and SD, has seen it.
    """
    out = []
    for d, affine in plan.derived:
        ds = survey.derived.get(d.name)
        name = d.name
        if ds is None or not ds.seen:
            out.append((d, affine))
            continue
        if ds.bad:
            what, todo = {
                "log": ("0 or less", "use log1p for counts with zeros, or leave the column as it is"),
                "log1p": ("−1 or less", "log(1 + value) needs values above −1"),
                "sqrt": ("a negative value", "a square root needs values of 0 or more"),
            }[d.operation]
            row, value = ds.first_bad
            raise DataError(
                f"derived column '{name}': {ds.bad} row{'s' if ds.bad != 1 else ''} of '{d.columns[0]}' "
                f"{'hold' if ds.bad != 1 else 'holds'} {what} (first: row {row}, value {value:g}); {todo}")
        if d.operation == "standardize" and affine is None:
            sd = float(np.sqrt(ds.m2 / ds.count)) if ds.count else 0.0
            if not sd > 0:
                raise DataError(f"derived column '{name}': '{d.columns[0]}' has the same value on every row "
                                "with a value, so it cannot be standardized")
            affine = (float(ds.mean), sd)
        elif ds.overflow is not None:
            raise DataError(f"derived column '{name}': row {ds.overflow} gives a number too large to hold; "
                            "rescale the source column first (e.g. another unit)")
        out.append((d, affine))
    return tuple(out)


def pending(derived) -> bool:
    """True while a standardized column's mean and SD are not known yet."""
    return any(a is None and d.operation == "standardize" for d, a in derived)


def _text_column(src, c, cs: ColumnSurvey, named: bool):
    """(present texts with counts, why it cannot be a category or None, set-aside rule or None)."""
    from regbench.data.reader import _FALSE, _TRUE, LOOKS_NUMERIC_SHARE, MISSING_TEXTS, NUMERIC_SHARE

    if cs.too_many:
        return None, None, None
    present = {t: k for t, k in cs.texts.items() if t.lower() not in MISSING_TEXTS}
    if not present:
        return present, None, "empty"
    if {t.lower() for t in present} <= (_TRUE | _FALSE):
        return present, None, "boolean"
    total = sum(present.values())
    numbers = sum(k for t, k in present.items() if _is_number(t))
    if numbers and numbers >= NUMERIC_SHARE * total:
        return present, _numbers_as_text(src, c, numbers, total), None
    if not named and numbers >= LOOKS_NUMERIC_SHARE * total:
        return present, None, "read_as_text"
    return present, None, None


def _numbers_as_text(src, c, numbers: int, total: int) -> str:
    """The line for a column of numbers with some text: in a CSV, the first text cell's row and text."""
    if str(src).lower().endswith((".csv", ".txt", ".tsv")):
        from regbench.data.stream import _first_text_cell

        found = _first_text_cell(src, c)
        if found:
            return (f"{src}: column '{c}', row {found[0]} holds '{found[1]}', not a number; the streamed route needs "
                    "numbers in the target, weights and number predictors: make the cell a number or leave it "
                    "empty, leave the column out of the predictors, or read the table in memory (without "
                    "--memory-budget), which sets such a row aside")
    return (f"{src}: column '{c}' holds numbers written as text ({numbers} of {total} cells); the streamed route "
            "reads numbers from number columns only: store it as numbers, leave it out of the predictors, or read "
            "the table in memory (without --memory-budget)")


def _is_number(text: str) -> bool:
    try:
        float(text.replace("\u2212", "-"))
    except ValueError:
        return False
    return True


def findings(src, roles, kinds: dict, plan: SurveyPlan, survey: Survey, n_rows: int, default: bool,
             derived: tuple, parts) -> Findings:
    """The predictors, category levels and set-aside columns (see :class:`Findings`)."""
    from regbench.data.design import UnusableColumn, _level_text
    from regbench.data.identifiers import (COUNTS_LIKE_A_ROW_NUMBER, IDENTIFIER_LEVELS, MIN_FILLED,
                                           NAMED_LIKE_AN_IDENTIFIER, named_like_identifier)

    t = plan.target
    if t is not None:
        seen = survey.columns[t].distinct or set()
        if len(seen) == 2:
            raise DataError(_yes_no_line(src, t, seen))
    if kinds.get(roles.target) not in (NUMBER, BOOL):
        word = {TEXT: "text", NULL: "empty"}.get(kinds.get(roles.target), kinds.get(roles.target))
        raise DataError(f"{src}: target '{roles.target}' is {word}, not numeric; choose a numeric target")
    taken = {roles.target, roles.weights, roles.groups, roles.no_count}
    derived_names = [d.name for d in roles.derived]
    names = list(kinds) + derived_names
    predictors = [c for c in (names if default else roles.predictors) if c not in taken]
    set_aside, levels, number_levels, booleans = [], {}, {}, []
    keep = []
    for c in predictors:
        kind = NUMBER if c in derived_names else kinds[c]
        cs = survey.columns.get(c)
        why = rule = None
        if kind == NULL:
            rule = "empty"
        elif kind == OTHER:
            raise DataError(f"{src}: column '{c}' holds neither numbers nor text; leave it out of the predictors "
                            "(--predictors), or read the table in memory (without --memory-budget)")
        elif kind == TEXT:
            present, refuse, rule = _text_column(src, c, cs, not default)
            if refuse:
                raise DataError(refuse)
            if rule == "boolean":
                if c in roles.categorical:
                    raise DataError(f"{src}: column '{c}' holds yes/no words, which the streamed route reads as 1 and "
                                    "0, not as categories; leave it out of the categorical columns, or read the "
                                    "table in memory (without --memory-budget)")
                # Yes/no words are the numbers 1 and 0, as the in-memory reader types them.
                booleans.append(c)
                keep.append(c)
                continue
            distinct = len(present) if present is not None else None
            if rule is None and default and (distinct is None or distinct > max(IDENTIFIER_LEVELS, n_rows / 10)):
                rule = "identifier"
                count = f"{distinct}" if distinct is not None else f"more than {MAX_TEXT_LEVELS:,}"
                why = f"text with {count} different values: it names rows rather than measuring them"
            if rule is None:
                if present is None:
                    raise DataError(f"{src}: column '{c}' has more than {MAX_TEXT_LEVELS:,} different texts, too many "
                                    "for a category; leave it out of the predictors")
                levels[c] = tuple(sorted(present))
        elif kind == NUMBER and c not in derived_names:
            filled = cs.filled if cs is not None else filled_from_stats(parts, c)
            if filled == 0:
                rule = "empty"
            elif default and cs is not None and c in plan.runs and cs.whole and filled >= MIN_FILLED:
                if cs.run_ok and cs.first in (0.0, 1.0):
                    rule, why = "identifier", COUNTS_LIKE_A_ROW_NUMBER
                elif named_like_identifier(str(c)) and cs.values is not None:
                    v = np.concatenate(cs.values)
                    if np.unique(v).size == v.size:
                        rule, why = "identifier", NAMED_LIKE_AN_IDENTIFIER
        if rule is None and c in plan.levels and cs is not None:
            texts = {float(v): _level_text(float(v)) for v in sorted(cs.distinct or ())}
            number_levels[c] = texts
            levels[c] = tuple(sorted(set(texts.values())))
        if rule is None:
            keep.append(c)
        elif rule == "identifier":
            set_aside.append(UnusableColumn(c, f"looks like an identifier: {why}; not used by default (name it "
                                               "among the predictors to use it)", rule="identifier"))
        elif rule == "read_as_text":
            set_aside.append(UnusableColumn(c, "holds numbers and text; not used by default (name it among the "
                                               "predictors to use its values as categories)", rule="read_as_text"))
        elif default:
            set_aside.append(UnusableColumn(c, "every cell is empty", rule="empty"))
        else:
            set_aside.append(UnusableColumn(c, "every cell is missing", rule="empty"))
    if not keep:
        ids = [f"'{u.column}' ({u.reason.split('; ')[0]})" for u in set_aside if u.rule == "identifier"]
        raise DataError(f"{src}: no predictor columns; choose at least one column besides the target"
                        + (f"; left out: {', '.join(ids)}; name it among the predictors to use it" if ids else ""))
    return Findings(predictors=tuple(keep), levels=levels, number_levels=number_levels, set_aside=tuple(set_aside),
                    derived=derived, booleans=tuple(booleans))

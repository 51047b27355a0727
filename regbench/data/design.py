"""Column roles and the design matrix the engine fits.

Categorical predictors are one-hot coded against their first level in sorted
order, one column per other level, named ``COLUMN=LEVEL`` (reference coding, which
OLS fits; the penalized families add the first level's indicator, see
:mod:`regbench.models.coding`).  Rows that cannot be
used are excluded and reported one by one; predictors that cannot be used
(constant, all missing) are set aside before fitting, each with a reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Optional, Sequence

import numpy as np

from regbench.data.derive import Derived, apply_derived
from regbench.data.identifiers import identifier_columns, identifier_reason
from regbench.data.table import BOOLEAN, CATEGORICAL, EMPTY, NUMERIC, Table, side_by_side
from regbench.errors import DataError

#: What a weight column can mean (see :class:`Roles`).
PRECISION = "precision"
COUNTS = "counts"
WEIGHTS_KINDS = (PRECISION, COUNTS)


@dataclass(frozen=True)
class Roles:
    """Which column plays which part.

    Attributes
    ----------
    target : str
    predictors : tuple of str, optional
        Empty means every other usable column (not weights, not groups).
    categorical : tuple of str
        Numeric columns the person marked as category codes.
    weights : str or None
        Row weights; must be finite and >= 0.  What they mean is ``weights_kind``.
    groups : str or None
        Rows of one group stay on the same side of every held-out check.
    derived : tuple of regbench.data.derive.Derived
        Columns computed from others (log, square, product …) before the design is
        built; they can then be named in any role like a column of the table.
    weights_kind : {'precision', 'counts'}
        ``'counts'``: a row stands for w identical observations (whole numbers);
        every estimate and inference quantity equals that of the table with each
        row written out w times.  ``'precision'``: a row is one observation
        measured with precision proportional to w (inference counts rows).
        Projects saved before this choice existed read as ``'precision'``.
    """

    target: str
    predictors: tuple = ()
    categorical: tuple = ()
    weights: Optional[str] = None
    groups: Optional[str] = None
    derived: tuple = ()
    weights_kind: str = "precision"
    #: 'numeric', 'binary', or None to decide from the target (two distinct values: binary).
    outcome: Optional[str] = None
    #: For a yes/no outcome, the target value (as text) that counts as "yes"; None: the
    #: stated default (see :func:`default_positive_level`).
    positive_level: Optional[str] = None
    #: For aggregated yes/no rows: the column holding each row's "no" count (``target`` then
    #: holds the "yes" count).
    no_count: Optional[str] = None

    def to_dict(self) -> dict:
        d = {
            "target": self.target,
            "predictors": list(self.predictors),
            "categorical": list(self.categorical),
            "weights": self.weights,
            "groups": self.groups,
        }
        # Only for counts, so the key of a session with precision weights (the reading of
        # every older project) is unchanged.
        if self.weights_kind != "precision":
            d["weights_kind"] = self.weights_kind
        # Only when present, so the key of a session without derived columns is unchanged.
        if self.derived:
            d["derived"] = [x.to_dict() for x in self.derived]
        # Written only when set, so a numeric session's file is unchanged.
        for k in ("outcome", "positive_level", "no_count"):
            if getattr(self, k) is not None:
                d[k] = getattr(self, k)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "Roles":
        return cls(
            target=d["target"],
            predictors=tuple(d.get("predictors") or ()),
            categorical=tuple(d.get("categorical") or ()),
            weights=d.get("weights"),
            groups=d.get("groups"),
            derived=tuple(Derived.from_dict(x, f"roles.derived[{i}]") for i, x in enumerate(d.get("derived") or ())),
            weights_kind=str(d.get("weights_kind") or "precision"),
            outcome=d.get("outcome"),
            positive_level=None if d.get("positive_level") is None else str(d["positive_level"]),
            no_count=d.get("no_count"),
        )


@dataclass(frozen=True)
class ExcludedRow:
    """A row left out of the fit. ``row`` counts the lines below the header, blank lines
    included (row 1 is the first line under the header)."""

    row: int
    column: str
    reason: str

    def to_dict(self) -> dict:
        return {"row": self.row, "column": self.column, "reason": self.reason}


@dataclass(frozen=True)
class UnusableColumn:
    """A predictor set aside before fitting because it carries no usable information."""

    column: str
    reason: str
    #: Which rule left it out, for programs reading the fit JSON: 'identifier' (it names rows),
    #: 'read_as_text' (looks numeric, holds text), 'empty', 'constant', 'one_level'; None when
    #: the route that built the design does not say.
    rule: Optional[str] = None

    def to_dict(self) -> dict:
        return {"column": self.column, "reason": self.reason, "rule": self.rule}


@dataclass(frozen=True)
class Design:
    """The numbers the engine fits.

    Attributes
    ----------
    X : ndarray of shape (n, p), float64
        Predictors in original units (categoricals one-hot coded).
    y : ndarray of shape (n,)
    weights : ndarray of shape (n,)
        Ones when no weight column is set.
    groups : ndarray of shape (n,) of int, or None
        Group codes (0..g-1) when a group column is set.
    columns : tuple of str
        Design column names, ``COLUMN=LEVEL`` for coded levels.
    sources : tuple of str
        For each design column, the table column it came from.
    target : str
    row_numbers : ndarray of shape (n,) of int
        1-based table row of each design row.
    excluded : tuple of ExcludedRow
    unusable : tuple of UnusableColumn
    group_labels : tuple of str
        The text of each group code.
    weights_column, groups_column : str or None
    column_notes : tuple of (column, note, read_as_text)
        How the reader read columns of the table when that needs saying (percentages,
        decimal commas, a column that looks numeric read as text and why).
    weights_kind : {'precision', 'counts'}
        What the weights mean (see :class:`Roles`); always 'precision' without a weight column.
    """

    X: np.ndarray
    y: np.ndarray
    weights: np.ndarray
    groups: Optional[np.ndarray]
    columns: tuple
    sources: tuple
    target: str
    row_numbers: np.ndarray
    excluded: tuple = ()
    unusable: tuple = ()
    group_labels: tuple = ()
    weights_column: Optional[str] = None
    groups_column: Optional[str] = None
    n_table_rows: int = 0
    #: The derived columns (regbench.data.derive.Derived) applied before the design was built.
    derived: tuple = ()
    column_notes: tuple = ()
    weights_kind: str = "precision"
    #: 'numeric' or 'binary'.  For 'binary', ``y`` is 1.0 for "yes" and 0.0 for "no" (or the
    #: share of "yes" in a row of yes/no counts, whose weight is then the row's total count).
    outcome: str = "numeric"
    #: For 'binary': the two target values as text, ("no" level, "yes" level).
    levels: tuple = ()
    no_count_column: Optional[str] = None
    #: For each category: (table column, its reference level's text, the design columns of its
    #: other levels).  OLS fits the design as coded; the penalized families add each reference
    #: level's indicator and weigh every level alike (regbench.models.coding).
    reference_levels: tuple = ()

    @property
    def positive_level(self) -> Optional[str]:
        return self.levels[1] if self.levels else None

    @property
    def n(self) -> int:
        return self.X.shape[0]

    @property
    def p(self) -> int:
        return self.X.shape[1]

    @property
    def weighted(self) -> bool:
        return self.weights_column is not None

    @property
    def counts(self) -> bool:
        """True when each row stands for ``weight`` identical observations."""
        return self.weights_column is not None and self.weights_kind == COUNTS

    def observations(self) -> float:
        """Observations behind the fit: Σw for count rows, else the rows of weight above 0."""
        return float(self.weights.sum()) if self.counts else float(np.count_nonzero(self.weights > 0))

    def index(self, column: str) -> int:
        try:
            return self.columns.index(column)
        except ValueError:
            raise DataError(
                f"'{column}' is not a column of the design; design columns are: {', '.join(self.columns)}"
            ) from None

    def subset(self, rows) -> "Design":
        """The design restricted to some rows (a boolean mask or index array)."""
        rows = np.asarray(rows)
        return replace(
            self,
            X=self.X[rows],
            y=self.y[rows],
            weights=self.weights[rows],
            groups=None if self.groups is None else self.groups[rows],
            row_numbers=self.row_numbers[rows],
        )

    def with_column(self, column: str, values: np.ndarray) -> "Design":
        """A copy with one design column replaced (the stress test's damaged input)."""
        j = self.index(column)
        X = self.X.copy()
        X[:, j] = values
        return replace(self, X=X)

    def standardized(self):
        """Weighted mean and weighted population SD of each column, and the standardized X.

        Returns
        -------
        Xs : ndarray (n, p)
        mean : ndarray (p,)
        sd : ndarray (p,)
            Zero-variance columns get sd 1 so they stay at zero.
        """
        w = self.weights / self.weights.sum()
        mean = w @ self.X
        sd = np.sqrt(w @ (self.X - mean) ** 2)
        sd_safe = np.where(sd > 0, sd, 1.0)
        return (self.X - mean) / sd_safe, mean, sd

    def summary(self) -> dict:
        return {
            "rows_in_table": self.n_table_rows,
            "rows_used": int(self.n),
            "rows_excluded": len(self.excluded),
            "predictor_columns": list(self.columns),
            "unusable": [u.to_dict() for u in self.unusable],
        }


def default_predictors(table: Table, roles: Roles) -> tuple:
    """Every column that is not the target, the weights or the groups, is not empty, does not
    look like an identifier (the rule in :mod:`regbench.data.identifiers`: text naming rows, a row
    number, whole numbers named like an identifier) and was not read as text although it looks
    numeric (see ``ColumnInfo.read_as_text``)."""
    skip = {roles.target, roles.weights, roles.groups, roles.no_count}
    ids = identifier_columns(table)
    return tuple(
        c for c in table.names
        if c not in skip and table.columns[c].kind != EMPTY and c not in ids
        and not table.columns[c].read_as_text
    )


def build_design(table: Table, roles: Roles) -> Design:
    """Build the design matrix for ``roles`` from ``table``.

    Raises
    ------
    DataError
        Unknown column, a target that is not numeric or is constant, a bad weight
        column, or no usable rows.
    """
    table = apply_derived(table, roles.derived)
    src = table.source or "the table"
    _check_roles(table, roles, src)
    tinfo = table.info(roles.target)
    notes = _column_notes(table)
    outcome, outcome_levels = outcome_of(table, roles)
    _check_target_kind(table, roles, tinfo, outcome, src)
    predictors, unusable = _choose_predictors(table, roles, src)
    frame = table.frame
    n = len(frame)
    rn = table.row_numbers if hasattr(table, "row_numbers") else np.arange(1, n + 1)
    # Every check below excludes rows into one record, so each row is reported once, by its first reason.
    ex = _Exclusions(rn)
    y_all, count_total = _target_values(table, roles, tinfo, outcome, outcome_levels, ex)
    w_all = _weight_values(table, roles, ex, src)
    if roles.groups is not None:
        ex.exclude(frame[roles.groups].isna().to_numpy(), roles.groups, "group is missing")
    blocks = _predictor_blocks(table, roles, predictors, ex, unusable)
    rows, excluded = _usable_rows(ex, n, src)
    y = y_all[rows]
    # A row of yes/no counts weighs its total count (times its weight, if any).
    w = w_all[rows] if count_total is None else w_all[rows] * count_total[rows]
    _check_usable_values(src, roles, outcome, outcome_levels, y, w, rows)
    names, sources, mats, references = _code_predictors(blocks, rows, w, unusable, src)
    X = _design_matrix(mats, rows, n)
    # As many columns as rows or more (a wide table) is allowed: OLS keeps a largest
    # independent set and says which columns it set aside for want of rows; the penalized
    # families fit on any number of columns.
    _check_magnitudes(src, X, names, y, w, rn[rows], roles)
    groups, labels = _group_codes(frame, roles, rows)
    return Design(
        X=X,
        y=y.astype(np.float64),
        weights=w.astype(np.float64),
        groups=groups,
        columns=tuple(names),
        sources=tuple(sources),
        target=roles.target,
        row_numbers=np.asarray(rn)[rows],
        excluded=excluded,
        unusable=tuple(unusable),
        group_labels=labels,
        weights_column=roles.weights,
        groups_column=roles.groups,
        n_table_rows=n,
        derived=tuple(roles.derived),
        column_notes=notes,
        weights_kind=roles.weights_kind if roles.weights is not None else PRECISION,
        outcome=outcome,
        levels=tuple(outcome_levels),
        no_count_column=roles.no_count,
        reference_levels=tuple(references),
    )


def _design_matrix(mats, rows, n: int) -> np.ndarray:
    """The design's (rows, p) float64 matrix.

    ``mats`` holds, per design column, either its values on every table row (a numeric
    column, not yet restricted to ``rows``) or its values on the usable rows (a coded level).
    When every row is usable and the numeric columns lie side by side in the table's block
    (:func:`regbench.data.table.side_by_side`), the design is a read-only view of the table
    (columns contiguous): the numbers are held once.  Otherwise they are copied column by
    column into one row-major matrix (the layout designs always had, so their round-off is
    unchanged), without a second temporary copy.
    """
    if rows.size == n:
        view = side_by_side([np.asarray(m, dtype=np.float64) for m in mats])
        if view is not None:
            return view
    X = np.empty((rows.size, len(mats)), dtype=np.float64)
    for j, m in enumerate(mats):
        X[:, j] = m if m.shape[0] == rows.size else m[rows]
    return X


def _column_notes(table: Table) -> tuple:
    """(column, note, read as text) for each column whose reading needs saying."""
    return tuple((c, table.columns[c].note, table.columns[c].kind == CATEGORICAL)
                 for c in table.names if getattr(table.columns[c], "note", ""))


def _check_roles(table: Table, roles: Roles, src: str) -> None:
    """Refuse roles that name unknown columns or give one column two parts, before any row is read."""
    # table.info raises the "not in the table" message naming the table's columns.
    for col in (roles.target, roles.weights, roles.groups):
        if col is not None:
            table.info(col)
    for col in roles.predictors + roles.categorical:
        table.info(col)
    if roles.weights_kind not in WEIGHTS_KINDS:
        raise DataError(f"weights kind '{roles.weights_kind}' is not one of {', '.join(WEIGHTS_KINDS)}: "
                        "'counts' when a row stands for that many identical observations, 'precision' for "
                        "measurements of unequal quality")
    if roles.weights is not None and roles.weights == roles.target:
        raise DataError(f"column '{roles.target}' cannot be both the target and the weights")
    for label, col in (("target", roles.target), ("weights", roles.weights), ("groups", roles.groups)):
        if col is not None and col in roles.predictors:
            raise DataError(f"{src}: column '{col}' is the {label} and is also named among the predictors; "
                            f"remove it from the predictors (or choose another {label})")


def _check_target_kind(table: Table, roles: Roles, tinfo, outcome: str, src: str) -> None:
    """A numeric target (or a yes/no count) must hold numbers; a two-valued target of any kind is coded 0/1."""
    if outcome == "binary" and roles.no_count is None:
        return
    if tinfo.kind not in (NUMERIC, BOOLEAN):
        numeric = [c for c in table.names if table.columns[c].kind == NUMERIC]
        why = f" (it {tinfo.note})" if getattr(tinfo, "note", "") else ""
        raise DataError(
            f"{src}: target '{roles.target}' is {tinfo.kind}, not numeric{why}; choose a numeric target"
            + (f" (numeric columns: {', '.join(numeric)})" if numeric else " (the table has no numeric column)")
        )


def _choose_predictors(table: Table, roles: Roles, src: str) -> tuple:
    """The predictor columns and, when they were chosen by default, the columns left out and why.

    Returns
    -------
    (predictors, unusable) : (tuple of str, list of UnusableColumn)
        ``unusable`` is a list the later steps add to, in the order the reasons are found.
    """
    predictors = roles.predictors
    roles_taken = {roles.target, roles.weights, roles.groups, roles.no_count}
    unusable = []
    if not roles.predictors:
        # The rule of default_predictors, each column looked at once: every column of another
        # role, or left out below, is not a predictor.
        for c in table.names:
            if c in roles_taken:
                continue
            if table.columns[c].read_as_text:
                # One-hot coding a mistyped number column would give one indicator per value.
                unusable.append(UnusableColumn(
                    c, f"{table.columns[c].note}; not used by default (name it among the predictors to use its "
                       "values as categories)", rule="read_as_text"))
            elif (why := identifier_reason(table, c)) is not None:
                unusable.append(UnusableColumn(
                    c, f"looks like an identifier: {why}; not used by default (name it among the predictors "
                       "to use it)", rule="identifier"))
            elif table.columns[c].kind == EMPTY:
                unusable.append(UnusableColumn(c, "every cell is empty", rule="empty"))
        left_out = {u.column for u in unusable}
        predictors = tuple(c for c in table.names if c not in roles_taken and c not in left_out)
    predictors = tuple(c for c in predictors if c not in roles_taken)
    if not predictors:
        ids = [f"'{u.column}' ({u.reason.split('; ')[0]})" for u in unusable if u.rule == "identifier"]
        raise DataError(f"{src}: no predictor columns; choose at least one column besides the target"
                        + (f"; left out: {', '.join(ids)}; name it among the predictors to use it" if ids else ""))
    return predictors, unusable


class _Exclusions:
    """The rows left out so far, each with the column and reason that first excluded it."""

    def __init__(self, row_numbers):
        self.rn = row_numbers
        self.reasons: dict = {}

    def exclude(self, mask, column, why) -> None:
        """Exclude the rows where ``mask`` holds; ``why`` is a reason or a function of the row index."""
        for i in np.flatnonzero(mask):
            if i not in self.reasons:
                self.reasons[i] = (column, why(i) if callable(why) else why)


def _target_values(table: Table, roles: Roles, tinfo, outcome: str, outcome_levels, ex: _Exclusions) -> tuple:
    """The target of every table row (NaN where unusable) and, for yes/no count pairs, each row's total count.

    Returns
    -------
    (y_all, count_total) : (ndarray, ndarray or None)
    """
    frame = table.frame
    rn = ex.rn
    bad_text = dict(tinfo.bad_cells)
    if outcome == "binary" and roles.no_count is None:
        texts = _target_texts(frame[roles.target], tinfo.kind, tinfo.words)
        y_all = np.where(texts == outcome_levels[1], 1.0, 0.0)
        y_all[texts == None] = np.nan  # noqa: E711 (element-wise test of an object array)
        ex.exclude(np.isnan(y_all), roles.target,
                   lambda i: f"text '{bad_text[rn[i]]}' where a number was expected" if rn[i] in bad_text
                   else "target is missing")
    else:
        y_all = frame[roles.target].to_numpy(dtype=float)
        ex.exclude(~np.isfinite(y_all), roles.target,
                   lambda i: f"text '{bad_text[rn[i]]}' where a number was expected" if rn[i] in bad_text
                   else ("target is infinite" if np.isinf(y_all[i]) else "target is missing"))
    if roles.no_count is None:
        return y_all, None
    return _count_pair_values(table, roles, y_all, ex)


def _count_pair_values(table: Table, roles: Roles, yes, ex: _Exclusions) -> tuple:
    """Aggregated yes/no rows: each row's share of "yes" and its total count.

    The row stands for yes + no people, a share yes/(yes + no) of them "yes"; its weight
    is that total (applied by the caller).
    """
    rn = ex.rn
    no = table.frame[roles.no_count].to_numpy(dtype=float)
    nbad = dict(table.info(roles.no_count).bad_cells)
    ex.exclude(~np.isfinite(no), roles.no_count,
               lambda i: f"text '{nbad[rn[i]]}' where a count was expected" if rn[i] in nbad
               else ("no count is infinite" if np.isinf(no[i]) else "no count is missing"))
    with np.errstate(invalid="ignore"):
        ex.exclude(yes < 0, roles.target, lambda i: f"yes count is negative ({yes[i]:g}); counts must be >= 0")
        ex.exclude(no < 0, roles.no_count, lambda i: f"no count is negative ({no[i]:g}); counts must be >= 0")
        count_total = yes + no
        y_all = np.where(count_total > 0, yes / np.where(count_total > 0, count_total, 1.0), 0.0)
    return y_all, count_total


def _weight_values(table: Table, roles: Roles, ex: _Exclusions, src: str) -> np.ndarray:
    """The weight of every table row (ones without a weight column); rows with a bad weight are excluded."""
    if roles.weights is None:
        return np.ones(len(table.frame))
    winfo = table.info(roles.weights)
    if winfo.kind not in (NUMERIC, BOOLEAN):
        raise DataError(f"{src}: weights column '{roles.weights}' is {winfo.kind}; weights must be numbers >= 0")
    w_all = table.frame[roles.weights].to_numpy(dtype=float)
    wbad = dict(winfo.bad_cells)
    rn = ex.rn

    def wreason(i):
        v = w_all[i]
        if rn[i] in wbad:
            return f"weight is text '{wbad[rn[i]]}'"
        if np.isnan(v):
            return "weight is missing"
        if np.isinf(v):
            return "weight is infinite"
        return f"weight is negative ({v:g})"

    ex.exclude(~np.isfinite(w_all) | (w_all < 0), roles.weights, wreason)
    return w_all


def _predictor_blocks(table: Table, roles: Roles, predictors, ex: _Exclusions, unusable: list) -> list:
    """Each predictor's raw values, tagged 'num' (numeric or boolean, used as they are) or 'cat' (one-hot later).

    Rows missing a predictor are excluded here; the coding waits until the usable rows are
    known, since a level or a spread seen only on excluded rows must not count.
    """
    frame = table.frame
    rn = ex.rn
    blocks = []  # (kind, source column, values)
    categorical_marked = set(roles.categorical)
    for col in predictors:
        info = table.columns[col]
        if info.kind == EMPTY:
            unusable.append(UnusableColumn(col, "every cell is missing", rule="empty"))
            continue
        raw = frame[col]
        if info.kind == CATEGORICAL or col in categorical_marked:
            ex.exclude(~raw.notna().to_numpy(), col, "value is missing")
            blocks.append(("cat", col, raw))
        else:
            x = raw.to_numpy(dtype=float)
            bad = dict(info.bad_cells)
            ex.exclude(~np.isfinite(x), col,
                       lambda i, x=x, bad=bad: f"text '{bad[rn[i]]}' where a number was expected" if rn[i] in bad
                       else ("value is infinite" if np.isinf(x[i]) else "value is missing"))
            blocks.append(("num", col, x))
    return blocks


def _usable_rows(ex: _Exclusions, n: int, src: str) -> tuple:
    """The indices of the rows kept and the excluded rows in table order; refuses a table with none kept."""
    keep = np.ones(n, dtype=bool)
    if ex.reasons:
        keep[list(ex.reasons)] = False
    # Zero weight is allowed: such a row contributes nothing to the fit but is still predicted.
    rows = np.flatnonzero(keep)
    excluded = tuple(ExcludedRow(int(ex.rn[i]), c, r) for i, (c, r) in sorted(ex.reasons.items()))
    if rows.size == 0:
        raise DataError(
            f"{src}: every row was excluded (first reason: row {excluded[0].row}, "
            f"column '{excluded[0].column}': {excluded[0].reason}); check the roles and the missing values"
        )
    return rows, excluded


def _check_usable_values(src: str, roles: Roles, outcome: str, outcome_levels, y, w, rows) -> None:
    """Refuse weights and targets that leave nothing to fit on the usable rows."""
    if roles.weights is not None and not np.any(w > 0):
        raise DataError(f"{src}: weights column '{roles.weights}' is zero on every usable row; weights must add up to more than 0")
    if roles.weights is not None and roles.weights_kind == COUNTS:
        frac = np.flatnonzero(w != np.round(w))
        if frac.size:
            i = int(frac[0])
            raise DataError(
                f"{src}: row {int(rows[i]) + 1}, weights column '{roles.weights}': {w[i]:g} is not a whole number, "
                "but the weights are counts (a row stands for that many observations); fix the count or "
                "choose precision weights")
    if outcome == "binary" and (not np.any(w * y > 0) or not np.any(w * (1.0 - y) > 0)):
        only = outcome_levels[1] if np.any(w * y > 0) else outcome_levels[0]
        raise DataError(
            f"{src}: target '{roles.target}' is '{only}' on every usable row, so there is no yes/no "
            "outcome to explain; choose another target or check the excluded rows"
        )
    if outcome == "numeric" and np.ptp(y[w > 0]) == 0:
        raise DataError(
            f"{src}: target '{roles.target}' has the same value ({y[0]:g}) on every usable row, "
            "so there is nothing to explain; choose another target"
        )


def _code_predictors(blocks, rows, w, unusable: list, src: str) -> tuple:
    """The design columns on the usable rows: numbers as they are, categories one-hot against their first level.

    A column constant on the rows that carry weight, or a category with one level there, is
    set aside (added to ``unusable``).

    Returns
    -------
    (names, sources, mats, references) : (list, list, list of arrays, list)
        ``mats``: a numeric column's values on every table row, a level's indicator on the
        usable rows (see :func:`_design_matrix`).
    """
    names, sources, mats = [], [], []
    references = []
    for kind, col, raw in blocks:
        if kind == "num":
            x = raw if rows.size == raw.shape[0] else raw[rows]
            if np.ptp(x[w > 0]) == 0 if np.any(w > 0) else True:
                unusable.append(UnusableColumn(col, f"constant ({x[0]:g}) on every usable row", rule="constant"))
                continue
            names.append(col)
            sources.append(col)
            mats.append(raw)  # every table row: the matrix is built once, on the usable rows
        else:
            vals = raw.to_numpy(dtype=object)[rows]
            texts = np.array([_level_text(v) for v in vals], dtype=object)
            levels = sorted(set(texts))
            if len(levels) < 2:
                unusable.append(UnusableColumn(col, f"only one level ('{levels[0]}') on every usable row",
                                               rule="one_level"))
                continue
            for lev in levels[1:]:
                names.append(f"{col}={lev}")
                sources.append(col)
                mats.append((texts == lev).astype(float))
            references.append((col, levels[0], tuple(f"{col}={lev}" for lev in levels[1:])))
    if not mats:
        reasons_txt = "; ".join(f"{u.column}: {u.reason}" for u in unusable)
        raise DataError(f"{src}: no usable predictor remains ({reasons_txt}); choose other predictors")
    # A reference level's indicator (penalized fits) is named like the others and must not
    # collide with a column either.
    _check_unique_names(names + [f"{c}={lev}" for c, lev, _ in references],
                        sources + [c for c, _, _ in references], src)
    return names, sources, mats, references


def _group_codes(frame, roles: Roles, rows) -> tuple:
    """Group codes 0..g-1 of the usable rows (in sorted order of the group texts) and the texts; (None, ())
    without a group column."""
    if roles.groups is None:
        return None, ()
    import pandas as pd

    # Each distinct value is turned into text once (a long column costs one hashing pass).
    found, uniques = pd.factorize(frame[roles.groups].to_numpy(dtype=object)[rows], sort=False)
    texts = [_level_text(v) for v in uniques]
    labels = tuple(sorted(set(texts)))
    code = {g: k for k, g in enumerate(labels)}
    return np.array([code[t] for t in texts], dtype=np.int64)[found], labels


#: Target values read as "yes" when a text outcome has one of them (case ignored).
YES_WORDS = ("yes", "y", "true", "t", "1", "pass", "passed", "positive", "top")


def _target_texts(values, kind, words=()) -> np.ndarray:
    """Each target cell as level text (None where missing); a boolean's 0/1 in the file's ``words``."""
    if kind in (NUMERIC, BOOLEAN):
        arr = values.to_numpy(dtype=float)
        if kind == BOOLEAN and words:
            return np.array([None if not np.isfinite(v) else words[int(v)] for v in arr], dtype=object)
        return np.array([None if not np.isfinite(v) else _level_text(float(v)) for v in arr], dtype=object)
    import pandas as pd

    return np.array([None if pd.isna(v) else _level_text(v) for v in values.to_numpy(dtype=object)],
                    dtype=object)


def default_positive_level(levels, kind: str) -> str:
    """Which of two target values counts as "yes" unless the person says otherwise.

    Numbers (0/1, true/false): the larger.  Text: a value that reads as yes
    (:data:`YES_WORDS`) when exactly one does, else the second in sorted order.
    """
    levels = list(levels)
    if kind == BOOLEAN:
        return levels[-1]  # listed (false, true), as 0/1 or in the file's words
    if kind == NUMERIC:
        return max(levels, key=float)
    yes = [v for v in levels if v.strip().lower() in YES_WORDS]
    return yes[0] if len(yes) == 1 else sorted(levels)[1]


def target_levels(table: Table, target: str) -> tuple:
    """The distinct values of ``target`` as text, sorted (numbers by value); at most 3 are listed."""
    info = table.info(target)
    values = table.frame[target]
    if info.kind in (NUMERIC, BOOLEAN):
        arr = values.to_numpy(dtype=float)
        # Only the distinct values are turned into text (a long column costs one sort).
        uniq = np.unique(arr[np.isfinite(arr)])[:3]
        if info.kind == BOOLEAN and info.words:
            return tuple(info.words[int(v)] for v in uniq)
        return tuple(_level_text(float(v)) for v in uniq)
    uniq = values.dropna().unique()
    return tuple(sorted({_level_text(v) for v in uniq[:1000]})[:3]) if len(uniq) <= 1000 else tuple(
        sorted(_level_text(v) for v in uniq[:3]))


#: Whether a two-valued target is taken as a yes/no outcome without being asked (a person can
#: override it both ways with ``roles.outcome``).
DETECT_YES_NO = True


def outcome_of(table: Table, roles: Roles) -> tuple:
    """The kind of target and, for a yes/no outcome, its levels ("no", "yes").

    A target with exactly two distinct values is a yes/no outcome unless
    ``roles.outcome`` says 'numeric'; ``roles.outcome == 'binary'`` on a target
    with another number of values is an error naming the column.

    Returns
    -------
    (outcome, levels) : (str, tuple)
        levels is () for a numeric target.
    """
    src = table.source or "the table"
    if roles.outcome not in (None, "numeric", "binary"):
        raise DataError(f"outcome: '{roles.outcome}' is not one of numeric, binary")
    if roles.no_count is not None:
        table.info(roles.no_count)
        if roles.outcome == "numeric":
            raise DataError(f"{src}: a no-count column ('{roles.no_count}') makes the outcome yes/no; "
                            "drop the no count or choose the binary outcome")
        for c in (roles.target, roles.no_count):
            if table.info(c).kind not in (NUMERIC, BOOLEAN):
                raise DataError(f"{src}: count column '{c}' is {table.info(c).kind}; yes and no counts must be numbers >= 0")
        if roles.positive_level is not None and roles.positive_level not in (roles.target, roles.no_count):
            raise DataError(f"positive_level: '{roles.positive_level}' must be '{roles.target}' (the yes count) "
                            "with count columns; swap the two count columns to swap yes and no")
        return "binary", (roles.no_count, roles.target)
    if roles.outcome == "numeric" or (roles.outcome is None and not DETECT_YES_NO):
        return "numeric", ()
    info = table.info(roles.target)
    if roles.outcome is None and info.distinct != 2:
        return "numeric", ()
    levels = target_levels(table, roles.target)
    two = len(levels) == 2
    if roles.outcome is None and not two:
        return "numeric", ()
    if not two:
        raise DataError(
            f"{src}: target '{roles.target}' has {info.distinct} distinct values; a yes/no outcome needs "
            "exactly two (choose the numeric outcome, or a two-valued target)")
    if roles.positive_level is not None:
        pos = str(roles.positive_level)
        if pos not in levels:
            raise DataError(f"positive_level: '{pos}' is not a value of target '{roles.target}'; "
                            f"its values are '{levels[0]}' and '{levels[1]}'")
    else:
        pos = default_positive_level(levels, info.kind)
    neg = levels[0] if levels[1] == pos else levels[1]
    return "binary", (neg, pos)


def _check_unique_names(names, sources, src) -> None:
    """A coded level's name (``c=b``) can equal another column's name; the design needs one name each."""
    seen = {}
    for name, source in zip(names, sources):
        if name in seen:
            raise DataError(
                f"{src}: design column '{name}' would come from both column '{seen[name]}' and column '{source}' "
                f"(a category level is named COLUMN=LEVEL); rename column '{name}'"
            )
        seen[name] = source


#: Largest magnitude a value may have: its square, summed over many rows, must stay finite in float64.
MAX_MAGNITUDE = 1e150


def _check_magnitudes(src, X, names, y, w, rows, roles) -> None:
    """Refuse values so large that their squares overflow: the fit would be meaningless."""
    for label, col, vals in [("target", roles.target, y), ("weights", roles.weights, w)] + [
            ("column", names[j], X[:, j]) for j in range(X.shape[1])]:
        if col is None or vals.size == 0:
            continue
        big = np.flatnonzero(np.abs(vals) > MAX_MAGNITUDE)
        if big.size:
            i = int(big[0])
            more = f" (and {big.size - 1} more rows)" if big.size > 1 else ""
            raise DataError(
                f"{src}: {label} '{col}' row {int(rows[i])} holds {vals[i]:.6g}{more}, too large to compute with "
                "(its square overflows); check that cell for a typing or unit slip, or rescale the column"
            )


def design_from_arrays(X, y, columns: Sequence[str] = None, weights=None, groups=None, target: str = "y",
                       weights_kind: str = PRECISION, outcome: str = "numeric") -> Design:
    """A design straight from arrays, for tests and benchmarks (no table, no exclusions).

    ``outcome='binary'`` takes ``y`` as 1 for "yes" and 0 for "no" (or a share of "yes").
    """
    X = np.ascontiguousarray(np.asarray(X, dtype=np.float64))
    if X.ndim == 1:
        X = X[:, None]
    n, p = X.shape
    y = np.asarray(y, dtype=np.float64).ravel()
    if columns is None:
        columns = tuple(f"x{j + 1}" for j in range(p))
    columns = tuple(columns)
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    g = None if groups is None else np.unique(np.asarray(groups), return_inverse=True)[1].astype(np.int64)
    labels = () if groups is None else tuple(str(v) for v in np.unique(np.asarray(groups)))
    return Design(
        X=X, y=y, weights=w, groups=g, columns=columns, sources=columns, target=target,
        row_numbers=np.arange(1, n + 1), weights_column=None if weights is None else "weights",
        groups_column=None if groups is None else "groups", group_labels=labels, n_table_rows=n,
        weights_kind=weights_kind if weights is not None else PRECISION,
        outcome=outcome, levels=("0", "1") if outcome == "binary" else (),
    )


def _level_text(v) -> str:
    if isinstance(v, float) and np.isfinite(v) and v == int(v):
        return str(int(v))
    return str(v)

"""The question a person asks of the table, said as a sentence across the top of the window.

    Explain [target ▾] from the ticked columns; each row counts [weights ▾] times;
    hold out whole [groups ▾] groups.

The ticks themselves live in the data view's column list (:class:`ColumnsModel`).
Both edit one :class:`RoleDraft`; nothing is fitted until the person presses Fit.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Optional

import numpy as np
from PySide6 import QtCore, QtGui, QtWidgets

from regbench.data.derive import apply_derived, make_derived
from regbench.data.design import Roles, build_design, default_positive_level, default_predictors, target_levels
from regbench.data.identifiers import GROUPS_RULE, group_label_column, identifier_columns
from regbench.data.table import BOOLEAN, CATEGORICAL, EMPTY, NUMERIC
from regbench.errors import DataError
from regbench.gui.style import PALETTE
from regbench.gui.tables import DISPLAY, HORIZONTAL, TOOLTIP

Qt = QtCore.Qt
KIND_WORDS = {NUMERIC: "number", CATEGORICAL: "text", BOOLEAN: "yes/no", EMPTY: "empty"}
NO_WEIGHTS = "1 (no weights)"
NO_GROUPS = "single rows"
TARGET_RULE = "the last column of numbers or of two values (yes/no) that is not an identifier"


def left_out_by_default(table) -> dict:
    """Column -> why the default choice of inputs leaves it out (the data layer's rule)."""
    out = identifier_columns(table)
    for c in table.names:
        if c not in out and table.columns[c].read_as_text:
            out[c] = table.columns[c].note
    return out


def can_explain(table, name: str) -> bool:
    """True when ``name`` can be the target: numbers, or exactly two values (a yes/no outcome)."""
    info = table.columns[name]
    return info.kind in (NUMERIC, BOOLEAN) or (info.kind != EMPTY and info.distinct == 2)


def default_roles(table) -> Roles:
    """A stated starting point (:data:`TARGET_RULE`): the target is the last column of numbers or of
    two values that is not an identifier; a text column labelling groups of rows is held out whole
    (:data:`~regbench.data.identifiers.GROUPS_RULE`); the inputs are the data layer's default
    (:func:`regbench.data.design.default_predictors`)."""
    ids = identifier_columns(table)
    candidates = [c for c in table.names if can_explain(table, c)]
    target = next((c for c in reversed(candidates) if c not in ids),
                  candidates[-1] if candidates else table.names[-1])
    groups = group_label_column(table, skip=(target,))
    start = Roles(target=target, groups=groups)
    return replace(start, predictors=default_predictors(table, start))


def starting_words(roles: Roles) -> str:
    """The status line's account of the starting roles: the target's rule, and the groups' when set."""
    words = f"Explaining {roles.target} ({TARGET_RULE})"
    if roles.groups is not None:
        # The rule in full is in Help and the README; the line names the column and why in brief.
        words += f", holding out whole {roles.groups} groups (its text labels repeated rows)"
    return words


def openable_roles(table, roles: Roles):
    """``roles``, or fewer ticked columns when the table has too many for its rows, so that it opens.

    Returns (roles, note); note says what was left unticked (None when nothing was).
    """
    try:
        build_design(table, roles)
        return roles, None
    except DataError as exc:
        if "usable rows" not in str(exc) or not roles.predictors:
            raise
    preds = list(roles.predictors)
    k = max(1, min(len(preds) - 1, table.n_rows - 3))
    while k >= 1:
        trial = replace(roles, predictors=tuple(preds[:k]))
        try:
            build_design(table, trial)
        except DataError as exc:
            if "usable rows" not in str(exc):
                raise
            k //= 2
            continue
        return trial, (f"The table has {len(preds)} usable columns for {table.n_rows} rows: the first {k} are "
                       "ticked so that it opens; choose the ones you want in the column list.")
    raise DataError(f"{table.source or 'the table'}: too few rows to fit even one column; add rows")


class RoleDraft(QtCore.QObject):
    """The roles and fit settings being chosen, before they are sent to the session."""

    changed = QtCore.Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.table = None            # the table with the derived columns appended
        self.base_table = None       # the table as read
        self.derived: tuple = ()
        self.target: Optional[str] = None
        self.weights: Optional[str] = None
        self.groups: Optional[str] = None
        # Yes/no outcomes: the kind of target (None: decided from it), the value counting as
        # yes, and the column of "no" counts for aggregated rows.
        self.outcome: Optional[str] = None
        self.positive_level: Optional[str] = None
        self.no_count: Optional[str] = None
        self.ticked: set = set()
        self.categorical: set = set()
        self.settings = None
        self.bootstrap = 0
        self.weights_kind: Optional[str] = None   # 'counts' or 'precision' where the engine knows the two
        self.unusable: dict = {}     # column -> why the fit cannot use it
        self.left_out: dict = {}     # column -> why it was not ticked by default

    def load(self, table, roles: Roles, settings, bootstrap: int, unusable: Optional[dict] = None) -> None:
        """Take the session's choices; ``table`` is the table as read (derived columns are added here)."""
        self.base_table = table
        self.derived = tuple(roles.derived)
        table = self.table = apply_derived(table, self.derived)
        self.target, self.weights, self.groups = roles.target, roles.weights, roles.groups
        self.outcome, self.positive_level, self.no_count = roles.outcome, roles.positive_level, roles.no_count
        if roles.predictors:
            self.ticked = set(roles.predictors)
        else:   # empty means every other usable column, as the design builder reads it
            self.ticked = set(default_predictors(table, roles))
        self.ticked -= {self.target, self.weights, self.groups}
        self.categorical = set(roles.categorical)
        self.weights_kind = getattr(roles, "weights_kind", None)
        self.settings = settings
        self.bootstrap = int(bootstrap)
        self.unusable = dict(unusable or {})
        self.left_out = {c: r for c, r in left_out_by_default(table).items() if c not in self.ticked}
        self.changed.emit()

    @property
    def names(self) -> list:
        """The column names (kept: the data view asks for them per cell)."""
        if self.table is None:
            return []
        if getattr(self, "_names_of", None) is not self.table:
            self._names, self._names_of = [str(c) for c in self.table.names], self.table
        return self._names

    def role_of(self, name: str) -> Optional[str]:
        if name == self.target:
            return "target"
        if name == self.weights:
            return "weights"
        if name == self.groups:
            return "groups"
        return None

    def uses(self, name: str) -> bool:
        """True when the fit would use ``name`` as an input."""
        return name in self.ticked and self.role_of(name) is None

    def set_target(self, name: str) -> None:
        if name != self.target:
            self.outcome = self.positive_level = self.no_count = None
        self.target = name
        self.changed.emit()

    def set_outcome(self, outcome: Optional[str], positive_level: Optional[str] = None) -> None:
        """'numeric', or 'binary' with the value that counts as yes (None: the default)."""
        self.outcome, self.positive_level = outcome, positive_level if outcome == "binary" else None
        self.changed.emit()

    def target_levels(self) -> tuple:
        """The target's two values when it has exactly two (a possible yes/no outcome), else ()."""
        if self.table is None or self.target not in self.table.columns:
            return ()
        if self.table.columns[self.target].distinct != 2:
            return ()
        return target_levels(self.table, self.target)

    def set_weights(self, name: Optional[str]) -> None:
        self.weights = name
        self.changed.emit()

    def set_groups(self, name: Optional[str]) -> None:
        self.groups = name
        self.changed.emit()

    def set_ticked(self, name: str, on: bool) -> None:
        (self.ticked.add if on else self.ticked.discard)(name)
        self.changed.emit()

    def tick_all(self, on: bool) -> None:
        self.ticked = {c for c in self.names if self.table.columns[c].kind != EMPTY} if on else set()
        self.changed.emit()

    def set_categorical(self, name: str, on: bool) -> None:
        (self.categorical.add if on else self.categorical.discard)(name)
        self.changed.emit()

    def add_derived(self, operation: str, columns) -> str:
        """Add a derived column (ticked); raises DataError, changing nothing, when the operation cannot take it."""
        d = make_derived(operation, list(columns))
        table = apply_derived(self.base_table, self.derived + (d,))
        self.derived += (d,)
        self.table = table
        self.ticked.add(d.name)
        self.changed.emit()
        return d.name

    def remove_derived(self, name: str) -> None:
        """Remove a derived column and those built on it, and every choice that names them."""
        gone, keep = {name}, []
        for d in self.derived:
            if d.name in gone or gone.intersection(d.columns):
                gone.add(d.name)
            else:
                keep.append(d)
        if self.target in gone:
            raise DataError(f"'{name}' is what the models explain; choose another target before removing it")
        self.derived = tuple(keep)
        self.table = apply_derived(self.base_table, self.derived)
        self.ticked -= gone
        self.categorical -= gone
        self.weights = None if self.weights in gone else self.weights
        self.groups = None if self.groups in gone else self.groups
        self.changed.emit()

    def is_derived(self, name: str) -> bool:
        return any(d.name == name for d in self.derived)

    def set_weights_kind(self, kind: str) -> None:
        self.weights_kind = kind
        self.changed.emit()

    @property
    def has_penalty_factors(self) -> bool:
        return self.settings is not None and hasattr(self.settings, "penalty_factors")

    def penalty_factor(self, name: str) -> float:
        return float(dict(getattr(self.settings, "penalty_factors", ()) or ()).get(name, 1.0))

    def set_penalty_factor(self, name: str, value: float) -> None:
        """A column's penalty factor in every penalized model (1: as the others; 0: never shrunk)."""
        factors = dict(getattr(self.settings, "penalty_factors", ()) or ())
        if value == 1.0:
            factors.pop(name, None)
        else:
            factors[name] = float(value)
        self.settings = replace(self.settings, penalty_factors=tuple(sorted(factors.items())))
        self.changed.emit()

    def set_settings(self, settings, bootstrap: Optional[int] = None) -> None:
        self.settings = settings
        if bootstrap is not None:
            self.bootstrap = int(bootstrap)
        self.changed.emit()

    def roles(self) -> Roles:
        preds = tuple(c for c in self.names if self.uses(c))
        cats = tuple(c for c in preds if c in self.categorical and self.table.columns[c].kind == NUMERIC)
        extra = {}
        if self.weights_kind is not None and "weights_kind" in Roles.__dataclass_fields__:
            extra["weights_kind"] = self.weights_kind
        return Roles(target=self.target, predictors=preds, categorical=cats, weights=self.weights, groups=self.groups,
                     derived=self.derived, outcome=self.outcome, positive_level=self.positive_level,
                     no_count=self.no_count, **extra)

    def differs_from(self, session) -> bool:
        """True when Fit would change the session's roles, settings or refit count."""
        if session is None or self.table is None:
            return False
        mine, theirs = self.roles(), session.roles
        # A session whose predictors are empty uses every other usable column (a project saved by
        # the command line without --predictors); the draft lists them, so compare what is used.
        used = set(theirs.predictors) if theirs.predictors else (
            set(default_predictors(self.table, theirs)) - {theirs.target, theirs.weights, theirs.groups})
        if set(mine.predictors) != used:
            return True
        return (replace(mine, predictors=()) != replace(theirs, predictors=())
                or self.settings != session.settings or self.bootstrap != session.bootstrap)


# == the sentence ===========================================================================


class QuestionBar(QtWidgets.QFrame):
    """"Explain [target] from the ticked columns; each row counts [weights] times; hold out whole [groups] groups."""

    fit_requested = QtCore.Signal()

    def __init__(self, draft: RoleDraft, parent=None):
        super().__init__(parent)
        self.setObjectName("question")
        self.draft = draft
        lay = QtWidgets.QHBoxLayout(self)
        lay.setContentsMargins(14, 6, 10, 6)
        lay.setSpacing(6)

        def words(text):
            lab = QtWidgets.QLabel(text)
            lab.setObjectName("questionWords")
            return lab

        self.target = QtWidgets.QComboBox()
        self.weights = QtWidgets.QComboBox()
        self.groups = QtWidgets.QComboBox()
        for combo in (self.target, self.weights, self.groups):
            combo.setSizeAdjustPolicy(QtWidgets.QComboBox.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(9)
        self.ticked_words = words("from the ticked columns;")
        self.weights_before = words("each row counts")
        self.weights_after = words("times;")
        self.weights_kind = QtWidgets.QComboBox()
        self.weights_kind.addItem("times", "counts")
        self.weights_kind.addItem("(precision)", "precision")
        # Sized to its longest choice, "(precision)", so the sentence never shows a clipped word.
        self.weights_kind.setSizeAdjustPolicy(QtWidgets.QComboBox.AdjustToContents)
        self.weights_kind.setVisible(False)
        self.weights_kind.setToolTip("Counts: a row stands for that many identical observations. Precision: a row "
                                     "is one observation, measured more precisely the larger its weight.")
        self.weights_kind.activated.connect(lambda *_: draft.set_weights_kind(self.weights_kind.currentData()))
        self.groups_before = words("hold out whole")
        self.groups_after = words("groups.")
        # A two-valued target reads as yes/no; this says which value is "yes" (or: treat it as a number).
        self.yes_level = QtWidgets.QComboBox()
        # Sized exactly to the choice shown (_fit_to_choice), so "('Yes' = yes)" is never cut.
        self.yes_level.setToolTip("A target with two values is a yes/no outcome: choose which value counts as yes, "
                                  "or treat it as a number")
        self.yes_level.activated.connect(lambda *_: self._outcome_chosen())
        # The sentence is two clauses, what is explained and how rows count and are held out; the
        # second moves under the first when both do not fit beside the buttons (_reflow), so no choice
        # is ever squeezed or cut and the buttons stay inside the window at any width.
        self.clause_what = _clause(words("Explain"), self.target, self.yes_level, self.ticked_words)
        self.clause_how = _clause(self.weights_before, self.weights, self.weights_kind, self.weights_after,
                                  self.groups_before, self.groups, self.groups_after)
        self.sentence = QtWidgets.QWidget()
        self.sentence_grid = QtWidgets.QGridLayout(self.sentence)
        self.sentence_grid.setContentsMargins(0, 0, 0, 0)
        self.sentence_grid.setHorizontalSpacing(4)
        self.sentence_grid.setVerticalSpacing(2)
        self.sentence_grid.addWidget(self.clause_what, 0, 0, Qt.AlignLeft)
        self.sentence_grid.addWidget(self.clause_how, 0, 1, Qt.AlignLeft)
        self.sentence_grid.setColumnStretch(2, 1)
        # The sentence may be narrower than one row of both clauses (_reflow then wraps it), so its
        # layout does not set its minimum size; _reflow does.
        self.sentence_grid.setSizeConstraint(QtWidgets.QLayout.SetNoConstraint)
        self.two_rows = False
        lay.addWidget(self.sentence, 1)
        self.settings_btn = QtWidgets.QToolButton()
        self.settings_btn.setText("Settings")
        self.settings_btn.setToolTip("Cross-validation folds, L1 ratio, how α is chosen, stability refits")
        self.settings_btn.setPopupMode(QtWidgets.QToolButton.InstantPopup)
        self.settings_form = FitSettingsForm(draft)
        menu = QtWidgets.QMenu(self.settings_btn)
        act = QtWidgets.QWidgetAction(menu)
        act.setDefaultWidget(self.settings_form)
        menu.addAction(act)
        self.settings_btn.setMenu(menu)
        lay.addWidget(self.settings_btn)
        self.fit_btn = QtWidgets.QPushButton("Fit")
        self.fit_btn.setObjectName("primary")
        self.fit_btn.setToolTip("Fit the models with these choices (Ctrl+R fits again as they are)")
        self.fit_btn.setAccessibleName("Fit the models with these choices")
        self.fit_btn.clicked.connect(self.fit_requested)
        lay.addWidget(self.fit_btn)
        self.target.activated.connect(lambda *_: draft.set_target(self.target.currentText()))
        self.weights.activated.connect(lambda *_: draft.set_weights(self.weights.currentData()))
        self.groups.activated.connect(lambda *_: draft.set_groups(self.groups.currentData()))
        draft.changed.connect(self.sync)
        self.setEnabled(False)
        self._reflow()  # starts on two rows until the bar is wide enough for one

    def sync(self) -> None:
        d = self.draft
        if d.table is None:
            self.setEnabled(False)
            return
        names = d.names
        numeric = [c for c in names if d.table.columns[c].kind in (NUMERIC, BOOLEAN)]
        targets = [c for c in names if c in numeric or d.table.columns[c].distinct == 2] or names
        for combo, items, current in ((self.target, [(c, c) for c in targets], d.target),
                                      (self.weights, [(NO_WEIGHTS, None)] + [(c, c) for c in numeric], d.weights),
                                      (self.groups, [(NO_GROUPS, None)] + [(c, c) for c in names], d.groups)):
            combo.blockSignals(True)
            if [combo.itemData(i) for i in range(combo.count())] != [v for _, v in items]:
                combo.clear()
                for text, value in items:
                    combo.addItem(text, value)
            combo.setCurrentIndex(max(0, combo.findData(current)))
            combo.blockSignals(False)
        self._sync_yes_level()
        n = sum(1 for c in names if d.uses(c))
        self.ticked_words.setText(f"from {n} ticked column{'s' if n != 1 else ''};")
        kinds = d.weights_kind is not None and d.weights is not None
        self.weights_kind.setVisible(kinds)
        if kinds:
            self.weights_kind.setCurrentIndex(max(0, self.weights_kind.findData(d.weights_kind)))
            self.weights_before.setText("each row counts" if d.weights_kind == "counts" else "weight")
            self.weights_after.setText(";")
        else:
            self.weights_before.setText("each row counts")
            self.weights_after.setText("times;")
        grouped = d.groups is not None
        self.groups_before.setText("hold out whole" if grouped else "hold out")
        self.groups_after.setText("groups." if grouped else "at random.")
        self.setEnabled(True)
        self._reflow()

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._reflow()

    def _reflow(self) -> None:
        """Put the second clause beside the first when both fit beside the buttons, else under it."""
        lay = self.layout()
        m = lay.contentsMargins()
        room = (self.width() - m.left() - m.right() - 2 * lay.spacing()
                - self.settings_btn.sizeHint().width() - self.fit_btn.sizeHint().width())
        need = (self.clause_what.sizeHint().width() + self.sentence_grid.horizontalSpacing()
                + self.clause_how.sizeHint().width())
        two = need > room
        if two != self.two_rows:
            self.two_rows = two
            self.sentence_grid.removeWidget(self.clause_how)
            if two:
                self.sentence_grid.addWidget(self.clause_how, 1, 0, 1, 3, Qt.AlignLeft)
            else:
                self.sentence_grid.addWidget(self.clause_how, 0, 1, Qt.AlignLeft)
        rows = (self.clause_what, self.clause_how)
        self.sentence.setMinimumSize(max(c.sizeHint().width() for c in rows),
                                     (sum if two else max)(c.sizeHint().height() for c in rows)
                                     + (self.sentence_grid.verticalSpacing() if two else 0))

    def _sync_yes_level(self) -> None:
        d = self.draft
        levels = d.target_levels() if d.no_count is None else ()
        self.yes_level.blockSignals(True)
        self.yes_level.clear()
        if levels:
            default = default_positive_level(levels, d.table.columns[d.target].kind)
            for lev in levels:
                self.yes_level.addItem(f"('{lev}' = yes)", "binary:" + lev)
            self.yes_level.addItem("(as a number)", "numeric:")
            current = "numeric:" if d.outcome == "numeric" else "binary:" + (d.positive_level or default)
            self.yes_level.setCurrentIndex(max(0, self.yes_level.findData(current)))
            _fit_to_choice(self.yes_level)
            # The list that drops down shows every choice whole, wider than the box if it must be.
            self.yes_level.view().setMinimumWidth(self.yes_level.view().sizeHintForColumn(0) + 24)
        self.yes_level.setVisible(bool(levels))
        self.yes_level.blockSignals(False)

    def _outcome_chosen(self) -> None:
        kind, _, level = str(self.yes_level.currentData()).partition(":")
        self.draft.set_outcome(kind, level or None)

    def set_pending(self, pending: bool, has_results: bool) -> None:
        """Say on the Fit button whether pressing it would change anything.

        The label stays short ("Fit now") so the sentence keeps its room; the full words are the
        button's tooltip and accessible name.
        """
        waiting = bool(pending or not has_results)
        self.fit_btn.setText(PENDING_LABEL if waiting else "Fit")
        self.fit_btn.setToolTip("Fit with these choices: the views show no fit of them yet" if waiting else
                                "Fit the models again with these choices (Ctrl+R)")
        self.fit_btn.setAccessibleName("Fit with these choices" if waiting else "Fit again")
        self.fit_btn.setProperty("pending", waiting)
        self.fit_btn.style().unpolish(self.fit_btn)
        self.fit_btn.style().polish(self.fit_btn)
        self._reflow()


#: The Fit button's label while the choices differ from the fit shown (or nothing is fitted yet).
PENDING_LABEL = "Fit now"


def _fit_to_choice(combo: QtWidgets.QComboBox) -> None:
    """Fix a combo box's width to its current text in its own font, with the style's frame and arrow."""
    opt = QtWidgets.QStyleOptionComboBox()
    combo.initStyleOption(opt)
    text = QtCore.QSize(combo.fontMetrics().horizontalAdvance(combo.currentText()) + 6, combo.fontMetrics().height())
    combo.setFixedWidth(combo.style().sizeFromContents(QtWidgets.QStyle.CT_ComboBox, opt, text, combo).width())


def _clause(*widgets) -> QtWidgets.QWidget:
    """Words and choices kept together on one line, never narrower than they need."""
    box = QtWidgets.QWidget()
    lay = QtWidgets.QHBoxLayout(box)
    lay.setContentsMargins(0, 0, 0, 0)
    lay.setSpacing(4)
    for w in widgets:
        lay.addWidget(w)
    box.setSizePolicy(QtWidgets.QSizePolicy.Fixed, QtWidgets.QSizePolicy.Preferred)
    return box


class FitSettingsForm(QtWidgets.QWidget):
    """Cross-validation folds, the elastic-net L1 ratio, how α is chosen, stability refits."""

    def __init__(self, draft: RoleDraft, parent=None):
        super().__init__(parent)
        self.draft = draft
        form = QtWidgets.QFormLayout(self)
        form.setContentsMargins(12, 10, 12, 10)
        self.folds = QtWidgets.QSpinBox()
        self.folds.setRange(2, 50)
        self.l1 = QtWidgets.QDoubleSpinBox()
        self.l1.setRange(0.01, 0.99)
        self.l1.setSingleStep(0.05)
        self.l1.setDecimals(2)
        self.rule = QtWidgets.QComboBox()
        self.rule.addItem("lowest held-out error", "cv_min")
        self.rule.addItem("simplest within one SE", "cv_1se")
        self.boot = QtWidgets.QSpinBox()
        self.boot.setRange(0, 2000)
        self.boot.setSingleStep(50)
        form.addRow("Cross-validation folds", self.folds)
        form.addRow("Elastic-net L1 ratio", self.l1)
        form.addRow("Choose α by", self.rule)
        form.addRow("Stability refits", self.boot)
        self.relaxed = QtWidgets.QCheckBox("also fit relaxed lasso and elastic net")
        self.relaxed.setToolTip("A refit on the columns each model selected, blended with the penalized fit; "
                                "the blend is chosen by cross-validation like α")
        form.addRow("", self.relaxed)
        self.relaxed.toggled.connect(self._changed)
        for w in (self.folds, self.l1, self.boot):
            w.valueChanged.connect(self._changed)
        self.rule.currentIndexChanged.connect(self._changed)
        draft.changed.connect(self.sync)
        self._syncing = False

    def sync(self):
        s = self.draft.settings
        if s is None:
            return
        self._syncing = True
        self.folds.setValue(s.folds)
        self.l1.setValue(float(s.l1_ratios[0]) if s.l1_ratios else 0.5)
        self.rule.setCurrentIndex(max(0, self.rule.findData(s.alpha_rule)))
        self.boot.setValue(self.draft.bootstrap)
        self.relaxed.setVisible(hasattr(s, "relaxed"))
        self.relaxed.setChecked(bool(getattr(s, "relaxed", False)))
        self._syncing = False

    def _changed(self, *_):
        if self._syncing or self.draft.settings is None:
            return
        base = self.draft.settings
        ratios = (round(self.l1.value(), 2),) + tuple(base.l1_ratios[1:])
        extra = {"relaxed": self.relaxed.isChecked()} if hasattr(base, "relaxed") else {}
        self.draft.set_settings(replace(base, folds=self.folds.value(), l1_ratios=ratios,
                                        alpha_rule=self.rule.currentData(), **extra), self.boot.value())


# == the column list (shown in the data view) ==================================================


class ColumnsModel(QtCore.QAbstractTableModel):
    """One row per column: use it (tick), kind, empty cells, distinct values, as categories, its part in the fit."""

    C_USE, C_NAME, C_KIND, C_EMPTY, C_DISTINCT, C_CATS, C_PENALTY, C_PART = range(8)
    HEADERS = ("Use", "Column", "Kind", "Empty", "Values", "As categories", "Penalty factor", "Part in the fit")

    def __init__(self, draft: RoleDraft, parent=None):
        super().__init__(parent)
        self.draft = draft
        self._shown = None
        draft.changed.connect(self._refresh)

    def _refresh(self):
        self._memo = {}
        if self._shown is not self.draft.table:
            self.beginResetModel()
            self._shown = self.draft.table
            self.endResetModel()
        elif self.rowCount():
            self.dataChanged.emit(self.index(0, 0), self.index(self.rowCount() - 1, self.columnCount() - 1))

    def rowCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else len(self.draft.names)

    def columnCount(self, parent=QtCore.QModelIndex()):
        return 0 if parent.isValid() else len(self.HEADERS)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if role == DISPLAY and orientation == HORIZONTAL:
            # Two-word headers over narrow ticks and numbers take two lines, leaving room for the reasons.
            text = self.HEADERS[section]
            return text.replace(" ", "\n", 1) if section in (self.C_CATS, self.C_PENALTY) else text
        if role == TOOLTIP and orientation == HORIZONTAL:
            return {self.C_USE: "Tick the columns the models may use",
                    self.C_CATS: "Treat whole-number codes as categories (one indicator per value)",
                    self.C_PART: "What the fit does with the column"}.get(section)
        return None

    def _name(self, row):
        return self.draft.names[row]

    def part(self, name: str) -> str:
        d = self.draft
        role = d.role_of(name)
        if role == "target":
            return "explained (the target)"
        if role == "weights":
            return "row counts (weights)" if d.weights_kind == "counts" else "row weights (precision)"
        if role == "groups":
            return "held-out groups"
        info = d.table.columns[name]
        if info.kind == EMPTY:
            return "left out: no values"
        if name in d.unusable and d.uses(name):
            return "set aside before fitting: " + d.unusable[name]
        if d.uses(name):
            return "input" + (" (as categories)" if name in d.categorical and info.kind == NUMERIC else "")
        if name in d.left_out:
            return "left out: " + d.left_out[name]
        return "not used"

    def data(self, index, role=Qt.DisplayRole):
        # Painting asks every cell for many roles at each paint: each answer is worked out once per
        # change of the draft (``_refresh`` forgets them), which made painting the list several times faster.
        key = (index.row(), index.column(), role)
        memo = self.__dict__.setdefault("_memo", {})
        try:
            return memo[key]
        except KeyError:
            value = memo[key] = self._data(index, role)
            return value

    def _data(self, index, role):
        d = self.draft
        if role not in _COLUMN_ROLES or not index.isValid() or d.table is None:
            return None   # painting asks each cell for many roles: answer the unused ones at once
        name = self._name(index.row())
        info = d.table.columns[name]
        c = index.column()
        if role == Qt.CheckStateRole:
            if c == self.C_USE and d.role_of(name) is None and info.kind != EMPTY:
                return Qt.Checked if name in d.ticked else Qt.Unchecked
            if c == self.C_CATS and info.kind == NUMERIC and d.role_of(name) is None:
                return Qt.Checked if name in d.categorical else Qt.Unchecked
            return None
        if role == Qt.DisplayRole:
            if c == self.C_NAME:
                return name
            if c == self.C_KIND:
                return "derived" if d.is_derived(name) else KIND_WORDS.get(info.kind, info.kind)
            if c == self.C_EMPTY:
                return str(info.missing) if info.missing else ""
            if c == self.C_DISTINCT:
                return str(info.distinct)
            if c == self.C_CATS and info.kind == NUMERIC and info.coded_categories and d.role_of(name) is None:
                return "suggested"
            if c == self.C_PART:
                return self.part(name)
            if c == self.C_PENALTY and d.has_penalty_factors and d.uses(name):
                return f"{d.penalty_factor(name):g}"
            return None
        if role == Qt.EditRole and c == self.C_PENALTY:
            return f"{d.penalty_factor(name):g}"
        if role == Qt.ToolTipRole:
            if c == self.C_CATS and info.coded_categories:
                return (f"whole numbers with only {info.distinct} different values: they may be codes for "
                        "categories; tick to give each value its own indicator column")
            if c == self.C_PENALTY:
                return ("How strongly the penalized models shrink this column: 1 as the others, 0 never "
                        "(always kept), 2 twice as hard. Double-click to change.")
            if c == self.C_EMPTY and info.missing:
                return f"{info.missing} empty cells; rows where a used column is empty are left out of the fit"
            if c in (self.C_PART, self.C_NAME):
                return f"{name}: {self.part(name)}"
            return None
        if role == Qt.ForegroundRole:
            if c == self.C_PART and not (d.uses(name) or d.role_of(name)):
                return QtGui.QBrush(QtGui.QColor(PALETTE["muted"]))
            if c == self.C_PART and d.role_of(name):
                return QtGui.QBrush(QtGui.QColor(PALETTE["accent"]))
            return None
        if role == Qt.TextAlignmentRole and c in (self.C_EMPTY, self.C_DISTINCT):
            return int(Qt.AlignRight | Qt.AlignVCenter)
        return None

    def flags(self, index):
        key = (index.row(), index.column(), "flags")
        memo = self.__dict__.setdefault("_memo", {})
        try:
            return memo[key]
        except KeyError:
            value = memo[key] = self._flags(index)
            return value

    def _flags(self, index):
        f = Qt.ItemIsEnabled | Qt.ItemIsSelectable
        if not index.isValid() or self.draft.table is None:
            return f
        name = self._name(index.row())
        info = self.draft.table.columns[name]
        if index.column() == self.C_USE and self.draft.role_of(name) is None and info.kind != EMPTY:
            f |= Qt.ItemIsUserCheckable
        if index.column() == self.C_CATS and info.kind == NUMERIC and self.draft.role_of(name) is None:
            f |= Qt.ItemIsUserCheckable
        if index.column() == self.C_PENALTY and self.draft.has_penalty_factors and self.draft.uses(name):
            f |= Qt.ItemIsEditable
        return f

    def setData(self, index, value, role=Qt.EditRole):
        if role == Qt.EditRole and index.isValid() and index.column() == self.C_PENALTY:
            try:
                v = float(str(value).replace(",", ".").strip())
            except ValueError:
                return False
            if not (v >= 0 and np.isfinite(v)):
                return False
            self.draft.set_penalty_factor(self._name(index.row()), v)
            return True
        if role != Qt.CheckStateRole or not index.isValid():
            return False
        name = self._name(index.row())
        on = Qt.CheckState(value) == Qt.Checked if not isinstance(value, bool) else value
        if index.column() == self.C_USE:
            self.draft.set_ticked(name, on)
            return True
        if index.column() == self.C_CATS:
            self.draft.set_categorical(name, on)
            return True
        return False


#: The roles ColumnsModel.data answers (painting asks for many more).
_COLUMN_ROLES = frozenset((Qt.CheckStateRole, Qt.DisplayRole, Qt.EditRole, Qt.ToolTipRole, Qt.ForegroundRole,
                           Qt.TextAlignmentRole))

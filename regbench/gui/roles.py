"""The side panel where a person says which column plays which part."""

from __future__ import annotations

from dataclasses import replace

from PySide6 import QtCore, QtWidgets

from regbench.data.design import Roles
from regbench.data.table import BOOLEAN, CATEGORICAL, EMPTY, NUMERIC
from regbench.gui.panels.base import caption

Qt = QtCore.Qt
NONE = "(none)"
#: A text column with more levels than this is not ticked by default (likely an identifier).
DEFAULT_MAX_LEVELS = 20
KIND_SHORT = {NUMERIC: "number", CATEGORICAL: "text", BOOLEAN: "yes/no", EMPTY: "empty"}


def default_roles(table) -> Roles:
    """A starting point for a table opened without roles: the last numeric column is the target."""
    numeric = [c for c in table.names if table.columns[c].kind in (NUMERIC, BOOLEAN)]
    if not numeric:
        target = table.names[-1]
    else:
        target = numeric[-1]
    preds = []
    for c in table.names:
        info = table.columns[c]
        if c == target or info.kind == EMPTY:
            continue
        if info.kind == CATEGORICAL and info.distinct > DEFAULT_MAX_LEVELS:
            continue
        preds.append(c)
    return Roles(target=target, predictors=tuple(preds))


class RolesPanel(QtWidgets.QWidget):
    """Target, predictors (with type, missing count, possible codes), weights, groups, fit settings."""

    applied = QtCore.Signal(object, object, int)  # Roles, FitSettings, stability refits

    C_NAME, C_KIND, C_MISSING, C_CODES = range(4)

    def __init__(self, parent=None):
        super().__init__(parent)
        self._table = None
        self._settings = None
        lay = QtWidgets.QVBoxLayout(self)
        lay.setContentsMargins(10, 8, 10, 8)
        form = QtWidgets.QFormLayout()
        self.target = QtWidgets.QComboBox()
        self.weights = QtWidgets.QComboBox()
        self.groups = QtWidgets.QComboBox()
        form.addRow("Predict", self.target)
        form.addRow("Row weights", self.weights)
        form.addRow("Keep together", self.groups)
        lay.addLayout(form)
        hint = caption("Inputs: tick to use; tick 'Codes' to treat whole numbers as categories")
        hint.setWordWrap(True)
        lay.addWidget(hint)
        self.tree = QtWidgets.QTreeWidget()
        self.tree.setColumnCount(4)
        self.tree.setHeaderLabels(["Column", "Kind", "Empty", "Codes"])
        self.tree.setRootIsDecorated(False)
        self.tree.setUniformRowHeights(True)
        self.tree.header().setStretchLastSection(False)
        self.tree.header().setSectionResizeMode(0, QtWidgets.QHeaderView.Stretch)
        for c in (1, 2, 3):
            self.tree.header().setSectionResizeMode(c, QtWidgets.QHeaderView.ResizeToContents)
        lay.addWidget(self.tree, 1)
        row = QtWidgets.QHBoxLayout()
        all_btn = QtWidgets.QPushButton("All")
        none_btn = QtWidgets.QPushButton("None")
        all_btn.clicked.connect(lambda: self._tick_all(True))
        none_btn.clicked.connect(lambda: self._tick_all(False))
        row.addWidget(all_btn)
        row.addWidget(none_btn)
        row.addStretch(1)
        lay.addLayout(row)
        lay.addWidget(caption("Fitting"))
        fform = QtWidgets.QFormLayout()
        self.folds = QtWidgets.QSpinBox()
        self.folds.setRange(2, 50)
        self.l1 = QtWidgets.QDoubleSpinBox()
        self.l1.setRange(0.01, 0.99)
        self.l1.setSingleStep(0.05)
        self.l1.setDecimals(2)
        self.rule = QtWidgets.QComboBox()
        self.rule.addItem("lowest CV error", "cv_min")
        self.rule.addItem("simplest within one SE", "cv_1se")
        self.boot = QtWidgets.QSpinBox()
        self.boot.setRange(0, 2000)
        self.boot.setSingleStep(50)
        self.boot.setValue(100)
        fform.addRow("CV folds", self.folds)
        fform.addRow("Elastic-net L1 ratio", self.l1)
        fform.addRow("Choose α by", self.rule)
        fform.addRow("Stability refits", self.boot)
        lay.addLayout(fform)
        self.apply_btn = QtWidgets.QPushButton("Apply and refit")
        self.apply_btn.setObjectName("primary")
        self.apply_btn.clicked.connect(self._apply)
        lay.addWidget(self.apply_btn)
        self.setEnabled(False)

    # -- filling ----------------------------------------------------------------------
    def load(self, table, roles: Roles, settings, n_boot: int = None) -> None:
        self._table, self._settings = table, settings
        names = list(table.names)
        numeric = [c for c in names if table.columns[c].kind in (NUMERIC, BOOLEAN)]
        self.target.blockSignals(True)
        self.target.clear()
        self.target.addItems(numeric or names)
        self.target.setCurrentText(roles.target)
        self.target.blockSignals(False)
        for combo, choices, current in ((self.weights, numeric, roles.weights), (self.groups, names, roles.groups)):
            combo.clear()
            combo.addItem(NONE)
            combo.addItems(choices)
            combo.setCurrentText(current if current else NONE)
        if roles.predictors:
            preds = set(roles.predictors)
        else:  # empty means every other usable column, as the design builder reads it
            skip = {roles.target, roles.weights, roles.groups}
            preds = {c for c in names if c not in skip and table.columns[c].kind != EMPTY}
        self.tree.clear()
        for name in names:
            info = table.columns[name]
            item = QtWidgets.QTreeWidgetItem([name, KIND_SHORT.get(info.kind, info.kind),
                                              str(info.missing) if info.missing else "", ""])
            item.setToolTip(self.C_NAME, name)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(self.C_NAME, Qt.Checked if name in preds else Qt.Unchecked)
            if info.kind == NUMERIC:
                item.setCheckState(self.C_CODES, Qt.Checked if name in roles.categorical else Qt.Unchecked)
                if info.coded_categories:
                    item.setText(self.C_CODES, "maybe")
                    item.setToolTip(self.C_CODES, f"whole numbers with only {info.distinct} distinct values: "
                                                  "perhaps category codes; tick to treat them as categories")
            if info.missing:
                item.setToolTip(self.C_MISSING, f"{info.missing} empty cells; rows using this column are left out")
            self.tree.addTopLevelItem(item)
        self.folds.setValue(settings.folds)
        self.l1.setValue(float(settings.l1_ratios[0]) if settings.l1_ratios else 0.5)
        self.rule.setCurrentIndex(max(0, self.rule.findData(settings.alpha_rule)))
        if n_boot is not None:
            self.boot.setValue(n_boot)
        self.setEnabled(True)

    def _tick_all(self, on: bool) -> None:
        for i in range(self.tree.topLevelItemCount()):
            self.tree.topLevelItem(i).setCheckState(self.C_NAME, Qt.Checked if on else Qt.Unchecked)

    # -- reading ----------------------------------------------------------------------
    def _item(self, name):
        for i in range(self.tree.topLevelItemCount()):
            it = self.tree.topLevelItem(i)
            if it.text(self.C_NAME) == name:
                return it
        raise KeyError(name)

    def set_predictor(self, name: str, on: bool) -> None:
        self._item(name).setCheckState(self.C_NAME, Qt.Checked if on else Qt.Unchecked)

    def set_codes(self, name: str, on: bool) -> None:
        self._item(name).setCheckState(self.C_CODES, Qt.Checked if on else Qt.Unchecked)

    def roles(self) -> Roles:
        target = self.target.currentText()
        weights = None if self.weights.currentText() == NONE else self.weights.currentText()
        groups = None if self.groups.currentText() == NONE else self.groups.currentText()
        preds, cats = [], []
        for i in range(self.tree.topLevelItemCount()):
            it = self.tree.topLevelItem(i)
            name = it.text(self.C_NAME)
            if name in (target, weights, groups):
                continue
            if it.checkState(self.C_NAME) == Qt.Checked:
                preds.append(name)
                if it.data(self.C_CODES, Qt.CheckStateRole) is not None and it.checkState(self.C_CODES) == Qt.Checked:
                    cats.append(name)
        return Roles(target=target, predictors=tuple(preds), categorical=tuple(cats), weights=weights, groups=groups)

    def settings(self):
        base = self._settings
        ratios = (round(self.l1.value(), 2),) + tuple(base.l1_ratios[1:])
        return replace(base, folds=self.folds.value(), l1_ratios=ratios, alpha_rule=self.rule.currentData())

    def _apply(self) -> None:
        if self._table is None:
            return
        self.applied.emit(self.roles(), self.settings(), self.boot.value())

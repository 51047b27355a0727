"""Structure: how the fitted models differ in what they say about the inputs.

Coefficients side by side (original units and standardized), which columns each
model uses, where models disagree on a coefficient's sign, and for each set of
overlapping columns how each model spreads its weight across the set.

A *collinear set* is a connected group of columns: a column OLS set aside is
joined to the kept columns whose combination reproduces it, and a strongly
collinear column (a near-dependency from the diagnostics) to the columns that
explain it; sets sharing a column merge (union-find over columns).  A model's
*share* of a column within a set is its |standardized coefficient| over the
sum of the model's |standardized coefficients| in the set, so shares compare
columns measured in different units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from regbench.analysis.agreement import in_sentence
from regbench.formatting import join_words
from regbench.models.results import Result, aligned, model_columns, model_label

_NUMBER_WORDS = {2: "two", 3: "three", 4: "four", 5: "five", 6: "six", 7: "seven", 8: "eight", 9: "nine", 10: "ten"}


@dataclass(frozen=True, eq=False)
class SignFlip(Result):
    """A column whose coefficient is positive in some models and negative in others."""

    column: str
    positive: tuple
    negative: tuple

    def to_dict(self) -> dict:
        return {"column": self.column, "positive": list(self.positive), "negative": list(self.negative)}


@dataclass(frozen=True, eq=False)
class CollinearSet(Result):
    """One connected group of overlapping columns and each model's spread of weight over it.

    Attributes
    ----------
    columns : tuple of str
        In design order.
    models : tuple of str
    shares : ndarray (models, columns)
        |standardized coef| over the model's total in the set; 0 for every column
        when the model uses none of them.
    weight : ndarray (models,)
        The model's total |standardized coef| in the set.
    set_aside : tuple of str
        Columns of the set that OLS set aside.
    sentence : str
    """

    columns: tuple
    models: tuple
    shares: np.ndarray
    weight: np.ndarray
    set_aside: tuple
    sentence: str

    def to_dict(self) -> dict:
        return {
            "columns": list(self.columns), "set_aside": list(self.set_aside),
            "shares": {k: {c: float(self.shares[i, j]) for j, c in enumerate(self.columns)}
                       for i, k in enumerate(self.models)},
            "weight": {k: float(self.weight[i]) for i, k in enumerate(self.models)},
            "sentence": self.sentence,
        }


@dataclass(frozen=True, eq=False)
class Structure(Result):
    """Coefficients of every model side by side.

    Attributes
    ----------
    models : tuple of str
    columns : tuple of str
    coef, coef_std : ndarray (models, columns)
        Original units and standardized (coef × weighted SD).
    intercepts : ndarray (models,)
    used : ndarray of bool (models, columns)
    sign_flips : tuple of SignFlip
    collinear_sets : tuple of CollinearSet
        Connected groups over set-aside explanations and near-dependencies together.
    alias_sets : tuple of CollinearSet
        Groups over the set-aside explanations alone, when a near-dependency merged
        them into a larger collinear set (so the exact story is told on its own too).
    sentences : tuple of str
    """

    models: tuple
    columns: tuple
    coef: np.ndarray
    coef_std: np.ndarray
    intercepts: np.ndarray
    used: np.ndarray
    sign_flips: tuple
    collinear_sets: tuple
    sentences: tuple
    alias_sets: tuple = ()

    def to_dict(self) -> dict:
        return {
            "models": list(self.models), "columns": list(self.columns),
            "coef": {k: dict(zip(self.columns, map(float, self.coef[i]))) for i, k in enumerate(self.models)},
            "coef_std": {k: dict(zip(self.columns, map(float, self.coef_std[i]))) for i, k in enumerate(self.models)},
            "intercepts": {k: float(self.intercepts[i]) for i, k in enumerate(self.models)},
            "used": {k: [c for c, u in zip(self.columns, self.used[i]) if u] for i, k in enumerate(self.models)},
            "sign_flips": [s.to_dict() for s in self.sign_flips],
            "collinear_sets": [s.to_dict() for s in self.collinear_sets],
            "alias_sets": [s.to_dict() for s in self.alias_sets],
            "sentences": list(self.sentences),
        }


def collinear_groups(columns, links) -> list:
    """Connected groups (size ≥ 2) of ``columns`` joined by ``links`` (iterables of names).

    Union-find over columns; each group is returned in column order, groups
    ordered by their first column.
    """
    pos = {c: j for j, c in enumerate(columns)}
    parent = list(range(len(columns)))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for link in links:
        members = [pos[c] for c in link if c in pos]
        for other in members[1:]:
            a, b = find(members[0]), find(other)
            if a != b:
                parent[max(a, b)] = min(a, b)
    groups = {}
    for j in range(len(columns)):
        groups.setdefault(find(j), []).append(j)
    return [tuple(columns[j] for j in g) for _, g in sorted(groups.items()) if len(g) > 1]


def _links(results) -> tuple:
    """Column links: (set-aside links, near-dependency links, set-aside column names)."""
    if results is None:
        return (), (), ()
    alias, near, set_aside = [], [], []
    for sa in getattr(results.ols, "set_aside", ()):
        set_aside.append(sa.column)
        alias.append((sa.column, *sa.combination.keys(), *sa.alternatives))
    diag = getattr(results, "diagnostics", None)
    for nd in getattr(diag, "near_dependencies", ()) if diag is not None else ():
        near.append((nd.column, *nd.explained_by))
    return tuple(alias), tuple(near), tuple(set_aside)


def _count(k: int) -> str:
    return _NUMBER_WORDS.get(k, str(k))


def compare_structure(design, results, models: dict) -> Structure:
    """Put the models' coefficients side by side and explain how they differ.

    Parameters
    ----------
    design : Design
    results : FitResults or None
        Supplies the collinear sets (OLS set-aside explanations and
        near-dependencies); None: no sets.
    models : dict of str -> LinearModel
        In display order (e.g. ``results.models()`` or models at other α).

    Returns
    -------
    Structure
    """
    names = tuple(models)
    # The design's columns, then the reference levels the penalized fits weigh like any level
    # (a model without such a column, OLS, carries 0 there: its intercept holds that level).
    columns = model_columns(design.columns, models.values())
    coef = np.array([aligned(models[k], columns) for k in names]).reshape(len(names), len(columns))
    coef_std = np.array([aligned(models[k], columns, standardized=True) for k in names]).reshape(
        len(names), len(columns))
    intercepts = np.array([float(models[k].intercept) for k in names])
    used = coef != 0.0
    carried = np.array([[c in set(models[k].columns or design.columns) for c in columns]
                        for k in names]).reshape(used.shape)

    flips = []
    for j, c in enumerate(columns):
        pos = tuple(k for i, k in enumerate(names) if coef[i, j] > 0)
        neg = tuple(k for i, k in enumerate(names) if coef[i, j] < 0)
        if pos and neg:
            flips.append(SignFlip(c, pos, neg))

    alias_links, near_links, ols_aside = _links(results)
    inexact = {sa.column for sa in getattr(getattr(results, "ols", None), "set_aside", ()) if not getattr(sa, "exact", True)}

    def make(group, lead):
        idx = [columns.index(c) for c in group]
        a = np.abs(coef_std[:, idx])
        weight = a.sum(axis=1)
        shares = np.divide(a, weight[:, None], out=np.zeros_like(a), where=weight[:, None] > 0)
        aside = tuple(c for c in group if c in ols_aside)
        return CollinearSet(columns=group, models=names, shares=shares, weight=weight, set_aside=aside,
                            sentence=_set_sentence(group, names, shares, aside, lead))

    sets = [make(g, "Across the overlapping columns") for g in collinear_groups(columns, alias_links + near_links)]
    merged = {cs.columns for cs in sets}
    # The sets OLS set columns aside in, on their own, when near-dependencies merged them into larger sets.
    alias_sets = [make(g, "Within the near-exact dependency" if inexact & set(g) else "Within the exact dependency")
                  for g in collinear_groups(columns, alias_links) if g not in merged]

    sentences = [_usage_sentence(names, columns, used, ols_aside, carried)]
    extra = columns[len(design.columns):]
    if extra:
        sentences.append(f"The penalized fits give every level of a category its own coefficient, so they also "
                         f"weigh {join_words(extra)}, the level{'s' if len(extra) > 1 else ''} OLS measures the "
                         "others against (its intercept carries "
                         f"{'them' if len(extra) > 1 else 'it'}).")
    sentences.extend(s.sentence for s in alias_sets)
    sentences.extend(s.sentence for s in sets)
    if flips:
        sentences.append(_flip_sentence(flips))
    elif len(names) > 1:
        sentences.append("No column changes sign between the models.")
    return Structure(models=names, columns=columns, coef=coef, coef_std=coef_std, intercepts=intercepts,
                     used=used, sign_flips=tuple(flips), collinear_sets=tuple(sets), alias_sets=tuple(alias_sets),
                     sentences=tuple(sentences))


def _usage_sentence(names, columns, used, ols_aside, carried=None) -> str:
    parts = []
    for i, k in enumerate(names):
        p = len(columns) if carried is None else int(carried[i].sum())
        u = int(used[i].sum())
        label = model_label(k) if i == 0 else in_sentence(model_label(k))
        what = f"all {p}" if u == p else f"{u} of {p}"
        extra = f" ({len(ols_aside)} set aside)" if k in ("ols", "logistic") and ols_aside else ""
        parts.append(f"{label} {what}{extra}" if i else f"{label} uses {what} columns{extra}")
    return join_words(parts) + "."


def _pct(v: float) -> str:
    return "under 1%" if 0 < v < 0.005 else f"{v:.0%}"


def _most(group, s, n=3) -> str:
    order = [j for j in np.argsort(-s, kind="stable") if s[j] > 0][:n]
    return ", ".join(f"{_pct(s[j])} on {group[j]}" for j in order)


#: Columns a sentence names at most; the rest are counted ("s001, …, s006 and 994 more"), the tables list them.
NAMED = 6


def _set_sentence(group, names, shares, aside, lead) -> str:
    k = len(group)
    parts = []
    for i, name in enumerate(names):
        label = model_label(name) if i == 0 else in_sentence(model_label(name))
        s = shares[i]
        on = [c for c, v in zip(group, s) if v > 0]
        top = int(np.argmax(s))
        if not on:
            parts.append(f"{label} uses none of them")
        elif name in ("ols", "logistic") and aside and len(on) + len(aside) == k:
            where = join_words(on) if len(on) <= 3 else f"the other {_count(len(on))} ({_most(group, s)})"
            parts.append(f"{label} sets {join_words(aside, most=NAMED)} aside and puts all the weight on {where}")
        elif len(on) == k:
            parts.append(f"{label} spreads it over all {_count(k)} columns (largest share {_pct(s[top])} on {group[top]})")
        elif len(on) == 1:
            parts.append(f"{label} keeps only {on[0]}")
        elif len(on) <= 3:
            parts.append(f"{label} keeps only {join_words(on)} ({_most(group, s)})")
        else:
            parts.append(f"{label} keeps {_count(len(on))} of the {_count(k)} ({_most(group, s)})")
    return f"{lead} {join_words(group, most=NAMED)}: " + "; ".join(parts) + "."


def _flip_sentence(flips) -> str:
    shown = flips[:3]
    bits = []
    for f in shown:
        pos = join_words(in_sentence(model_label(k)) for k in f.positive)
        neg = join_words(in_sentence(model_label(k)) for k in f.negative)
        bits.append(f"{f.column} is positive in {pos} but negative in {neg}")
    more = f" ({len(flips) - len(shown)} more)" if len(flips) > len(shown) else ""
    n = len(flips)
    return (f"{_count(n).capitalize()} column{'s' if n != 1 else ''} change{'' if n != 1 else 's'} sign between "
            f"the models{more}: " + "; ".join(bits) + ". An overlapping column's sign says little on its own.")

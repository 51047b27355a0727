"""Stability: how much of each model's story survives resampling the rows.

Each bootstrap refit draws rows with replacement (whole groups with
replacement when the design has groups, so a group is never split) and refits
OLS and every penalized family at the fixed chosen α (``engine.fit_models_at``,
no path, no CV).  A draw enters the refit as a multiplicity per row: a row
drawn k times gets weight k·w.  For weighted least squares and for the
penalized objective this is the same problem as stacking k copies of the row
(the objective sums wᵢ over rows), and no rows are copied.  With groups, a
refit needs no row at all: the drawn sample's cross-products are the groups'
cross-products added up with their counts (:mod:`regbench.analysis.group_refits`),
so each refit is p×p work after one pass over the rows.  A table read in batches
keeps those group statistics over every row (``group_sums``), so its refits are
the in-memory route's although only a sample of its rows is at hand.

Reported per column: how often OLS sets it aside, how often each model uses it
(coefficient ≠ 0: "selected" for lasso and elastic net), and each
coefficient's mean, SD and 5–95% range across refits (original units).

When columns are exact aliases of each other, which one OLS sets aside is
decided by the column order (pins first, then design order), not by the data:
such a column is set aside in every refit.  That case is detected and said.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from regbench.analysis.agreement import in_sentence, json_number
from regbench.analysis.group_refits import GroupRefits, RowRefits
from regbench.errors import DataError, ModelError
from regbench.formatting import join_words
from regbench.models.engine import fit_models_at
from regbench.models.ols import fit_ols, one_blas_thread
from regbench.models.results import Result, aligned, model_columns, model_label
from regbench.progress import check, report

#: Selected in at least this share of refits: a stable choice (our threshold).
STABLE_SHARE = 0.95
#: Selected in between these shares: the selection is a toss-up (our threshold).
TOSS_UP = (0.2, 0.8)


@dataclass(frozen=True, eq=False)
class Stability(Result):
    """Bootstrap refits of every model at fixed α.

    Attributes
    ----------
    columns : tuple of str
    models : tuple of str
    n_boot : int
    seed : int
    grouped : bool
        True when whole groups were resampled.
    alphas : dict of str -> float
        The fixed α of each penalized family.
    set_aside_freq : ndarray (p,)
        Share of refits in which OLS set each column aside.
    selected_freq : dict of str -> ndarray (p,)
        Share of refits in which each model's coefficient is not 0.
    coef_mean, coef_sd, coef_q05, coef_q95 : dict of str -> ndarray (p,)
        Across refits, original units (SD with ddof 1).
    coef_draws : dict of str -> ndarray (n_boot, p)
    order_driven : tuple of str
        Columns set aside in every refit because they are exact aliases that come
        later in the column order.
    sentences : tuple of str
    n_flat : int
        Refits whose drawn rows all have the same target value (nothing to fit).
    """

    columns: tuple
    models: tuple
    n_boot: int
    seed: int
    grouped: bool
    alphas: dict
    set_aside_freq: np.ndarray
    selected_freq: dict
    coef_mean: dict
    coef_sd: dict
    coef_q05: dict
    coef_q95: dict
    coef_draws: dict
    order_driven: tuple
    sentences: tuple
    n_flat: int = 0

    def to_dict(self) -> dict:
        per = lambda d: {k: dict(zip(self.columns, (json_number(x) for x in v))) for k, v in d.items()}  # noqa: E731
        return {
            "columns": list(self.columns), "models": list(self.models), "n_boot": int(self.n_boot),
            "seed": int(self.seed), "grouped": bool(self.grouped),
            "alphas": {k: float(v) for k, v in self.alphas.items()},
            "set_aside_freq": dict(zip(self.columns, map(float, self.set_aside_freq))),
            "selected_freq": per(self.selected_freq), "coef_mean": per(self.coef_mean),
            "coef_sd": per(self.coef_sd), "coef_q05": per(self.coef_q05), "coef_q95": per(self.coef_q95),
            "order_driven": list(self.order_driven), "sentences": list(self.sentences),
            "n_flat": int(self.n_flat),
        }


def resample_counts(design, rng: np.random.Generator) -> np.ndarray:
    """How many times each row is drawn in one bootstrap sample.

    Without groups: n rows drawn with replacement.  With groups: as many groups
    as there are, drawn with replacement; every row of a drawn group comes along,
    so all rows of one group share one count.
    """
    n = design.n
    if design.groups is None:
        return np.bincount(rng.integers(0, n, n), minlength=n).astype(np.float64)
    g = int(design.groups.max()) + 1
    per_group = np.bincount(rng.integers(0, g, g), minlength=g).astype(np.float64)
    return per_group[design.groups]


def group_counts(n_groups: int, rng: np.random.Generator) -> np.ndarray:
    """How many times each group is drawn in one grouped bootstrap sample (as :func:`resample_counts`)."""
    return np.bincount(rng.integers(0, n_groups, n_groups), minlength=n_groups).astype(np.float64)


def bootstrap_stability(design, settings, alphas: dict, n_boot: int = 200, seed: int = 0, progress=None,
                        cancel=None, method: str = "auto", relaxations=None, full_ols=None,
                        group_sums=None) -> Stability:
    """Refit every model on bootstrap samples at the fixed α of each family.

    Parameters
    ----------
    design : Design
    settings : FitSettings
        OLS pins and rank tolerance, and the elastic-net L1 ratios.
    alphas : dict of str -> float
        α per penalized family (e.g. ``{k: pf.alpha for k, pf in results.penalized.items()}``).
    n_boot : int
    seed : int
    progress, cancel : callables, optional
        ``progress(done, total, message)`` after each refit; ``cancel()`` checked between refits.
    method : {'auto', 'groups', 'rows'}
        ``'groups'`` refits from the cross-products of each group, re-weighted by
        how often the draw took it (p×p work per refit, :mod:`regbench.analysis.group_refits`);
        ``'rows'`` refits on the re-weighted rows.  ``'auto'`` uses the groups
        when the design has them; without groups (a numeric target) each refit takes
        the drawn rows' cross-products in one weighted pass and solves as the groups
        route does (:class:`~regbench.analysis.group_refits.RowRefits`), where
        ``'rows'`` factors the rows for OLS.  Given the same draws all give the same models,
        except that OLS, working from cross-products, sets a column aside when what
        is left of it is within :data:`~regbench.analysis.group_refits.GRAM_RANK_TOL`
        of its size (the rows resolve down to round-off).
    full_ols : OLSResult, optional
        OLS on the whole design with these settings (the fit's own), which says which
        set-aside columns are exact aliases; fitted here when not given.
    group_sums : GroupSums, optional
        Each group's cross-products over every row of a table read in batches
        (:class:`regbench.data.stream.GroupSums`), when ``design`` holds only a sample
        of its rows: the refits sum them (same draws, same models as the rows in
        memory would give) and ``full_ols`` must be the fit of every row.

    Returns
    -------
    Stability
    """
    n_boot = int(n_boot)
    if n_boot < 2:
        raise DataError(f"stability needs at least 2 bootstrap refits, not {n_boot}")
    if method not in ("auto", "groups", "rows"):
        raise ValueError(f"method: '{method}' is not one of auto, groups, rows")
    # A yes/no outcome's logistic models are not least-squares problems: they refit on the rows.
    numeric = getattr(design, "outcome", "numeric") != "binary"
    by_groups = design.groups is not None and method in ("auto", "groups") and numeric
    if method == "groups" and design.groups is None:
        raise DataError("stability from group cross-products needs a group column")
    if group_sums is not None:
        if method == "rows" or full_ols is None or design.groups is None:
            raise ValueError("group_sums: refits from every group's statistics need method 'auto' or 'groups', "
                             "a design with groups and the fit's own OLS")
        by_groups = True
    # Draws of single rows of a numeric target: one weighted pass per refit, then p×p solves (RowRefits).
    by_sums = method == "auto" and numeric and not by_groups
    with one_blas_thread():
        return _bootstrap(design, settings, alphas, n_boot, seed, progress, cancel, by_groups, relaxations, full_ols,
                          group_sums, by_sums)


def _bootstrap(design, settings, alphas, n_boot, seed, progress, cancel, by_groups, relaxations=None,
               full_ols=None, group_sums=None, by_sums=False) -> Stability:
    rng = np.random.default_rng(seed)
    draws = None
    names = None
    flat = 0
    refitter = None
    if by_groups:
        refitter = GroupRefits(design, settings, alphas, relaxations, sums=group_sums)
    rows_refitter = RowRefits(design, settings, alphas, relaxations) if by_sums else None
    separated = 0
    ready = []  # draws of groups made ahead, in the order the generator gives them
    for b in range(n_boot):
        check(cancel)
        try:
            if refitter is not None:
                if not ready:
                    ready = refitter.draw_many(rng, refitter.batch(n_boot - b))
                per_group, xx = ready.pop(0)
                flat += int(refitter.flat(per_group))
                models = refitter.refit(per_group, xx)
            elif rows_refitter is not None:
                counts = resample_counts(design, rng)
                flat += int(rows_refitter.flat(counts))
                models = rows_refitter.refit(counts)
            else:
                counts = resample_counts(design, rng)
                drawn = design.y[(counts > 0) & (design.weights > 0)]
                flat += int(drawn.size == 0 or np.ptp(drawn) == 0)
                models = fit_models_at(replace(design, weights=design.weights * counts), settings, alphas,
                                       relaxations)
        except ModelError as exc:
            what = "groups" if design.groups is not None else "rows"
            raise ModelError(f"bootstrap refit {b + 1} of {n_boot} (seed {seed}) could not be fitted on the {what} "
                             f"it drew: {exc}; try another seed or more {what}") from exc
        if draws is None:
            names = tuple(models)
            if getattr(design, "outcome", "numeric") == "binary" and "logistic" not in names:
                names = ("logistic",) + names
            # Penalized fits weigh every level of a category: their reference levels follow the design's
            # columns; a model without such a column (OLS: its intercept carries the level) draws NaN there.
            cols = model_columns(design.columns, models.values())
            draws = {k: np.empty((n_boot, len(cols))) for k in names}
        for k in names:
            # A refit whose drawn rows a column separates has no unpenalized logistic estimate.
            draws[k][b] = aligned(models[k], cols, fill=np.nan) if k in models else np.nan
        separated += int(any(k not in models for k in names))
        report(progress, b + 1, n_boot, f"stability refit {b + 1} of {n_boot}")
    import warnings

    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN column (a reference level in OLS)
        selected = {k: np.nanmean(np.where(np.isnan(draws[k]), np.nan, draws[k] != 0.0), axis=0)
                    if np.isnan(draws[k]).any() else np.mean(draws[k] != 0.0, axis=0) for k in names}
    unpen = "logistic" if "logistic" in names else "ols"
    set_aside = 1.0 - np.nan_to_num(selected[unpen], nan=0.0)
    set_aside[design.p:] = 0.0  # a reference level is never set aside: the intercept carries it
    full = full_ols
    if group_sums is None and (full is None or tuple(full.columns) != tuple(design.columns)):
        full = fit_ols(design, settings.pins, settings.rank_tol)
    order_driven = tuple(sa.column for sa in full.set_aside
                         if getattr(sa, "exact", True) and set_aside[design.columns.index(sa.column)] == 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN column when every refit separated
        q05 = {k: np.nanquantile(draws[k], 0.05, axis=0) for k in names}
        q95 = {k: np.nanquantile(draws[k], 0.95, axis=0) for k in names}
        mean = {k: np.nanmean(draws[k], axis=0) for k in names}
        sd = {k: np.nanstd(draws[k], axis=0, ddof=1) for k in names}
    sentences = _sentences(design, settings, names, n_boot, set_aside, selected, q05, q95, full, order_driven, cols)
    if separated:
        sentences.append(f"In {separated} of the {n_boot} refits a column or combination separated the outcome, so "
                         "the unpenalized logistic model had no estimate there; its frequencies use the other refits.")
    if flat:
        sentences.append(f"{flat} of the {n_boot} refits drew rows whose {design.target} is the same everywhere; "
                         "every coefficient is 0 there, which lowers the frequencies above. Use more rows or groups.")
    if group_sums is not None:
        # First, so that a view showing only the opening sentences says where the numbers come from.
        n_rows = int(round(sum(st.n for st in group_sums.stats)))
        sentences.insert(0, f"The table was read in batches: each refit adds up the cross-products of the groups it "
                         f"drew over all {n_rows:,} usable rows, not the row sample.")
        if refitter.from_cross_products:
            sentences.append(f"In {refitter.from_cross_products} of the {n_boot} refits OLS's kept columns overlap "
                             "so closely that, without the rows at hand, its coefficients there carry more round-off "
                             "than in memory.")
    return Stability(columns=tuple(cols), models=names, n_boot=n_boot, seed=int(seed),
                     grouped=design.groups is not None, alphas={k: float(v) for k, v in alphas.items()},
                     set_aside_freq=set_aside, selected_freq=selected, coef_mean=mean, coef_sd=sd,
                     coef_q05=q05, coef_q95=q95, coef_draws=draws, order_driven=order_driven,
                     sentences=tuple(sentences), n_flat=flat)


def _sentences(design, settings, names, n_boot, set_aside, selected, q05, q95, full, order_driven, cols=None) -> list:
    cols = tuple(design.columns if cols is None else cols)
    out = []
    unit = f"{n_boot} {'grouped ' if design.groups is not None else ''}bootstrap refits"
    if design.groups is not None:
        out.append(f"Each of the {unit} resamples whole {design.groups_column or 'group'} groups, so a group is "
                   "never split.")
    by_column = {sa.column: sa for sa in full.set_aside}
    pins = set(settings.pins)
    for c in order_driven:
        sa = by_column[c]
        alts = list(sa.alternatives)
        j = cols.index(c)
        if alts and all(a in pins or cols.index(a) < j for a in alts):
            why = (f"because it comes after {join_words(alts)} in the column order"
                   + (" (pinned columns come first)" if pins & set(alts) else ""))
        else:
            why = "because of the column order, not the data"
        them = "them" if len(alts) > 1 else "it"
        out.append(f"{c} is set aside in every refit {why}; the data cannot tell {them} apart from {c} "
                   "(an exact alias).")
    for j, c in enumerate(cols):
        f = set_aside[j]
        if c not in order_driven and f > 0:
            out.append(f"OLS sets {c} aside in {f:.0%} of the refits: the overlap depends on which rows are drawn.")
    for k in names:
        if k in ("ols", "logistic", "ridge"):
            continue
        s = selected[k]
        stable = [c for c, v in zip(cols, s) if v >= STABLE_SHARE]
        toss = [(c, v) for c, v in zip(cols, s) if TOSS_UP[0] <= v <= TOSS_UP[1]]
        label = model_label(k)
        txt = f"{label} keeps {len(stable)} of {len(cols)} columns in at least {STABLE_SHARE:.0%} of the refits"
        if toss:
            shown = sorted(toss, key=lambda t: abs(t[1] - 0.5))[:3]
            txt += "; its choice of " + join_words(f"{c} ({v:.0%})" for c, v in shown) + " is a toss-up"
        out.append(txt + ".")
    straddle = {}
    for k in names:
        for j, c in enumerate(cols):
            if selected[k][j] > 0.5 and q05[k][j] < 0 < q95[k][j]:
                straddle.setdefault(c, []).append(in_sentence(model_label(k)))
    if straddle:
        items = list(straddle.items())[:3]
        out.append("The 5–95% range of the coefficient includes 0 for "
                   + "; ".join(f"{c} in {join_words(ms)}" for c, ms in items)
                   + (f" and {len(straddle) - 3} more columns" if len(straddle) > 3 else "")
                   + ": even its sign is not settled by these data.")
    return out

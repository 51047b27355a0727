"""The fit as plain JSON data and as a readable text summary.

``fit_to_json`` returns only dicts, lists, str, bool, int, float and None;
NaN and infinities become None so the result is strict JSON.  Coefficients are
in the table's original units (``coefficients``) and on predictors
standardized by weighted mean and weighted population SD
(``coefficients_standardized``).
"""

from __future__ import annotations

import math

import numpy as np

from regbench.formatting import number_text
from regbench.models.results import model_label

#: The objective, in the words the README and help use.
OBJECTIVE = ("minimise (1/(2W))·Σ wᵢ(yᵢ − b₀ − x̃ᵢβ)² + α·Σⱼ vⱼ(ρ|βⱼ| + (1−ρ)/2·βⱼ²), "
             "x̃ = predictors standardized by weighted mean and weighted population SD, W = Σwᵢ, "
             "vⱼ = the column's penalty factor (1 unless set)")


def _num(v):
    """A float for JSON, None for NaN or ±inf."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _by_column(columns, values) -> dict:
    return {c: _num(v) for c, v in zip(columns, np.asarray(values, dtype=float))}


def _ols_json(results) -> dict:
    from regbench.models.ols import set_aside_sentence

    o = results.ols
    cols = o.columns
    set_aside = []
    for sa in o.set_aside:
        set_aside.append({
            "column": sa.column,
            "combination": {k: _num(v) for k, v in sa.combination.items()},
            "intercept": _num(sa.intercept),
            "residual": _num(sa.residual),
            "alternatives": list(sa.alternatives),
            "reason": getattr(sa, "reason", "combination"),
            "exact": bool(sa.exact),
            "sentence": set_aside_sentence(sa),
        })
    return {
        "intercept": _num(o.model.intercept),
        "intercept_se": _num(o.intercept_se),
        # A set-aside column has no coefficient: null, never 0 (0 reads as "no effect").
        "coefficients": _by_column(cols, o.coef_or_nan()),
        "coefficients_standardized": _by_column(cols, o.coef_or_nan(standardized=True)),
        "std_errors": _by_column(cols, o.std_errors),
        "t_values": _by_column(cols, o.t_values),
        "p_values": _by_column(cols, o.p_values),
        "kept": list(o.kept),
        "r_squared": _num(o.r_squared),
        "adj_r_squared": _num(o.adj_r_squared),
        "residual_sd": _num(o.residual_sd),
        "df_resid": _num(o.df_resid),
        "observations": _num(getattr(o, "observations", o.n_obs)),
        "weights_kind": getattr(o, "weights_kind", "precision"),
        "inference_note": getattr(o, "inference_note", "") or None,
        "cluster_std_errors": (None if getattr(o, "cluster_std_errors", None) is None
                               else _by_column(cols, o.cluster_std_errors)),
        "cluster_intercept_se": _num(getattr(o, "cluster_intercept_se", None)),
        "n_clusters": int(getattr(o, "n_clusters", 0)),
        "set_aside": set_aside,
    }


def _penalized_json(pf, columns) -> dict:
    m = pf.model
    out = {
        "intercept": _num(m.intercept),
        "coefficients": _by_column(columns, m.coef),
        "coefficients_standardized": _by_column(columns, m.coef_std),
        "alpha": _num(pf.alpha),
        "l1_ratio": _num(pf.l1_ratio),
        "alpha_rule": pf.alpha_rule,
        "path": {
            "alphas": [_num(a) for a in pf.path.alphas],
            "coefficients": {c: [_num(v) for v in pf.path.coef[:, j]] for j, c in enumerate(columns)},
        },
        "cv": None,
        "convergence": None if pf.convergence is None else pf.convergence.to_dict(),
    }
    if pf.relaxation is not None:
        # Relaxed families: the chosen γ and the CV error over (γ, α); `path` is along α at that γ.
        out["relaxation"] = _num(pf.relaxation)
        rcv = pf.relaxation_cv
        if rcv is not None:
            out["relaxation_cv"] = {
                "relaxations": [_num(g) for g in rcv.relaxations],
                "mean": [[_num(v) for v in row] for row in rcv.mean],
                "se": [[_num(v) for v in row] for row in rcv.se],
            }
    if pf.cv is not None:
        cv = pf.cv
        out["cv"] = {
            "alphas": [_num(a) for a in cv.alphas],
            "mean": [_num(v) for v in cv.mean],
            "se": [_num(v) for v in cv.se],
            "alpha_min": _num(cv.alpha_min),
            "alpha_1se": _num(cv.alpha_1se),
            "folds": int(cv.n_folds),
            "grouped": bool(cv.grouped),
            "at_edge": bool(getattr(cv, "at_edge", False)),
        }
    return out


def fit_to_json(design, results) -> dict:
    """Everything ``fit_all`` produced, as strict-JSON data.

    Parameters
    ----------
    design : Design
    results : FitResults

    Returns
    -------
    dict
        Keys ``rows_used``, ``rows_excluded``, ``unusable``, ``models``
        (``ols``, ``ridge``, ``lasso``, ``elastic_net`` and any further
        elastic nets), ``diagnostics`` and ``settings``.
    """
    columns = tuple(results.columns)
    models = {"ols": _ols_json(results)}
    for name, pf in results.penalized.items():
        models[name] = _penalized_json(pf, columns)
    d = results.diagnostics
    return {
        "rows_used": int(design.n),
        "rows_excluded": [e.to_dict() for e in design.excluded],
        "unusable": [u.to_dict() for u in design.unusable],
        "derived_columns": [{"name": x.name, **x.to_dict()} for x in getattr(design, "derived", ())],
        "read_as_text": [{"column": c, "reason": note} for c, note, as_text in design.column_notes if as_text],
        "read_notes": [{"column": c, "note": note} for c, note, as_text in design.column_notes if not as_text],
        "models": models,
        "diagnostics": {
            "vif": _by_column(d.columns, d.vif),
            "condition_indices": [_num(v) for v in d.condition_indices],
            "near_dependencies": [nd.sentence for nd in d.near_dependencies],
        },
        "settings": results.settings.to_dict(),
        "ranges": _ranges(design, results).to_dict(),
    }


def _ranges(design, results):
    from regbench.analysis.ranges import compute_ranges

    return compute_ranges(design, results, results.settings.range_tolerance)


def _fmt(v) -> str:
    if v is None or not math.isfinite(v):
        return "–"
    if v == 0:
        return "0"
    return f"{v:.4g}"


def se_kind_sentence(design, o) -> str:
    """Which standard errors the summary and the JSON carry."""
    if getattr(o, "cluster_std_errors", None) is not None:
        return (f"Standard errors: classical (rows independent) and, beside them, cluster-robust by "
                f"{design.groups_column} ({o.n_clusters} groups; small-sample factor G/(G−1)·(N−1)/(N−K)); "
                "when rows of a group share influences, read the cluster-robust ones.")
    return "Standard errors: classical (rows independent); set a group column for cluster-robust ones."


def fit_summary_text(design, results) -> str:
    """A plain-text summary of the fit, in the order a reader asks about it."""
    from regbench.models.ols import set_aside_sentence

    lines = []
    extra = []
    if design.weights_column:
        if getattr(design, "counts", False):
            extra.append(f"each row counts as {design.weights_column} observations "
                         f"({design.observations():,.0f} in all)")
        else:
            extra.append(f"rows weighted by {design.weights_column} (precision weights: one observation per row)")
    if design.groups_column:
        extra.append(f"{len(design.group_labels)} groups in {design.groups_column}")
    head = f"Target {design.target}: {design.n} rows used, {len(design.excluded)} left out"
    lines.append(head + (f"; {', '.join(extra)}" if extra else "") + ".")
    if design.excluded:
        lines.append("")
        lines.append("Rows left out")
        for e in design.excluded[:20]:
            lines.append(f"  row {e.row}, {e.column}: {e.reason}")
        if len(design.excluded) > 20:
            lines.append(f"  … and {len(design.excluded) - 20} more (see the JSON output)")
    if design.unusable:
        lines.append("")
        lines.append("Columns not used")
        for u in design.unusable:
            lines.append(f"  {u.column}: {u.reason}")
    if design.column_notes:
        lines.append("")
        lines.append("How columns were read")
        for c, note, _ in design.column_notes:
            lines.append(f"  {c}: {note}")

    lines.append("")
    lines.append("What overlaps")
    if results.ols.set_aside:
        for sa in results.ols.set_aside:
            lines.append(f"  • {set_aside_sentence(sa)}")
    for s in results.diagnostics.sentences:
        lines.append(f"  • {s}")
    if not results.ols.set_aside and not results.diagnostics.sentences:
        lines.append("  • No strong overlap between the predictors was found.")

    names = list(results.models())
    models = results.models()
    labels = [model_label(n) for n in names]
    set_aside = {sa.column for sa in results.ols.set_aside}
    width = max([len("(intercept)")] + [len(c) for c in results.columns]) + 2
    colw = max(12, max(len(l) for l in labels) + 2)
    lines.append("")
    lines.append("Coefficients in the table's units (– : not used by that model)")
    lines.append(" " * (width + 2) + "".join(l.rjust(colw) for l in labels))
    lines.append("  " + "(intercept)".ljust(width) + "".join(_fmt(models[n].intercept).rjust(colw) for n in names))
    for j, c in enumerate(results.columns):
        cells = []
        for n in names:
            if n == "ols" and c in set_aside:
                cells.append("set aside".rjust(colw))
            else:
                v = float(models[n].coef[j])
                cells.append(("–" if v == 0.0 else _fmt(v)).rjust(colw))
        lines.append("  " + c.ljust(width) + "".join(cells))
    lines.append("  " + "columns used".ljust(width) + "".join(str(int(models[n].used.sum())).rjust(colw) for n in names))

    lines.append("")
    o = results.ols
    counts = getattr(design, "counts", False)
    sd_note = (f" for a row of weight 1 (rows are weighted by {design.weights_column})"
               if design.weighted and not counts else "")
    lines.append(f"OLS: R² {_fmt(o.r_squared)}, adjusted R² {_fmt(o.adj_r_squared)}, residual SD {_fmt(o.residual_sd)}{sd_note}, "
                 f"{_fmt(o.df_resid)} residual degrees of freedom.")
    if getattr(o, "inference_note", ""):
        lines.append(f"  {o.inference_note}")
    lines.append("  " + se_kind_sentence(design, o))
    k = results.settings.folds
    kind = "grouped " if design.groups is not None else ""
    lines.append(f"Penalties (α), {k}-fold {kind}cross-validation:")
    rules = {"fixed": "fixed by the settings", "cv_min": "lowest CV error", "cv_1se": "largest α within one SE of the lowest"}
    for name, pf in results.penalized.items():
        cv_txt = ""
        if pf.cv is not None:
            i = int(np.argmin(np.abs(np.log(pf.cv.alphas) - np.log(pf.alpha))))
            cv_txt = f", held-out RMSE {_fmt(math.sqrt(max(pf.cv.mean[i], 0.0)))} (at the nearest grid α)"
            if getattr(pf.cv, "at_edge", False):
                cv_txt += ("; CAUTION: the lowest CV error is at the smallest α tried, so a smaller α may "
                           "predict better")
        relax = "" if pf.relaxation is None else f", relaxation {_fmt(pf.relaxation)}"
        lines.append(f"  {model_label(name)}: α {_fmt(pf.alpha)} ({rules.get(pf.alpha_rule, pf.alpha_rule)}), "
                     f"L1 ratio {_fmt(pf.l1_ratio)}{relax}{cv_txt}")
        if pf.convergence is not None and not pf.convergence.converged:
            lines.append("    " + pf.convergence.sentence())
    if results.settings.penalty_factors:
        lines.append("  Penalty factors: " + ", ".join(f"{c} {_fmt(v)}" for c, v in results.settings.penalty_factors)
                     + " (0: unpenalized, always kept); every other column 1.")
    rg = _ranges(design, results)
    lines.append("")
    lines.append(f"How far equally good models differ (tolerance {number_text(100 * rg.tolerance, 2)} %: "
                 f"{rg.tolerance_note})")
    for s in rg.sentences:
        lines.append(f"  • {s}")
    for t in rg.trades:
        lines.append(f"  • {t['sentence']}")
    lines.append("")
    lines.append("Penalty objective: " + OBJECTIVE + ".")
    lines.append("These are associations, not causes; judge models on held-out groups; "
                 "a model is only as good as its inputs.")
    return "\n".join(lines)

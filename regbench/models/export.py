"""The fit as plain JSON data (its text summary for people is in :mod:`regbench.sentences`).

``fit_to_json`` returns only dicts, lists, str, bool, int, float and None;
NaN and infinities become None so the result is strict JSON.  Coefficients are
in the table's original units (``coefficients``) and on predictors
standardized by weighted mean and weighted population SD
(``coefficients_standardized``).
"""

from __future__ import annotations

import math

import numpy as np


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


#: The yes/no objective; scikit-learn's LogisticRegression on the same standardized columns takes C = 1/(α·W).
OBJECTIVE_BINARY = ("minimise (1/W)·Σ wᵢ ℓ(yᵢ, pᵢ) + α·(ρ‖β‖₁ + (1−ρ)/2·‖β‖²), pᵢ = 1/(1 + exp(−b₀ − x̃ᵢβ)), "
                    "ℓ the log-loss, intercept unpenalized, x̃ = predictors standardized by weighted mean and "
                    "weighted population SD, W = Σwᵢ (scikit-learn's C = 1/(α·W))")


def _set_aside_json(set_aside) -> list:
    return [{
        "column": sa.column,
        "combination": {k: _num(v) for k, v in sa.combination.items()},
        "intercept": _num(sa.intercept),
        "residual": _num(sa.residual),
        "alternatives": list(sa.alternatives),
        "sentence": sa.sentence(),
    } for sa in set_aside]


def _logistic_json(results, design) -> dict:
    lr = results.logistic
    cols = lr.columns
    m = lr.model
    sep = lr.separation
    return {
        "intercept": _num(lr.intercept),
        "coefficients": _by_column(cols, lr.coef),
        "coefficients_standardized": _by_column(cols, m.coef_std if m is not None else lr.coef),
        "std_errors": _by_column(cols, lr.std_errors),
        "p_values": _by_column(cols, lr.p_values),
        "log_likelihood": _num(lr.log_likelihood),
        "null_log_likelihood": _num(lr.null_log_likelihood),
        "pseudo_r_squared": _num(lr.pseudo_r_squared),
        "converged": bool(lr.converged),
        "observed_share": _num(float(design.weights @ design.y) / float(design.weights.sum())),
        "mean_probability": None if m is None else _num(
            float(design.weights @ m.predict(design.X)) / float(design.weights.sum())),
        "separation": None if sep is None else {
            "kind": sep.kind, "combination": {k: _num(v) for k, v in sep.combination.items()},
            "intercept": _num(sep.intercept), "rows_exact": int(sep.rows_exact), "sentence": sep.sentence},
        "set_aside": _set_aside_json(lr.set_aside),
    }


def _ols_json(results) -> dict:
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
            "sentence": sa.sentence(),
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
    # A penalized fit weighs every level of a category alike: its columns are the design's and,
    # after them, each category's reference level (named COLUMN=LEVEL like the others).
    columns = tuple(m.columns)
    out = {
        "intercept": _num(m.intercept),
        "coefficients": _by_column(columns, m.coef),
        "coefficients_standardized": _by_column(columns, m.coef_std),
        "reference_levels": [name for name, _ in getattr(m, "reference_levels", ())],
        "alpha": _num(pf.alpha),
        "l1_ratio": _num(pf.l1_ratio),
        "alpha_rule": pf.alpha_rule,
        "path": {
            "alphas": [_num(a) for a in pf.path.alphas],
            "coefficients": {c: [_num(v) for v in pf.path.coef[:, j]] for j, c in enumerate(pf.path.columns)},
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


def fit_to_json(design, results, classification=None) -> dict:
    """Everything ``fit_all`` produced, as strict-JSON data.

    Parameters
    ----------
    design : Design
    results : FitResults
    classification : Classification, optional
        For a yes/no outcome: each model's ``calibration`` and ``discrimination``
        (training and held-out rows) are added to its entry.

    Returns
    -------
    dict
        Keys ``rows_used``, ``rows_excluded``, ``unusable``, ``models``
        (``ols``, ``ridge``, ``lasso``, ``elastic_net`` and any further
        elastic nets), ``diagnostics`` and ``settings``.
    """
    columns = tuple(results.columns)
    binary = getattr(results, "outcome", "numeric") == "binary"
    models = {"logistic": _logistic_json(results, design)} if binary else {"ols": _ols_json(results)}
    for name, pf in results.penalized.items():
        models[name] = _penalized_json(pf, columns)
        if binary:
            if models[name]["cv"]:
                models[name]["cv"]["measure"] = "log_loss"
            models[name]["mean_probability"] = _num(
                float(design.weights @ pf.model.predict(design.X)) / float(design.weights.sum()))
    if binary and classification is not None:
        for name, entry in models.items():
            for kind, by_split in (("calibration", classification.calibration),
                                   ("discrimination", classification.discrimination)):
                entry[kind] = {split: by_split[split][name].to_dict() if name in by_split[split] else None
                               for split in classification.splits}
    d = results.diagnostics
    out = {"outcome": "binary" if binary else "numeric"}
    if binary:
        out["positive_level"] = str(design.levels[1])
        out["negative_level"] = str(design.levels[0])
        if design.no_count_column:
            out["counts"] = {"yes": design.target, "no": design.no_count_column}
    return out | {
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
        # A yes/no outcome's ranges come from the quadratic approximation (labelled in them); null when separated.
        "ranges": _ranges_json(design, results),
    }


def _ranges_json(design, results):
    from regbench.analysis.ranges import compute_ranges, ranges_unavailable

    if ranges_unavailable(results) is not None:
        return None
    return compute_ranges(design, results, results.settings.range_tolerance).to_dict()


# The summary for people lives with the other texts (regbench/sentences.py); kept importable here.
from regbench.sentences import fit_summary_text  # noqa: E402,F401

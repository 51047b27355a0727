"""Deep checks of cached results read from a project file.

The generic decoder checks each field against its declared type, but a
``tuple`` or ``dict`` field does not say what it holds.  These checks walk the
result objects the session and the report use — element types, array shapes
against the design, names against the models — and exercise each analysis
result's ``to_dict`` so every field is touched once.  Anything wrong becomes
:class:`ProjectError`; nothing here changes the objects.
"""

from __future__ import annotations

import json

import numpy as np

from regbench.analysis.agreement import Agreement, PairAgreement
from regbench.analysis.calibration import Calibration, Classification, Discrimination
from regbench.analysis.stability import Stability
from regbench.analysis.stress import ModelShift, StressResult, StressSweep
from regbench.analysis.structure import Structure
from regbench.errors import ProjectError
from regbench.models.coding import LevelCoding
from regbench.models.results import (CVResult, Diagnostics, FitResults, FitSettings, LinearModel, NearDependency,
                                     LogisticResult, OLSResult, PathResult, PenalizedFit, Separation, SetAside,
                                     model_columns)

# Errors the checks themselves can hit on damaged objects.
_DAMAGE = (TypeError, ValueError, AttributeError, KeyError, IndexError, OverflowError)


class _Bad(Exception):
    pass


def _need(cond, what):
    if not cond:
        raise _Bad(what)


def _array(a, shape, what, kind="f"):
    _need(isinstance(a, np.ndarray) and a.shape == shape and a.dtype.kind in (kind + ("i" if kind == "f" else "")),
          f"{what} must be an array of shape {shape}")


def _whole(v, lo, hi) -> bool:
    return isinstance(v, (int, np.integer)) and not isinstance(v, bool) and lo <= v <= hi


def _finite(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) and bool(np.isfinite(v))


def _names(t, what):
    _need(isinstance(t, tuple) and all(isinstance(x, str) for x in t), f"{what} must be a tuple of names")


def check_fit(results, design) -> None:
    """Check a cached fit against its design, part by part, in the order the fit is built."""
    _check_fit_header(results, design)
    _check_ols(results, design)
    _need(results.outcome == getattr(design, "outcome", "numeric"),
          "fit.outcome does not match the kind of target of the roles")
    if results.outcome == "binary":
        _check_logistic(results.logistic, design)
    _check_diagnostics(results.diagnostics)
    _need(isinstance(results.penalized, dict), "fit.penalized must be a dict")
    for name, pf in results.penalized.items():
        _check_penalized(name, pf, design)


def _check_fit_header(results, design) -> None:
    """The fit's columns, settings, row count and fold numbers agree with the design."""
    n = design.n
    _need(isinstance(results, FitResults), "fit is not a fit result")
    _names(results.columns, "fit.columns")
    _need(results.columns == tuple(design.columns), "fit.columns does not match the design columns")
    _need(isinstance(results.settings, FitSettings), "fit.settings is not settings")
    _need(results.n_obs == n, f"fit.n_obs is not the {n} rows used")
    _array(results.fold_ids, (n,), "fit.fold_ids", "i")
    _need(n == 0 or 0 <= int(results.fold_ids.min()) <= int(results.fold_ids.max()) < int(results.settings.folds),
          "fit.fold_ids must hold fold numbers from 0 to folds - 1")


def _check_model(m, where, design) -> None:
    """One fitted model: its columns match the design and its coefficients have one entry per column."""
    _need(isinstance(m, LinearModel), f"{where} is not a model")
    _need(isinstance(m.name, str) and _model_columns_ok(m, design), f"{where}.columns differ from the design")
    _array(m.coef, (len(m.columns),), f"{where}.coef")
    _array(m.coef_std, (len(m.columns),), f"{where}.coef_std")
    _need(isinstance(m.intercept, float), f"{where}.intercept is not a number")


def _check_ols(results, design) -> None:
    """The OLS result: its model, per-column arrays, and each set-aside column's explanation."""
    ols = results.ols
    _need(isinstance(ols, OLSResult), "fit.ols is not an OLS result")
    _check_model(ols.model, "fit.ols.model", design)
    _names(ols.columns, "fit.ols.columns")
    _need(ols.columns == results.columns, "fit.ols.columns does not match the design columns")
    _names(ols.kept, "fit.ols.kept")
    _need(set(ols.kept) <= set(results.columns), "fit.ols.kept names unknown columns")
    for arr in ("coef", "std_errors", "t_values", "p_values", "ci_low", "ci_high"):
        _array(getattr(ols, arr), (design.p,), f"fit.ols.{arr}")
    _need(isinstance(ols.set_aside, tuple), "fit.ols.set_aside must be a tuple")
    for i, sa in enumerate(ols.set_aside):
        _need(isinstance(sa, SetAside) and sa.column in results.columns, f"fit.ols.set_aside[{i}] is damaged")
        _need(isinstance(sa.combination, dict) and all(isinstance(k, str) and isinstance(v, (int, float))
                                                       for k, v in sa.combination.items()),
              f"fit.ols.set_aside[{i}].combination is damaged")
        _names(sa.alternatives, f"fit.ols.set_aside[{i}].alternatives")
        # Building the dict and the sentence touches every field the report reads.
        json.dumps(sa.to_dict())
        sa.sentence()


def _check_logistic(lr, design) -> None:
    """A yes/no fit's logistic result: per-column arrays, and either a model or the reason there is none."""
    _need(isinstance(lr, LogisticResult), "fit.logistic is not a logistic result")
    for arr in ("coef", "std_errors", "z_values", "p_values", "ci_low", "ci_high"):
        _array(getattr(lr, arr), (design.p,), f"fit.logistic.{arr}")
    # A separated outcome has no finite model, only the sentence saying why.
    _need((lr.model is None) == (lr.separation is not None), "fit.logistic.model and separation disagree")
    if lr.model is not None:
        _check_model(lr.model, "fit.logistic.model", design)
    else:
        _need(isinstance(lr.separation, Separation) and isinstance(lr.separation.sentence, str),
              "fit.logistic.separation is damaged")


def _check_diagnostics(dg) -> None:
    """The overlap diagnostics: names, array shapes that agree with each other, and their sentences."""
    _need(isinstance(dg, Diagnostics), "fit.diagnostics is not diagnostics")
    _names(dg.columns, "fit.diagnostics.columns")
    _names(dg.terms, "fit.diagnostics.terms")
    _array(dg.vif, (len(dg.columns),), "fit.diagnostics.vif")
    _need(isinstance(dg.condition_indices, np.ndarray) and dg.condition_indices.ndim == 1,
          "fit.diagnostics.condition_indices must be a list of numbers")
    d = dg.condition_indices.shape[0]
    _array(dg.variance_proportions, (d, len(dg.terms)), "fit.diagnostics.variance_proportions")
    _need(isinstance(dg.near_dependencies, tuple) and all(
        isinstance(nd, NearDependency) and isinstance(nd.column, str) and isinstance(nd.sentence, str)
        and isinstance(nd.explained_by, tuple) and isinstance(nd.vif, float) and isinstance(nd.r_squared, float)
        for nd in dg.near_dependencies), "fit.diagnostics.near_dependencies is damaged")
    _need(isinstance(dg.damaging, tuple) and all(isinstance(x, dict) for x in dg.damaging),
          "fit.diagnostics.damaging is damaged")
    _need(isinstance(dg.sentences, tuple) and all(isinstance(s, str) for s in dg.sentences),
          "fit.diagnostics.sentences must be text")


def _check_penalized(name, pf, design) -> None:
    """One penalized fit: its model, its α, its path of coefficients and its cross-validation curve."""
    where = f"fit.penalized[{name!r}]"
    _need(isinstance(name, str) and isinstance(pf, PenalizedFit) and pf.name == name, f"{where} is damaged")
    _check_model(pf.model, f"{where}.model", design)
    _need(isinstance(pf.alpha, float) and pf.alpha > 0 and isinstance(pf.alpha_rule, str), f"{where}.alpha")
    path = pf.path
    # The path must name the model's columns (reference levels included) so the report can plot it.
    _need(isinstance(path, PathResult) and path.columns == pf.model.columns
          and path.reference_levels == pf.model.reference_levels, f"{where}.path is damaged")
    _need(isinstance(path.alphas, np.ndarray) and path.alphas.ndim == 1 and path.alphas.size >= 1
          and bool(np.all(path.alphas > 0)), f"{where}.path.alphas must be positive numbers")
    kk = path.alphas.shape[0]
    _array(path.coef, (kk, len(path.columns)), f"{where}.path.coef")
    _array(path.coef_std, (kk, len(path.columns)), f"{where}.path.coef_std")
    _array(path.intercepts, (kk,), f"{where}.path.intercepts")
    if pf.cv is not None:
        cv = pf.cv
        _need(isinstance(cv, CVResult) and isinstance(cv.alphas, np.ndarray) and cv.alphas.ndim == 1,
              f"{where}.cv is damaged")
        for arr in ("mean", "se"):
            _array(getattr(cv, arr), cv.alphas.shape, f"{where}.cv.{arr}")


def check_derived(derived: dict, design, n_stress: int) -> None:
    n, p = design.n, design.p
    _need(isinstance(derived, dict), "derived must be a dict")
    models = derived.get("models")
    _need(isinstance(models, dict) and models, "derived.models must name the models")
    for name, m in models.items():
        _need(isinstance(name, str) and isinstance(m, LinearModel) and _model_columns_ok(m, design),
              f"derived.models[{name!r}] is not a model of this design")
        _array(m.coef, (len(m.columns),), f"derived.models[{name!r}].coef")
        _array(m.coef_std, (len(m.columns),), f"derived.models[{name!r}].coef_std")
        _need(isinstance(m.intercept, float), f"derived.models[{name!r}].intercept")
    names = tuple(models)
    held = derived.get("heldout")
    _need(isinstance(held, dict) and tuple(held) == names, "derived.heldout must hold every model")
    for name, pred in held.items():
        _array(pred, (n,), f"derived.heldout[{name!r}]")
    ag = derived.get("agreement")
    _need(isinstance(ag, Agreement) and ag.models == names, "derived.agreement does not match the models")
    _need(isinstance(ag.pairs, tuple) and all(isinstance(x, PairAgreement) and x.a in names and x.b in names
                                              for x in ag.pairs), "derived.agreement.pairs is damaged")
    _need(isinstance(ag.own_error, dict) and set(ag.own_error) == set(names)
          and all(isinstance(v, dict) for v in ag.own_error.values()), "derived.agreement.own_error is damaged")
    binary = getattr(design, "outcome", "numeric") == "binary"
    _need(ag.scale == ("probability" if binary else "value"), "derived.agreement.scale does not match the target")
    _need(all(isinstance(x, PairAgreement) and x.a in names and x.b in names for x in ag.log_odds_pairs)
          and set(ag.log_loss) == (set(names) if binary else set()), "derived.agreement.log_odds_pairs is damaged")
    json.dumps(ag.to_dict())
    st = derived.get("structure")
    _need(isinstance(st, Structure) and st.models == names
          and st.columns == model_columns(design.columns, models.values()),
          "derived.structure does not match the models")
    for arr in ("coef", "coef_std"):
        _array(getattr(st, arr), (len(names), len(st.columns)), f"derived.structure.{arr}")
    _array(st.used, (len(names), len(st.columns)), "derived.structure.used", "b")
    json.dumps(st.to_dict())
    stress, sweeps = derived.get("stress"), derived.get("sweeps")
    _need(isinstance(stress, tuple) and len(stress) == n_stress, "derived.stress does not match the stress tests")
    for i, r in enumerate(stress):
        _need(isinstance(r, StressResult) and isinstance(r.shifts, dict) and tuple(r.models) == names
              and all(isinstance(r.shifts.get(k), ModelShift) for k in names), f"derived.stress[{i}] is damaged")
        json.dumps(r.to_dict())
    _need(isinstance(sweeps, tuple), "derived.sweeps must be a tuple")
    cl = derived.get("classification")
    if cl is not None or getattr(design, "outcome", "numeric") == "binary":
        _need(isinstance(cl, Classification) and cl.models == names, "derived.classification does not match the models")
        for split in ("training", "held_out"):
            _need(isinstance(cl.calibration.get(split), dict) and isinstance(cl.discrimination.get(split), dict),
                  f"derived.classification.{split} is damaged")
            for k, c in cl.calibration[split].items():
                _need(k in names and isinstance(c, Calibration) and isinstance(cl.discrimination[split].get(k),
                                                                             Discrimination),
                      f"derived.classification.{split}[{k!r}] is damaged")
        json.dumps(cl.to_dict())
    for i, sw in enumerate(sweeps):
        _need(isinstance(sw, StressSweep) and tuple(sw.models) == names and isinstance(sw.strengths, np.ndarray)
              and sw.strengths.ndim == 1, f"derived.sweeps[{i}] is damaged")
        for field in ("shift_rmse", "error_damaged", "moved_share"):
            d = getattr(sw, field)
            _need(isinstance(d, dict) and set(d) == set(names), f"derived.sweeps[{i}].{field} is damaged")
            for k in names:
                _array(d[k], sw.strengths.shape, f"derived.sweeps[{i}].{field}[{k!r}]")
        json.dumps(sw.to_dict())
    if derived.get("ranges") is not None:  # older projects do not hold it; it is computed on demand
        _check_ranges(derived["ranges"], design, names)


def _check_ranges(rg, design, names) -> None:
    from regbench.analysis.ranges import ModelPlace, Ranges

    n, p = design.n, design.p
    _need(isinstance(rg, Ranges) and rg.columns == tuple(design.columns), "derived.ranges does not match the design")
    for arr in ("centre", "sd", "low", "high", "low_std", "high_std", "importance_low", "importance_high"):
        _array(getattr(rg, arr), (p,), f"derived.ranges.{arr}")
    for arr in ("bounded", "sign_settled"):
        _array(getattr(rg, arr), (p,), f"derived.ranges.{arr}", "b")
    _need(isinstance(rg.tolerance, float) and rg.tolerance > 0, "derived.ranges.tolerance must be a positive number")
    _need(isinstance(rg.models, dict) and set(rg.models) == set(names)
          and all(isinstance(m, ModelPlace) for m in rg.models.values()), "derived.ranges.models does not match the models")
    for name, m in rg.models.items():
        _array(m.position, (p,), f"derived.ranges.models[{name!r}].position")
    if rg.row_half is not None:
        for arr in ("row_numbers", "row_centre", "row_half"):
            _array(getattr(rg, arr), (n,), f"derived.ranges.{arr}", "i" if arr == "row_numbers" else "f")
    _need(isinstance(rg.trades, tuple) and all(isinstance(t, dict) and isinstance(t.get("sentence"), str)
                                               for t in rg.trades), "derived.ranges.trades is damaged")
    _need(isinstance(rg.widest, tuple) and all(isinstance(t, dict) for t in rg.widest), "derived.ranges.widest is damaged")
    _need(isinstance(rg.sentences, tuple) and all(isinstance(s, str) for s in rg.sentences),
          "derived.ranges.sentences must be text")
    json.dumps(rg.to_dict())


def check_stability(st, design) -> None:
    # The design's columns, then (penalized fits on every level) the categories' reference levels.
    _need(isinstance(st, Stability) and st.columns in (tuple(design.columns), LevelCoding.of(design).names),
          "stability does not match the design")
    p = len(st.columns)
    _names(st.models, "stability.models")
    _array(st.set_aside_freq, (p,), "stability.set_aside_freq")
    for field in ("selected_freq", "coef_mean", "coef_sd", "coef_q05", "coef_q95"):
        d = getattr(st, field)
        _need(isinstance(d, dict), f"stability.{field} must be a dict")
        for k, v in d.items():
            _need(isinstance(k, str), f"stability.{field} keys must be model names")
            _array(v, (p,), f"stability.{field}[{k!r}]")
    _need(isinstance(st.coef_draws, dict) and all(isinstance(v, np.ndarray) and v.ndim == 2 and v.shape[1] == p
                                                   for v in st.coef_draws.values()), "stability.coef_draws is damaged")
    _need(_whole(st.n_boot, 0, 100_000), "stability.n_boot must be a whole number from 0 to 100000")
    _need(_whole(st.seed, 0, 2**63 - 1), "stability.seed must be a whole number from 0 to 2^63 - 1")
    _need(isinstance(st.grouped, bool), "stability.grouped must be true or false")
    # Every per-model table names the same models, so a view never meets a model it cannot find.
    models = set(st.models)
    for field in ("selected_freq", "coef_mean", "coef_sd", "coef_q05", "coef_q95", "coef_draws"):
        _need(set(getattr(st, field)) == models, f"stability.{field} must hold exactly the models {sorted(models)}")
    _need(all(v.shape[0] == st.n_boot for v in st.coef_draws.values()),
          "stability.coef_draws must hold one row per refit (n_boot)")
    _need(isinstance(st.alphas, dict) and all(isinstance(k, str) and k in models and _finite(v) and v > 0
                                              for k, v in st.alphas.items()), "stability.alphas is damaged")
    _need(isinstance(st.sentences, tuple) and all(isinstance(s, str) for s in st.sentences),
          "stability.sentences must be text")
    json.dumps(st.to_dict())


def _model_columns_ok(m, design) -> bool:
    """A model names the design's columns, or (fitted on every level) those and its reference levels."""
    if m.columns == tuple(design.columns) and not m.reference_levels:
        return True
    coding = LevelCoding.of(design)
    return m.columns == coding.names and m.reference_levels == coding.reference_levels


def guarded(label: str, check, *args) -> None:
    """Run one check; any failure becomes a ProjectError naming the field."""
    try:
        check(*args)
    except _Bad as exc:
        what = str(exc)
    except _DAMAGE as exc:
        what = f"cannot be read ({type(exc).__name__}: {str(exc)[:120]})"
    else:
        return
    raise ProjectError(f"{label}: results.json: field {what}; the cached results are damaged — re-create the "
                       "project with 'regbench new' or open it and save it again after a fresh fit")

"""Fit everything on one design: OLS, diagnostics, and every penalized family with CV.

One pass over the rows gathers the cross-products of each CV fold (their sum
is the whole design); after that every path, every fold's fit and every
held-out error is p×p work.  See :mod:`regbench.models.penalized` for the
objective::

    minimise  1/(2W) · Σ wᵢ (yᵢ − b₀ − x̃ᵢβ)²  +  α · (ρ‖β‖₁ + (1−ρ)/2 · ‖β‖²)

on predictors standardized by the weighted mean and weighted population SD of
the rows being fitted (each training fold is standardized on its own rows).
A column whose SD is 0 on those rows keeps a coefficient of exactly 0.
"""

from __future__ import annotations

from typing import Optional

import numpy as np

from regbench.formatting import plain_number
from regbench.errors import ModelError
from regbench.models import cv as cvmod
from regbench.models.coding import LevelCoding
from regbench.models.gram import GramStats, gram_stats, per_fold
from regbench.models.ols import one_blas_thread
from regbench.models import spec
from regbench.models.penalized import (GAP_TOL, Problem, alpha_grid, duality_gaps, factor_evals, factor_scores,
                                      fit_path, model_from_problem, solve_beta)
from regbench.models.relaxed import RELAXATION_GRID, base_of, blend, choose, refit_selected
from regbench.models.results import (Convergence, FitResults, FitSettings, LinearModel, PathResult, PenalizedFit,
                                     RelaxationCV)
from regbench.progress import check, report


def families(settings: FitSettings):
    """(name, L1 ratio) of each penalized family, in display order."""
    out = [("ridge", 0.0), ("lasso", 1.0)]
    for i, r in enumerate(settings.l1_ratios):
        out.append(("elastic_net" if i == 0 else f"elastic_net_{float(r):g}", float(r)))
    if settings.fits_relaxed:
        out += [("relaxed_lasso", 1.0), ("relaxed_elastic_net", float(settings.l1_ratios[0]))]
    return out


def _validate(settings: FitSettings) -> None:
    settings.check(ModelError, spec.label_plain)


def design_factors(design, settings: FitSettings):
    """Penalty factor of each design column (None when every factor is 1).

    A factor set for a table column applies to every design column built from it
    (each indicator of a categorical column).  A factor naming a column that is
    not a predictor of this design is refused; one naming a predictor set aside
    before fitting (constant, empty) has nothing to act on and is ignored.
    """
    given = dict(settings.penalty_factors)
    if not given:
        return None
    sources = tuple(getattr(design, "sources", None) or design.columns)
    known = set(sources) | {u.column for u in getattr(design, "unusable", ())}
    for col in given:
        if col not in known:
            raise ModelError(f"penalty factor for '{col}': not a predictor of this fit; "
                             f"predictors are: {', '.join(dict.fromkeys(sources))}")
    return np.array([float(given.get(s, 1.0)) for s in sources])


def problem_for(stats: GramStats, design, settings: FitSettings) -> Problem:
    """The standardized penalized problem of ``stats`` on ``design``'s columns.

    Every level of a category gets its own indicator (the reference levels are appended,
    see :mod:`regbench.models.coding`), and the settings' penalty factors apply.
    """
    coding = LevelCoding.of(design)
    return Problem.from_stats(coding.augment(stats), coding.factors(design_factors(design, settings)))


_problem = problem_for


def _ols(design, settings, stats=None):
    from regbench.models.ols import fit_ols

    return fit_ols(design, settings.pins, settings.rank_tol, stats=stats)


def fit_all(design, settings: FitSettings = FitSettings(), progress=None, cancel=None) -> FitResults:
    """OLS, diagnostics, and ridge, lasso and elastic net with their paths and CV.

    Parameters
    ----------
    design : Design
    settings : FitSettings
    progress : callable(done, total, message), optional
    cancel : callable() -> bool, optional
        Checked between steps; a true answer raises :class:`regbench.errors.Cancelled`.

    Returns
    -------
    FitResults
        ``gram`` holds the whole design's :class:`GramStats`; ``fold_ids`` the
        fold of each row (grouped when the design has groups).
    """
    _validate(settings)
    if getattr(design, "outcome", "numeric") == "binary":
        from regbench.models.logistic import fit_all_binary

        return fit_all_binary(design, settings, progress, cancel)
    # Every step is a pass over the rows in blocks or p×p work: many short BLAS calls, which on
    # shared cores run faster on one thread than waiting on each other (eigen-decompositions of
    # six 100×100 Grams: about 1 s of CPU with two threads under load, 0.03 s with one).
    with one_blas_thread():
        return _fit_numeric(design, settings, progress, cancel)


def _fit_numeric(design, settings: FitSettings, progress, cancel) -> FitResults:
    """:func:`fit_all` for a numeric target."""
    from regbench.models.diagnostics import diagnose

    fams = families(settings)
    K = int(settings.folds)
    total = 3 + len(fams)
    step = 0
    report(progress, step, total, "gathering cross-products of every fold")
    ids = cvmod.fold_ids(design.n, K, settings.seed, design.groups, design.weights, design.groups_column)
    full, folds = per_fold(design.X, design.y, design.weights, ids, K)
    check(cancel)
    step += 1
    report(progress, step, total, "fitting OLS")
    ols = _ols(design, settings, full)
    check(cancel)
    step += 1
    report(progress, step, total, "measuring collinearity")
    diag = diagnose(design, ols)
    check(cancel)
    step += 1
    problem = _problem(full, design, settings)
    train = [_problem(_training(full, f, k), design, settings) for k, f in enumerate(folds)]
    grouped = design.groups is not None
    penalized = {}
    fold_betas = {}  # each family's fold fits along its grid, for the relaxed families
    for name, rho in fams:
        report(progress, step, total, f"{name.replace('_', ' ')}: path and cross-validation")
        base = base_of(name)
        if base is None:
            penalized[name] = _family(design, settings, problem, train, folds, name, rho, grouped, cancel,
                                      keep=fold_betas)
        else:
            penalized[name] = _relaxed_family(design, settings, problem, train, folds, name, penalized[base],
                                              fold_betas[base], grouped, cancel)
        check(cancel)
        step += 1
    report(progress, step, total, "done")
    return FitResults(columns=tuple(design.columns), settings=settings, ols=ols, diagnostics=diag,
                      penalized=penalized, fold_ids=ids, n_obs=int(design.n), gram=full, fold_stats=tuple(folds))


#: Below this share of the largest eigenvalue of the standardized Gram, a direction is round-off;
#: when the table has such directions (exactly dependent columns, or fewer rows than columns),
#: α must be at least this share of the largest eigenvalue, or the fit magnifies round-off.
ALPHA_FLOOR = 1e-10


def smallest_alpha(problem) -> float:
    """The smallest α this table can resolve: 0 when its standardized Gram is well away from
    singular, else ``ALPHA_FLOOR`` times its largest eigenvalue."""
    lam = np.asarray(problem.evals, dtype=float)
    if lam.size == 0:
        return 0.0
    top = float(lam.max())
    singular = lam.size < int(np.count_nonzero(problem.live)) or float(lam.min()) <= ALPHA_FLOOR * top
    return ALPHA_FLOOR * top if singular else 0.0


def check_alpha(problem, alpha: float, name: str) -> None:
    """Refuse an α below what the table can resolve (:func:`smallest_alpha`), naming the floor."""
    Gl = problem.live_gram()
    if Gl.size and alpha >= ALPHA_FLOOR * float(np.max(np.sum(np.abs(Gl), axis=0))):
        return  # at or above the largest floor there can be (‖G‖₁ ≥ λmax): no eigenvalues needed
    floor = smallest_alpha(problem)
    if alpha < floor:
        raise ModelError(
            f"α = {plain_number(alpha)} for {name.replace('_', ' ')} is below what this table can resolve: some "
            f"columns are exactly dependent (or there are fewer rows than columns), and below α = "
            f"{plain_number(floor)} the fit would only magnify round-off; use an α of at least {plain_number(floor)}"
        )


def _training(full: GramStats, fold: GramStats, k: int) -> GramStats:
    t = full - fold
    if not t.W > 0:
        raise ModelError(f"fold {k + 1}: the rows outside it have total weight 0; use fewer folds")
    return t


def _family(design, settings, problem, train, folds, name, rho, grouped, cancel, keep=None) -> PenalizedFit:
    # With penalty factors the grid's top comes from the penalized columns after
    # partialling out the unpenalized ones (|c_j|/v_j), the ridge bottom from the
    # problem the factors turn ridge into.
    grid = alpha_grid(factor_scores(problem), rho, int(settings.n_penalties), float(settings.penalty_ratio),
                      evals=factor_evals(problem))
    coding = LevelCoding.of(design)
    path = coding.path(fit_path(None, name, rho, grid, coding.names, problem=problem))
    path_gaps = duality_gaps(problem, path.coef_std, grid, rho)
    fold_gaps = np.empty(len(folds))
    errors = np.empty((len(folds), grid.size))
    for k, (tp, f) in enumerate(zip(train, folds)):
        check(cancel)
        beta_k = solve_beta(tp, grid, rho)
        if keep is not None:
            keep.setdefault(name, []).append(beta_k)
        fold_gaps[k] = float(np.max(duality_gaps(tp, beta_k, grid, rho), initial=0.0))
        coef, b0 = coding.to_design(*tp.to_original(beta_k))
        errors[k] = cvmod.heldout_mse(f, coef, b0)
    cvres = cvmod.summarize(grid, errors, grouped)
    if settings.alpha is not None:
        alpha, rule = float(settings.alpha), "fixed"
        check_alpha(problem, alpha, name)
    else:
        rule = settings.alpha_rule
        alpha = cvres.alpha_min if rule == "cv_min" else cvres.alpha_1se
    model = coding.label(_model_on_path(problem, path, name, rho, alpha, coding.names, path_gaps))
    conv = certificate(path_gaps, model.gap, fold_gaps)
    return PenalizedFit(name=name, l1_ratio=rho, path=path, cv=cvres, alpha=alpha, alpha_rule=rule, model=model,
                        convergence=conv)


def _relaxed_family(design, settings, problem, train, folds, name, base: PenalizedFit, base_folds, grouped,
                    cancel) -> PenalizedFit:
    """A relaxed family from its base family's path and fold fits (same grid, same folds).

    Each fold's penalized fit at each α is refitted without penalty on the
    columns it selected; every relaxation γ of the grid (or the fixed one) is
    scored on the held-out fold, and (α, γ) is chosen by the α rule (see
    :func:`regbench.models.relaxed.choose`).
    """
    grid = base.path.alphas
    rho = float(base.l1_ratio)
    gammas = (float(settings.relaxation),) if settings.relaxation is not None else RELAXATION_GRID
    errors = np.empty((len(folds), len(gammas), grid.size))
    coding = LevelCoding.of(design)
    for k, (tp, f) in enumerate(zip(train, folds)):
        check(cancel)
        bp = base_folds[k]
        br = refit_selected(tp, bp)
        for g, gamma in enumerate(gammas):
            coef, b0 = coding.to_design(*tp.to_original(blend(bp, br, gamma)))
            errors[k, g] = cvmod.heldout_mse(f, coef, b0)
    cvs = [cvmod.summarize(grid, errors[:, g], grouped) for g in range(len(gammas))]
    mean = np.stack([c.mean for c in cvs])
    se = np.stack([c.se for c in cvs])
    if settings.alpha is not None:
        alpha, rule = float(settings.alpha), "fixed"
        i = int(np.argmin(np.abs(np.log(grid) - np.log(alpha))))
        g = int(np.nanargmin(mean[:, i]))
    else:
        rule = settings.alpha_rule
        i, g = choose(grid, gammas, mean, se, rule)
        alpha = float(grid[i])
    gamma = float(gammas[g])
    beta_path = blend(base.path.coef_std, refit_selected(problem, base.path.coef_std), gamma)
    coef, intercepts = problem.to_original(beta_path)
    path = coding.path(PathResult(name=name, l1_ratio=rho, alphas=grid.copy(), coef=coef, coef_std=beta_path,
                                  intercepts=np.asarray(intercepts, dtype=float), columns=coding.names))
    bm = base.model
    if bm.alpha == alpha:
        beta = blend(bm.coef_std, refit_selected(problem, bm.coef_std), gamma)
        c, b0 = problem.to_original(beta)
        model = LinearModel(name=name, columns=coding.names, intercept=float(b0), coef=c, coef_std=beta,
                            alpha=alpha, l1_ratio=rho, gap=bm.gap, converged=bm.converged, relaxation=gamma)
    else:
        model = model_from_problem(problem, name, rho, alpha, coding.names, coef_init=bm.coef_std,
                                   relaxation=gamma)
    model = coding.label(model)
    # The penalized fits behind the path and the folds are the base family's: so is the certificate,
    # with the chosen fit's own gap when it was solved here.
    conv = base.convergence
    if conv is not None and model.gap is not None and model.gap > conv.max_gap:
        conv = Convergence(converged=bool(conv.converged and model.converged), max_gap=float(model.gap),
                           tolerance=conv.tolerance, gaps=conv.gaps.copy(), worst="chosen fit")
    rcv = RelaxationCV(relaxations=np.asarray(gammas, dtype=float), alphas=grid.copy(), mean=mean, se=se)
    return PenalizedFit(name=name, l1_ratio=rho, path=path, cv=cvs[g], alpha=alpha, alpha_rule=rule, model=model,
                        convergence=conv, relaxation=gamma, relaxation_cv=rcv)


def certificate(path_gaps, model_gap, fold_gaps=()) -> Convergence:
    """The family's :class:`Convergence` from the gaps of its path, chosen fit and folds."""
    where = [("path", float(np.max(path_gaps, initial=0.0))), ("chosen fit", float(model_gap or 0.0))]
    where += [(f"fold {k + 1}", float(g)) for k, g in enumerate(fold_gaps)]
    worst, top = max(where, key=lambda t: t[1])
    return Convergence(converged=bool(top <= GAP_TOL), max_gap=top, tolerance=GAP_TOL,
                       gaps=np.asarray(path_gaps, dtype=float).copy(), worst=worst)


def _model_on_path(problem, path, name, rho, alpha, columns, path_gaps) -> LinearModel:
    """The exact fit at ``alpha``: a path point when α is on the grid, else a warm-started solve."""
    hit = np.flatnonzero(path.alphas == alpha)
    if hit.size:
        i = int(hit[0])
        gap = float(path_gaps[i])
        return LinearModel(name=name, columns=tuple(columns), intercept=float(path.intercepts[i]),
                           coef=path.coef[i].copy(), coef_std=path.coef_std[i].copy(), alpha=float(alpha),
                           l1_ratio=float(rho), gap=gap, converged=bool(gap <= GAP_TOL))
    i = int(np.argmin(np.abs(np.log(path.alphas) - np.log(alpha))))
    return model_from_problem(problem, name, rho, alpha, columns, coef_init=path.coef_std[i])


def _l1_ratio_of(results: FitResults, name: str) -> float:
    if name in results.penalized:
        return float(results.penalized[name].l1_ratio)
    for n, r in families(results.settings):
        if n == name:
            return r
    raise ModelError(f"'{name}' is not a fitted model; fitted models are: {', '.join(results.models())}")


def model_at(design, results: FitResults, name: str, alpha: float) -> LinearModel:
    """The exact fit of family ``name`` at ``alpha`` on the whole design (OLS: the OLS model)."""
    if name == "ols":
        return results.ols.model
    if name == "logistic":
        return results.models()["logistic"]
    if not (np.isfinite(alpha) and alpha > 0):
        raise ModelError(f"α = {alpha:g} for {name}: α must be a positive number")
    rho = _l1_ratio_of(results, name)
    if getattr(results, "outcome", "numeric") == "binary":
        from regbench.models.logistic import model_at_alpha

        return model_at_alpha(design, name, rho, float(alpha))
    stats = results.whole_stats()
    if not isinstance(stats, GramStats):
        stats = gram_stats(design.X, design.y, design.weights)
    problem = _problem(stats, design, results.settings)
    check_alpha(problem, float(alpha), name)
    coding = LevelCoding.of(design)
    init = None
    pf = results.penalized.get(base_of(name) or name)
    if pf is not None and rho > 0:
        i = int(np.argmin(np.abs(np.log(pf.path.alphas) - np.log(alpha))))
        init = coding.init(pf.path.coef_std[i])
    return coding.label(model_from_problem(problem, name, rho, float(alpha), coding.names, coef_init=init,
                                           relaxation=_relaxation_of(results, name)))


def _relaxation_of(results: FitResults, name: str):
    """The relaxation γ of a relaxed family (None for any other)."""
    if base_of(name) is None:
        return None
    pf = results.penalized.get(name)
    if pf is not None and pf.relaxation is not None:
        return float(pf.relaxation)
    if results.settings.relaxation is not None:
        return float(results.settings.relaxation)
    raise ModelError(f"{name}: its relaxation is not known; fit again")


def heldout_predictions(design, results: FitResults, models: dict, fold_stats=None) -> dict:
    """Each row predicted by a model of the same family fitted without that row's fold.

    Parameters
    ----------
    design : Design
    results : FitResults
        Supplies ``fold_ids`` (and the columns OLS kept).
    models : dict of name -> LinearModel
        Penalized models are refitted at their own α and L1 ratio; 'ols' is
        refitted on the columns OLS kept.
    fold_stats : sequence of GramStats, optional
        Each fold's cross-products over every row when ``design`` holds only a
        sample of the rows (a table read in batches); the refits then come from
        ``results.gram`` minus each fold, never from the sample's rows.

    Returns
    -------
    dict of name -> ndarray (n,)
    """
    ids = np.asarray(results.fold_ids)
    if ids.shape[0] != design.n:
        raise ModelError(f"the fold of each row is known for {ids.shape[0]} rows but the design has {design.n}; "
                         "fit again on this design")
    K = int(ids.max()) + 1
    if getattr(results, "outcome", "numeric") == "binary":
        return _heldout_binary(design, results, models, ids, K)
    if fold_stats is not None:
        full, folds = results.gram, list(fold_stats)
    elif results.fold_stats is not None and results.gram is not None and len(results.fold_stats) == K:
        # The fit's own pass over these rows and folds: the same statistics, bit for bit.
        full, folds = results.gram, list(results.fold_stats)
    else:
        full, folds = per_fold(design.X, design.y, design.weights, ids, K)
    train_stats = [_training(full, f, k) for k, f in enumerate(folds)]
    problems = [None] * K
    coding = LevelCoding.of(design)
    rows = [np.flatnonzero(ids == k) for k in range(K)]
    out = {name: np.empty(design.n) for name in models}
    # Fold by fold, so each fold's rows are gathered once for every model (a gather per model and
    # fold copied the design four times over at 100,000 × 100).
    for k in range(K):
        Xk = design.X[rows[k]]
        for name, m in models.items():
            if name == "ols":
                fm = _ols_on_stats(design, train_stats[k], None if fold_stats is not None else ids != k,
                                   results.ols.kept)
            else:
                if problems[k] is None:
                    problems[k] = _problem(train_stats[k], design, results.settings)
                rho = float(m.l1_ratio) if m.l1_ratio is not None else _l1_ratio_of(results, name)
                fm = coding.label(model_from_problem(problems[k], name, rho, float(m.alpha), coding.names,
                                                     coef_init=coding.init(m.coef_std), relaxation=m.relaxation))
            out[name][rows[k]] = fm.predict(Xk)
        del Xk
    return out


def _heldout_binary(design, results, models, ids, K) -> dict:
    """Held-out probabilities of each yes/no model, refitted without each fold."""
    from regbench.models.logistic import model_at_alpha, refit_unpenalized

    out = {}
    for name, m in models.items():
        pred = np.empty(design.n)
        for k in range(K):
            train, test = ids != k, ids == k
            if name == "logistic":
                fm = refit_unpenalized(design, results.logistic.kept, train)
            else:
                rho = float(m.l1_ratio) if m.l1_ratio is not None else _l1_ratio_of(results, name)
                fm = model_at_alpha(design, name, rho, float(m.alpha), rows_mask=train)
            pred[test] = fm.predict(design.X[test])
        out[name] = pred
    return out


#: Above this condition number of the kept columns' standardized Gram, OLS
#: held-out refits solve on the rows (least squares) instead of the Gram.
GRAM_COND_LIMIT = 1e7
#: A Gram whose estimated 1-norm condition number is below GRAM_COND_LIMIT / COND_MARGIN is
#: taken as within the limit without its eigenvalues (see :func:`gram_solve`).
COND_MARGIN = 10.0


def gram_solve(G: np.ndarray, c: np.ndarray, need_ill: bool = True, factor=None):
    """``G⁻¹c`` for a symmetric positive semi-definite ``G``, and whether ``G`` is within the rule
    λmin > λmax / :data:`GRAM_COND_LIMIT` (its 2-norm condition number below the limit).

    The rule is decided without an eigen-decomposition where it is clear.  A Cholesky factor
    (p³/3 work) gives LAPACK's estimate of the 1-norm condition number (``dpocon``, p² work).
    For a symmetric matrix the 2-norm is at most the 1-norm, so κ₂ ≤ κ₁ ≤ p·κ₂; the estimate
    is a lower bound of κ₁, in practice within a factor of 3 of it (Higham 1988, ACM TOMS 14(4),
    from memory).  Hence an estimate below limit/:data:`COND_MARGIN` leaves κ₂ below the limit
    unless the estimator is off by more than the margin, on top of the slack κ₁ ≥ κ₂ already
    gives (a factor of 8 on the 1,000-column sensor table); an estimate above p·limit, or a
    failed factor (λmin within round-off of 0), puts κ₂ above it.  Between the two the
    eigenvalues decide, exactly as before, and the solve is the eigen one.

    ``factor``, when given, is an upper Cholesky factor U of ``G`` (UᵀU = G) already at hand.

    Returns
    -------
    (ndarray or None, bool)
        The solution (None when ``G`` is outside the rule and ``need_ill`` is False) and
        whether ``G`` is within the rule.
    """
    from scipy.linalg import lapack

    k = G.shape[0]
    anorm = float(np.max(np.sum(np.abs(G), axis=0), initial=0.0))
    U, info = (factor, 0) if factor is not None else lapack.dpotrf(G, lower=0, clean=0)
    if info == 0 and anorm > 0:
        rcond, info = lapack.dpocon(U, anorm)
        if info == 0 and rcond * GRAM_COND_LIMIT > COND_MARGIN:
            x, info = lapack.dpotrs(U, c, lower=0)
            if info == 0 and np.all(np.isfinite(x)):
                return x, True
        elif info == 0 and rcond * k * GRAM_COND_LIMIT < 1.0 and not need_ill:
            return None, False
    elif not need_ill:
        return None, False
    lam, V = np.linalg.eigh(G)
    return V @ ((V.T @ c) / lam), bool(lam[0] > lam[-1] / GRAM_COND_LIMIT)


def _ols_on_stats(design, stats: GramStats, train_rows, kept) -> LinearModel:
    """OLS on the kept columns of the training rows (weighted)."""
    idx = np.array([design.index(c) for c in kept], dtype=int)
    p = design.p
    coef = np.zeros(p)
    mean = stats.mean_x()
    ybar = stats.mean_y()
    if idx.size:
        G, c, _, sd = stats.standardized()
        live = idx[sd[idx] > 0]
        if live.size:
            # Without the rows (a sample of a table read in batches) the cross-products are all there is.
            sol, well = gram_solve(G[np.ix_(live, live)], c[live], need_ill=train_rows is None)
            if well or train_rows is None:
                coef[live] = sol / sd[live]
            else:
                import scipy.linalg

                sw = np.sqrt(design.weights[train_rows])
                Xk = (design.X[np.ix_(train_rows, live)] - mean[live]) * sw[:, None]
                yk = (design.y[train_rows] - ybar) * sw
                coef[live] = scipy.linalg.lstsq(Xk, yk, lapack_driver="gelsy")[0]
    intercept = ybar - coef @ mean
    return LinearModel(name="ols", columns=tuple(design.columns), intercept=float(intercept), coef=coef,
                       coef_std=coef * stats.sd_x())


def alpha_for(name: str, alphas: dict, settings) -> float:
    """The α family ``name`` is refitted at: its own entry in ``alphas``, else the settings' fixed α."""
    a = alphas.get(name, settings.alpha)
    if a is None:
        raise ModelError(f"no α given for {name}; pass one per model or set a fixed α in the settings")
    if not (np.isfinite(a) and a > 0):
        raise ModelError(f"α = {a:g} for {name}: α must be a positive number")
    return float(a)


def fit_models_at(design, settings: FitSettings, alphas: Optional[dict] = None,
                  relaxations: Optional[dict] = None) -> dict:
    """OLS and each penalized family at a given α; no path and no CV (for refits).

    Parameters
    ----------
    design : Design
    settings : FitSettings
    alphas : dict of name -> float, optional
        α of each penalized family; a family missing here uses ``settings.alpha``.
    relaxations : dict of name -> float, optional
        Relaxation γ of each relaxed family; a family missing here uses
        ``settings.relaxation``.

    Returns
    -------
    dict of name -> LinearModel, OLS first.
    """
    alphas = dict(alphas or {})
    if getattr(design, "outcome", "numeric") == "binary":
        return _models_at_binary(design, settings, alphas)
    out = {"ols": _ols(design, settings).model}
    problem = _problem(gram_stats(design.X, design.y, design.weights), design, settings)
    coding = LevelCoding.of(design)
    for name, rho in families(settings):
        a = alpha_for(name, alphas, settings)
        check_alpha(problem, float(a), name)
        out[name] = coding.label(model_from_problem(problem, name, rho, float(a), coding.names,
                                                    relaxation=relaxation_for(settings, name, relaxations)))
    return out


def relaxation_for(settings: FitSettings, name: str, relaxations: Optional[dict] = None):
    """γ of relaxed family ``name`` from ``relaxations`` or the settings (None for other families)."""
    if base_of(name) is None:
        return None
    g = (relaxations or {}).get(name, settings.relaxation)
    if g is None:
        raise ModelError(f"no relaxation given for {name}; pass one per relaxed model or fix it in the settings")
    return float(g)
def _models_at_binary(design, settings: FitSettings, alphas: dict) -> dict:
    from regbench.models.logistic import fit_logistic, model_at_alpha

    out = {}
    lr = fit_logistic(design, pins=settings.pins, rank_tol=settings.rank_tol)
    if lr.model is not None:
        out["logistic"] = lr.model
    for name, rho in families(settings):
        if name.startswith("relaxed_"):
            continue  # a least-squares option; yes/no outcomes have the plain families
        a = alpha_for(name, alphas, settings)
        out[name] = model_at_alpha(design, name, rho, float(a))
    return out

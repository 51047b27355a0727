"""Collinearity diagnostics on the columns OLS kept.

* VIF per column: ``1 / (1 - R²_j)`` with ``R²_j`` from the weighted regression of
  column j on the other kept columns and an intercept; computed as the diagonal
  of the inverse weighted correlation matrix through a QR of the scaled columns.
* Condition indices and variance-decomposition proportions (Belsley, Kuh &
  Welsch 1980, *Regression Diagnostics*): the design with its intercept column,
  rows scaled by ``sqrt(w)``, every column (intercept included) scaled to unit
  length, not centered.  With singular values ``s`` and right singular vectors
  ``V``, the condition index of dimension k is ``s_max / s_k`` and the share of
  term j's coefficient variance that belongs to dimension k is
  ``(V_jk / s_k)² / sum_k (V_jk / s_k)²``.  A dimension with condition index
  above 30 where two or more terms have a share above 0.5 is damaging (their
  rule).
* Near-dependencies: for each column with VIF above 10 (common practice, no
  single source), the few other kept columns that explain it, found by greedy
  forward selection until their R² is within 0.01 of what all other kept
  columns reach (at most 4 columns).

Everything works on the OLS result's triangular factor of the weighted rows
(:attr:`OLSResult.r_factor`), so the diagnostics make no pass over the rows;
a result without it (saved before it existed) gets it from one blocked pass.
"""

from __future__ import annotations

import numpy as np

from regbench.formatting import join_words, plain_number
from regbench.models.ols import one_blas_thread, weighted_factor
from regbench.models.results import Diagnostics, NearDependency

INTERCEPT = "(intercept)"
#: VIF above which a column is reported as strongly collinear (common practice).
VIF_SERIOUS = 10.0
#: Belsley, Kuh & Welsch (1980): condition index and variance-share thresholds.
CONDITION_DAMAGING = 30.0
PROPORTION_HIGH = 0.5
#: Near-dependency search: stop within this much R² of all other columns, or at this many columns.
R2_SLACK = 0.01
MAX_EXPLAINERS = 4


def diagnose(design, ols_result) -> Diagnostics:
    """VIF, condition indices, variance proportions and near-dependencies on the kept columns.

    Parameters
    ----------
    design : regbench.data.Design
        The design ``ols_result`` was fitted on (same weights).
    ols_result : OLSResult

    Returns
    -------
    Diagnostics
    """
    # Many small BLAS calls: one thread, so they do not wait on each other on shared cores.
    with one_blas_thread():
        return _diagnose(design, ols_result)


def _diagnose(design, ols_result) -> Diagnostics:
    from scipy import linalg

    kept = tuple(ols_result.kept)
    idx = [design.columns.index(c) for c in kept]
    k = len(kept)
    terms = (INTERCEPT,) + kept
    p = len(design.columns)

    # The factor of sqrt(w/W)·[1, x, y] with the columns centered before the QR: its
    # centered block gives the centered coordinates (VIF) accurately, and its first row
    # (the means times the unit-length intercept column) gives the uncentered ones
    # (condition indices) without cancellation.
    F = getattr(ols_result, "r_factor", None)
    if F is None or np.shape(F) != (p + 2, p + 2):
        F = weighted_factor(design).R
    F = np.asarray(F, dtype=np.float64)
    mean = F[0, 1:p + 1][idx]
    Rc = F[1:p + 1, 1:p + 1][:, idx]  # centered kept columns, p rows
    if k:
        cen = Rc / np.linalg.norm(Rc, axis=0)  # centered columns at unit length
        R = linalg.qr(cen, mode="r", check_finite=False)[0][:k]
        Rinv = linalg.solve_triangular(R, np.eye(k), check_finite=False)
        vif = np.sum(Rinv * Rinv, axis=1)
    else:
        R = np.zeros((0, 0))
        vif = np.zeros(0)

    # Condition indices and variance-decomposition proportions (uncentered, with intercept).
    Rz = np.zeros((p + 1, k + 1))
    Rz[0, 0] = 1.0
    Rz[0, 1:] = mean
    Rz[1:, 1:] = Rc
    Rz /= np.linalg.norm(Rz, axis=0)
    _, s, Vt = np.linalg.svd(Rz, full_matrices=False)
    with np.errstate(divide="ignore"):
        cond = s[0] / s
        phi = (Vt.T / s) ** 2  # phi[j, d]: term j, dimension d
    props = (phi / phi.sum(axis=1, keepdims=True)).T  # rows: dimensions, columns: terms

    damaging = []
    for d in np.flatnonzero(cond > CONDITION_DAMAGING):
        high = [terms[j] for j in np.flatnonzero(props[d] > PROPORTION_HIGH)]
        if len(high) >= 2:
            damaging.append({"index": float(cond[d]), "dimension": int(d), "terms": high})

    near = []
    serious = [j for j in np.argsort(-vif, kind="stable") if vif[j] > VIF_SERIOUS]
    if serious:
        Rn = R / np.linalg.norm(R, axis=0)
        S = Rn.T @ Rn  # correlations of the kept columns: the searches choose from its rows
        lengths = np.einsum("ij,ij->j", Rn, Rn)  # every search's first step reads these
        for j in serious:
            near.append(_near_dependency(j, R, kept, float(vif[j]), Rn, S, lengths))

    sentences = _summary(ols_result, kept, vif, cond, damaging)
    return Diagnostics(
        columns=kept,
        vif=vif,
        condition_indices=cond,
        variance_proportions=props,
        terms=terms,
        near_dependencies=tuple(near),
        damaging=tuple(damaging),
        sentences=tuple(sentences),
    )


def _near_dependency(j, R, kept, vif, Rn=None, S=None, lengths=None) -> NearDependency:
    """Greedy forward selection of the columns that explain column j (see :func:`_choose`)."""
    chosen, r2 = None, 0.0
    if S is not None:
        chosen, r2 = _choose(j, Rn, S, 1.0 - 1.0 / vif, lengths)
    if chosen is None:
        chosen, r2 = _choose_on_coordinates(j, R, 1.0 - 1.0 / vif)
    return _dependency(j, kept, vif, chosen, r2)


def _choose(j, Rn, S, r2_all, lengths=None):
    """Forward selection read from the correlation matrix ``S``: O(k) work per step.

    A step takes the column with the largest squared correlation with what the chosen
    columns leave of column j, among what they leave of the others; those partial
    quantities follow from rows of ``S`` and the Cholesky factor of the chosen block, so
    no k×k matrix is updated per column (at 1,000 columns that update was most of the
    diagnostics' time).  Left-over lengths below 1e-6, where the correlations' round-off
    would matter, are measured on the coordinates ``Rn`` instead, and so is each step's R²
    (a QR of the chosen columns' coordinates: the accuracy of the rows, not of ``S``).
    Returns ``(None, 0)`` when the chosen block is not numerically positive definite
    (the caller then searches on the coordinates).
    """
    from scipy import linalg

    k = S.shape[0]
    t = Rn[:, j]
    out = np.zeros(k, dtype=bool)
    out[j] = True
    chosen, r2 = [], 0.0
    while not out.all() and len(chosen) < MAX_EXPLAINERS and r2 < r2_all - R2_SLACK:
        if chosen:
            try:
                L = np.linalg.cholesky(S[np.ix_(chosen, chosen)])
            except np.linalg.LinAlgError:
                return None, 0.0
            B = linalg.solve_triangular(L, S[chosen, :], lower=True, check_finite=False)  # Uᵀ·columns
            a = S[j, :] - B[:, j] @ B  # what is left of j against each column
            norms = 1.0 - np.einsum("ij,ij->j", B, B)
            shaky = np.flatnonzero(~out & (norms < 1e-6))
            if shaky.size:
                # Q of the chosen columns: the one the last step's R² was measured with.
                left = t - Q @ (Q.T @ t)
                left -= Q @ (Q.T @ left)
                C = Rn[:, shaky] - Q @ (Q.T @ Rn[:, shaky])
                C -= Q @ (Q.T @ C)
                norms[shaky] = np.einsum("ij,ij->j", C, C)
                a[shaky] = left @ C
        else:
            a = S[j, :].copy()
            norms = np.einsum("ij,ij->j", Rn, Rn) if lengths is None else lengths.copy()
        ok = norms > 1e-24
        gain = np.where(ok, a * a / np.where(ok, norms, 1.0), -1.0)
        gain[out] = -np.inf
        best = int(np.argmax(gain))
        chosen.append(best)
        out[best] = True
        Q = np.linalg.qr(Rn[:, chosen])[0]
        left = t - Q @ (Q.T @ t)
        left -= Q @ (Q.T @ left)
        r2 = float(1.0 - left @ left)
    return chosen, r2


def _choose_on_coordinates(j, R, r2_all):
    """Greedy forward selection on the coordinates ``R`` of the unit-length centered columns."""
    t = R[:, j] / np.linalg.norm(R[:, j])
    others = np.array([i for i in range(R.shape[1]) if i != j], dtype=int)
    cand = R[:, others].copy()
    left = t.copy()  # what the chosen columns leave of column j
    chosen, r2 = [], 0.0
    while others.size and len(chosen) < MAX_EXPLAINERS and r2 < r2_all - R2_SLACK:
        norms = np.einsum("ij,ij->j", cand, cand)
        ok = norms > 1e-24
        gain = np.where(ok, (left @ cand) ** 2 / np.where(ok, norms, 1.0), -1.0)
        best = int(np.argmax(gain))
        u = cand[:, best] / np.sqrt(norms[best])
        chosen.append(int(others[best]))
        left = left - u * (u @ left)
        cand = cand - np.outer(u, u @ cand)
        others = np.delete(others, best)
        cand = np.delete(cand, best, axis=1)
        r2 = float(1.0 - left @ left)
    return chosen, r2


def _dependency(j, kept, vif, chosen, r2) -> NearDependency:
    """The :class:`NearDependency` of column j explained by the columns ``chosen`` with ``r2``."""
    r2_all = 1.0 - 1.0 / vif
    names = tuple(kept[i] for i in chosen)
    col = kept[j]
    sentence = (f"{col} is {percent(r2)} explained by {join_words(names)} (R² {r2_text(r2)}, VIF "
                f"{_vif_text(vif)}); their separate coefficients are poorly determined.")
    if r2 < r2_all - R2_SLACK:
        sentence = sentence[:-1] + f"; all other kept columns together explain {percent(r2_all)}."
    return NearDependency(column=col, vif=vif, explained_by=names, r_squared=r2, sentence=sentence)


def _summary(ols_result, kept, vif, cond, damaging) -> list:
    out = []
    aside = [sa.column for sa in ols_result.set_aside]
    if not aside:
        out.append("No column was set aside: each column adds something the others do not carry.")
    else:
        noun = "column was" if len(aside) == 1 else "columns were"
        out.append(f"{len(aside)} {noun} set aside because kept columns reproduce them: {', '.join(aside)}.")
    high = [i for i in np.argsort(-vif, kind="stable") if vif[i] > VIF_SERIOUS]
    if not kept:
        out.append("No column was kept, so the model is the weighted mean of the target.")
        return out
    if not high:
        out.append(f"No kept column has a VIF above {VIF_SERIOUS:g} (a common rule of thumb).")
    else:
        listed = ", ".join(f"{kept[i]} ({_vif_text(vif[i])})" for i in high[:5])
        more = f" and {len(high) - 5} more" if len(high) > 5 else ""
        noun = "column has" if len(high) == 1 else "columns have"
        out.append(f"{len(high)} kept {noun} a VIF above {VIF_SERIOUS:g} (a common rule of thumb): {listed}{more}.")
    worst = float(cond.max())
    if worst < 10:
        meaning = "the kept columns are close to independent, so their coefficients are well determined"
    elif worst <= CONDITION_DAMAGING:
        meaning = "the kept columns overlap moderately, which widens the uncertainty of some coefficients"
    else:
        meaning = "the kept columns overlap strongly: small changes in the data can move some coefficients a lot"
    out.append(f"The worst condition index is {plain_number(round(worst, 1) if worst < 1e4 else worst)}; {meaning}.")
    for dmg in damaging:
        out.append(
            f"A near-dependency with condition index {plain_number(round(dmg['index'], 1))} dominates the "
            f"uncertainty of {join_words([_term_text(t) for t in dmg['terms']], 'and')} (variance share above 0.5 each; "
            "Belsley, Kuh & Welsch's rule)."
        )
    return out


def percent(r2: float) -> str:
    """R² as a percentage with enough digits to tell it from 100%."""
    if not np.isfinite(r2):
        return "an unknown share"
    if r2 >= 1.0:
        return "100%"
    digits = 0 if r2 < 0.99 else min(int(np.ceil(-np.log10(1.0 - r2))) - 2, 8)
    return f"{100.0 * r2:.{digits}f}%"


def r2_text(r2: float) -> str:
    digits = 2 if r2 < 0.99 else min(int(np.ceil(-np.log10(max(1.0 - r2, 1e-16)))), 10)
    return f"{r2:.{digits}f}"


def _vif_text(v: float) -> str:
    if v < 1e4:
        return f"{v:.3g}" if v < 100 else f"{v:.0f}"
    return plain_number(v)


def _term_text(term: str) -> str:
    return "the intercept" if term == INTERCEPT else term



"""Stress figures over every row from the cross-products alone (tables read in batches).

Damaging column j moves a linear model's predictions by ``b_j · D`` with ``D``
the damaged minus the clean column.  For the damage that is the same function
of every row — a rescale (``c·x + f``) or a constant (``v``, the weighted mean
by default) — the weighted moments of ``D`` and of ``r·D`` (``r`` the clean
residual) follow from the weighted means and centred co-moments of the
predictors and the target (:class:`regbench.models.gram.GramStats`), so the
shift RMSE, the mean shift and the error before and after the damage are exact
over every row without reading them again.  Random damage (shuffle, noise,
wild values, missing) and the share of rows moved beyond a tolerance depend on
the rows themselves; they are measured on the rows at hand (a seeded sample).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Dict, Optional

import numpy as np

from regbench.analysis.stress import StressConfig, _followers, resolve_column
from regbench.errors import DataError

#: Kinds of damage whose figures over every row have a closed form in the cross-products.
CLOSED_FORM_KINDS = ("rescale", "constant")


@dataclass(frozen=True)
class AllRowsShift:
    """One model's figures over every row (weighted), from the cross-products."""

    shift_rmse: float
    mean_shift: float
    error_clean: float
    error_damaged: float

    def to_dict(self) -> dict:
        return {k: float(getattr(self, k)) for k in ("shift_rmse", "mean_shift", "error_clean", "error_damaged")}


def _moments(stats):
    """Weighted means and centred co-moments divided by W: (mx, my, Cxx, cxy, cyy)."""
    W = float(stats.W)
    return (np.asarray(stats.mean_x(), float), float(stats.mean_y()), np.asarray(stats.centered_xx(), float) / W,
            np.asarray(stats.centered_xy(), float) / W, float(stats.centered_yy()) / W)


def stress_from_stats(stats, columns, models: dict, config: StressConfig, block=None) -> Dict[str, AllRowsShift]:
    """Each model's shift when ``config`` damages one predictor, over every row the statistics cover.

    Parameters
    ----------
    stats : GramStats
        Weighted cross-products of the design's columns and the target over every usable row.
    columns : sequence of str
        The design's columns, in the order of ``stats``.
    models : dict of str -> LinearModel
        Fitted on those columns (a coefficient NaN where OLS set the column aside); a model on
        every level of a category is read in the design's coding.
    config : StressConfig
        A rescale or a constant (:data:`CLOSED_FORM_KINDS`).
    block : sequence of int, optional
        The design columns damaged together (a category's coded columns); default the one column
        named ``config.column``.

    Returns
    -------
    dict of str -> AllRowsShift
    """
    if config.kind not in CLOSED_FORM_KINDS:
        raise DataError(f"'{config.kind}' damage is random per row and has no closed form over rows not at hand; "
                        f"the closed forms cover {', '.join(CLOSED_FORM_KINDS)}")
    columns = list(columns)
    if block is None:
        if config.column not in columns:
            raise DataError(f"'{config.column}' is not a predictor of this fit; predictors are: {', '.join(columns)}")
        block = [columns.index(config.column)]
    J = np.asarray(block, dtype=int)
    mx, my, cxx, cxy, cyy = _moments(stats)
    fill = None if config.fill is None else float(config.fill)
    out = {}
    for name, m in models.items():
        b0, coef = m.design_coefficients()
        b = np.where(np.isfinite(coef), coef, 0.0).astype(float)[:len(columns)]
        bJ = b[J]
        rbar = my - float(b0) - b @ mx
        r2 = cyy - 2 * b @ cxy + b @ cxx @ b + rbar * rbar          # E[r²]
        # The shift is S = a·u + e_s with u = Σ_J b_j (x_j − mean_j): centred, so no cancellation
        # however far the columns' means lie from zero.
        if config.kind == "rescale":
            c, f = float(config.resolved_strength()) - 1.0, (fill or 0.0)
            a, e_s = c, c * (bJ @ mx[J]) + f * bJ.sum()              # x → (1 + c)·x + f
        else:
            v = mx[J] if fill is None else np.full(J.size, fill)
            a, e_s = -1.0, bJ @ (v - mx[J])                         # x → v
        e_u2 = bJ @ cxx[np.ix_(J, J)] @ bJ                          # E[u²]
        e_ru = (cxy[J] - cxx[J] @ b) @ bJ                           # E[r·u]
        e_s2 = a * a * e_u2 + e_s * e_s                             # E[S²]
        e_rs = a * e_ru + e_s * rbar                                # E[r·S]
        damaged = r2 - 2 * e_rs + e_s2
        out[name] = AllRowsShift(shift_rmse=math.sqrt(max(e_s2, 0.0)), mean_shift=float(e_s),
                                 error_clean=math.sqrt(max(r2, 0.0)), error_damaged=math.sqrt(max(damaged, 0.0)))
    return out


def all_rows_figures(stats, columns, models: dict, config: StressConfig, design=None) -> Optional[dict]:
    """``{model: AllRowsShift.to_dict()}`` for a closed-form kind, else None (the sample's figures stand alone).

    With ``design`` a table column names its design columns (a category's levels are damaged together),
    and a column that derived columns are computed from has no closed form here (they are recomputed
    from the damaged values, not shifted linearly): None.
    """
    if config.kind not in CLOSED_FORM_KINDS or stats is None:
        return None
    block = None
    if design is not None:
        if _followers(design, config.column):
            return None
        block = resolve_column(design, config.column)
    return {k: v.to_dict() for k, v in stress_from_stats(stats, columns, models, config, block).items()}

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

from regbench.analysis.stress import StressConfig
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


def stress_from_stats(stats, columns, models: dict, config: StressConfig) -> Dict[str, AllRowsShift]:
    """Each model's shift when ``config`` damages one predictor, over every row the statistics cover.

    Parameters
    ----------
    stats : GramStats
        Weighted cross-products of the design's columns and the target over every usable row.
    columns : sequence of str
        The design's columns, in the order of ``stats``.
    models : dict of str -> LinearModel
        Fitted on those columns (a coefficient NaN where OLS set the column aside).
    config : StressConfig
        A rescale or a constant (:data:`CLOSED_FORM_KINDS`).

    Returns
    -------
    dict of str -> AllRowsShift
    """
    if config.kind not in CLOSED_FORM_KINDS:
        raise DataError(f"'{config.kind}' damage is random per row and has no closed form over rows not at hand; "
                        f"the closed forms cover {', '.join(CLOSED_FORM_KINDS)}")
    columns = list(columns)
    if config.column not in columns:
        raise DataError(f"'{config.column}' is not a predictor of this fit; predictors are: {', '.join(columns)}")
    j = columns.index(config.column)
    mx, my, cxx, cxy, cyy = _moments(stats)
    fill = None if config.fill is None else float(config.fill)
    # E[D], E[D²] and E[x_j D] over the rows (weighted) for D = damaged − clean column.
    if config.kind == "rescale":
        c, f = float(config.resolved_strength()) - 1.0, (fill or 0.0)
        ex2 = cxx[j, j] + mx[j] ** 2
        e_d, e_d2 = c * mx[j] + f, c * c * ex2 + 2 * c * f * mx[j] + f * f
        d_coef, d_const = c, f  # D = d_coef·x_j + d_const
    else:
        v = mx[j] if fill is None else fill
        e_d, e_d2 = v - mx[j], cxx[j, j] + (mx[j] - v) ** 2
        d_coef, d_const = -1.0, v
    out = {}
    for name, m in models.items():
        b = np.where(np.isfinite(m.coef), m.coef, 0.0).astype(float)[:len(columns)]
        rbar = my - float(m.intercept) - b @ mx
        r2 = cyy - 2 * b @ cxy + b @ cxx @ b + rbar * rbar          # E[r²]
        e_rx = (cxy[j] - b @ cxx[:, j]) + rbar * mx[j]              # E[r·x_j]
        e_rd = d_coef * e_rx + d_const * rbar                       # E[r·D]
        bj = b[j]
        damaged = r2 - 2 * bj * e_rd + bj * bj * e_d2
        out[name] = AllRowsShift(shift_rmse=abs(bj) * math.sqrt(max(e_d2, 0.0)), mean_shift=bj * e_d,
                                 error_clean=math.sqrt(max(r2, 0.0)), error_damaged=math.sqrt(max(damaged, 0.0)))
    return out


def all_rows_figures(stats, columns, models: dict, config: StressConfig) -> Optional[dict]:
    """``{model: AllRowsShift.to_dict()}`` for a closed-form kind, else None (the sample's figures stand alone)."""
    if config.kind not in CLOSED_FORM_KINDS or stats is None:
        return None
    return {k: v.to_dict() for k, v in stress_from_stats(stats, columns, models, config).items()}

"""Stress figures over every row from the cross-products alone, against the stress test on the rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regbench.analysis.stress import StressConfig, run_stress
from regbench.analysis.stress_stats import all_rows_figures, stress_from_stats
from regbench.data import Roles, build_design, table_from_frame
from regbench.models.gram import gram_stats
from regbench.models.results import LinearModel

FIGURES = ("shift_rmse", "mean_shift", "error_clean", "error_damaged")


def _model(name, intercept, coef, columns, reference_levels=()):
    coef = np.asarray(coef, dtype=float)
    return LinearModel(name=name, columns=tuple(columns), intercept=float(intercept), coef=coef,
                       coef_std=coef.copy(), reference_levels=reference_levels)


@pytest.fixture(scope="module")
def shaded():
    # A three-level category, a column far from zero (mean 1e4, SD 1) and weights.
    rng = np.random.default_rng(12)
    n = 400
    frame = pd.DataFrame({"shade": rng.choice(["low", "mid", "high"], n), "x": rng.normal(size=n),
                          "far": 1e4 + rng.normal(size=n), "w": rng.uniform(0.5, 2.0, n)})
    frame["y"] = frame["x"] + (frame["shade"] == "low") * 2.0 + 0.3 * frame["far"] + rng.normal(0, 0.1, n)
    d = build_design(table_from_frame(frame), Roles(target="y", weights="w"))
    assert set(d.columns) == {"far", "shade=low", "shade=mid", "x"}
    ols = {"far": 0.299, "shade=low": 2.0, "shade=mid": 0.05, "x": 1.0}
    ridge = {"far": 0.298, "shade=low": 1.7, "shade=mid": -0.1, "x": 0.9}
    models = {
        "ols": _model("ols", -2990.0, [ols[c] for c in d.columns], d.columns),
        # On every level of shade, its reference level 'high' carried after the design's columns.
        "ridge": _model("ridge", -2980.0, [ridge[c] for c in d.columns] + [-0.2],
                        d.columns + ("shade=high",), (("shade=high", ("shade=low", "shade=mid")),)),
    }
    return d, models, gram_stats(d.X, d.y, d.weights)


@pytest.mark.parametrize("column", ["shade", "far", "x"])
@pytest.mark.parametrize("kind,strength,fill", [("rescale", 1.8, None), ("rescale", 0.5, -2.0),
                                                ("constant", None, None), ("constant", None, 0.25)])
def test_closed_form_equals_the_stress_test_on_every_row(shaded, column, kind, strength, fill):
    # Source: run_stress, which damages the column(s) in every row and predicts them again.
    d, models, stats = shaded
    cfg = StressConfig(column, kind, strength, fill=fill)
    rows = run_stress(d, models, cfg)
    every = all_rows_figures(stats, d.columns, models, cfg, design=d)
    for name, shift in rows.shifts.items():
        for k in FIGURES:
            assert every[name][k] == pytest.approx(getattr(shift, k), rel=1e-9, abs=1e-9), (name, k)


def test_a_column_with_derived_followers_has_no_closed_form(shaded):
    # log(far) is computed again from the damaged far, not shifted linearly: no closed form for far.
    from regbench.data.derive import make_derived

    rng = np.random.default_rng(3)
    n = 200
    frame = pd.DataFrame({"x": rng.normal(size=n), "far": 1e4 + rng.normal(size=n)})
    frame["y"] = frame["x"] + 0.3 * frame["far"] + rng.normal(0, 0.1, n)
    d = build_design(table_from_frame(frame), Roles(target="y", derived=(make_derived("log", ("far",)),)))
    assert "log(far)" in d.columns
    models = {"ols": _model("ols", 1.0, np.linspace(0.5, 1.0, len(d.columns)), d.columns)}
    stats = gram_stats(d.X, d.y, d.weights)
    assert all_rows_figures(stats, d.columns, models, StressConfig("far", "rescale", 1.8), design=d) is None
    every = all_rows_figures(stats, d.columns, models, StressConfig("x", "rescale", 1.8), design=d)
    rows = run_stress(d, models, StressConfig("x", "rescale", 1.8))
    assert every["ols"]["shift_rmse"] == pytest.approx(rows.shifts["ols"].shift_rmse, rel=1e-9)
    # Without the design, one design column by name, as before.
    one = stress_from_stats(stats, d.columns, models, StressConfig("x", "rescale", 1.8))
    assert one["ols"].shift_rmse == every["ols"]["shift_rmse"]

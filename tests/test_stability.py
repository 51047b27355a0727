"""Stability: bootstrap resampling, frequencies of known probability, and the order-driven alias case."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from regbench.analysis.stability import bootstrap_stability, resample_counts
from regbench.data import Roles, build_design, design_from_arrays, read_table
from regbench.demo import GREENHOUSE_ROLES
from regbench.errors import Cancelled
from regbench.models.results import FitSettings

engine = pytest.importorskip("regbench.models.engine")

SETTINGS = FitSettings(alpha=0.01)


def test_grouped_resampling_never_splits_a_group():
    rng = np.random.default_rng(0)
    groups = rng.integers(0, 7, 90)
    d = design_from_arrays(rng.normal(size=(90, 2)), rng.normal(size=90), groups=groups)
    for _ in range(50):
        c = resample_counts(d, rng)
        per_group = {g: set(c[d.groups == g]) for g in range(7)}
        # Every row of a group carries the same count: the group is drawn whole or not at all.
        assert all(len(s) == 1 for s in per_group.values())
        # As many groups drawn as there are (with replacement).
        assert sum(next(iter(s)) for s in per_group.values()) == 7
    plain = design_from_arrays(rng.normal(size=(90, 2)), rng.normal(size=90))
    assert resample_counts(plain, rng).sum() == 90


def test_counts_as_weights_equal_stacked_copies():
    # Mathematical fact: Σ k_i w_i (…)² over distinct rows equals the sum over k_i stacked copies,
    # so weights × counts and repeated rows give the same fit (solver tolerance for the penalized ones).
    rng = np.random.default_rng(2)
    n = 80
    X = rng.normal(size=(n, 3))
    y = X @ [1.0, 0.0, -0.5] + rng.normal(0, 0.5, n)
    d = design_from_arrays(X, y, weights=rng.uniform(0.5, 2, n))
    counts = resample_counts(d, rng)
    from dataclasses import replace

    a = engine.fit_models_at(replace(d, weights=d.weights * counts), SETTINGS, {})
    b = engine.fit_models_at(d.subset(np.repeat(np.arange(n), counts.astype(int))), SETTINGS, {})
    for k in a:
        np.testing.assert_allclose(a[k].coef, b[k].coef, rtol=1e-6, atol=1e-8)


def _binomial_ok(freq, p, n_boot, z=4.0):
    return abs(freq - p) <= z * math.sqrt(p * (1 - p) / n_boot)


def test_set_aside_frequency_of_a_single_row_indicator():
    # Construction: column 'spike' is 1 on one row and 0 elsewhere.  A bootstrap
    # sample leaves that row out with probability (1 − 1/n)^n (exact), and then
    # 'spike' is constant on the rows drawn, so OLS must set it aside; when the row
    # is drawn, 'spike' is independent of the other columns and stays.
    rng = np.random.default_rng(3)
    n = 40
    X = np.column_stack([rng.normal(size=n), np.eye(n)[7]])
    y = X[:, 0] + rng.normal(0, 0.5, n)
    d = design_from_arrays(X, y, ("x", "spike"))
    n_boot = 300
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=n_boot, seed=1)
    p = (1 - 1 / n) ** n
    assert _binomial_ok(st.set_aside_freq[1], p, n_boot), (st.set_aside_freq[1], p)
    assert st.set_aside_freq[0] == 0.0
    assert "spike" not in st.order_driven


def test_grouped_frequency_of_a_group_indicator():
    # Same construction per group: with G groups resampled whole, group 0 is absent with
    # probability (1 − 1/G)^G, and then its indicator is constant on the rows drawn.
    rng = np.random.default_rng(4)
    G, per = 10, 6
    groups = np.repeat(np.arange(G), per)
    n = G * per
    X = np.column_stack([rng.normal(size=n), (groups == 0).astype(float)])
    y = X[:, 0] + rng.normal(0, 0.5, n)
    d = design_from_arrays(X, y, ("x", "house0"), groups=groups)
    n_boot = 300
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=n_boot, seed=2)
    assert st.grouped
    p = (1 - 1 / G) ** G
    assert _binomial_ok(st.set_aside_freq[1], p, n_boot), (st.set_aside_freq[1], p)
    assert "never split" in st.sentences[0]


def test_ols_bootstrap_sd_matches_sandwich_standard_error():
    # The pairs bootstrap SD of an OLS coefficient estimates the heteroscedasticity-robust
    # (sandwich, HC0) standard error (Efron & Tibshirani 1993, An Introduction to the
    # Bootstrap, ch. 9); reference: statsmodels OLS(cov_type='HC0').  With B refits the SD
    # itself has relative sampling error about 1/√(2B) (about 4% here); allow 20%.
    import statsmodels.api as sm

    rng = np.random.default_rng(5)
    n = 400
    X = rng.normal(size=(n, 2))
    y = 1 + X @ [0.5, -0.3] + rng.normal(size=n) * (0.3 + np.abs(X[:, 0]))
    d = design_from_arrays(X, y, ("u", "v"))
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=300, seed=3)
    hc0 = sm.OLS(y, sm.add_constant(X)).fit(cov_type="HC0").bse[1:]
    np.testing.assert_allclose(st.coef_sd["ols"], hc0, rtol=0.2)
    # Mean of the refits near the full-data estimate (within 4 bootstrap SEs of the mean).
    full = sm.OLS(y, sm.add_constant(X)).fit().params[1:]
    assert np.all(np.abs(st.coef_mean["ols"] - full) < 4 * hc0 / math.sqrt(300) + 0.02 * np.abs(full))
    # Ordered quantiles.
    assert np.all(st.coef_q05["ols"] < st.coef_mean["ols"]) and np.all(st.coef_mean["ols"] < st.coef_q95["ols"])


def test_strong_column_always_selected_and_useless_one_rarely():
    rng = np.random.default_rng(6)
    n = 300
    X = rng.normal(size=(n, 2))
    y = 3 * X[:, 0] + rng.normal(0, 1, n)
    d = design_from_arrays(X, y, ("strong", "idle"))
    # At α = 0.5 the lasso threshold is far above |corr(idle, residual)| ~ 1/√n, and far below
    # strong's signal (KKT conditions on standardized columns): selected 100% and ~0%.
    st = bootstrap_stability(d, FitSettings(alpha=0.5), {}, n_boot=50, seed=0)
    assert st.selected_freq["lasso"][0] == 1.0
    assert st.selected_freq["lasso"][1] == 0.0
    assert st.selected_freq["ridge"].tolist() == [1.0, 1.0]


def test_exact_alias_is_order_driven_and_said():
    rng = np.random.default_rng(7)
    n = 100
    a, b = rng.normal(size=(2, n))
    X = np.column_stack([a, b, (a + b) / 2])
    d = design_from_arrays(X, a + b + rng.normal(0, 0.2, n), ("day", "night", "mean"))
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=20, seed=0)
    assert st.set_aside_freq.tolist() == [0.0, 0.0, 1.0]
    assert st.order_driven == ("mean",)
    assert any("mean is set aside in every refit because it comes after day and night in the column order" in s
               for s in st.sentences)
    # Pinning 'mean' first moves the choice: now a later column goes, again in every refit.
    pinned = bootstrap_stability(d, FitSettings(alpha=0.01, pins=("mean",)), {}, n_boot=20, seed=0)
    assert pinned.set_aside_freq[2] == 0.0 and pinned.set_aside_freq.max() == 1.0


def test_progress_per_refit_and_cancel_between():
    rng = np.random.default_rng(8)
    d = design_from_arrays(rng.normal(size=(30, 2)), rng.normal(size=30))
    calls = []
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=5, progress=lambda *a: calls.append(a[:2]))
    assert calls == [(i, 5) for i in range(1, 6)]
    json.dumps(st.to_dict(), allow_nan=False)
    asked = []
    with pytest.raises(Cancelled):
        bootstrap_stability(d, SETTINGS, {}, n_boot=5, cancel=lambda: asked.append(1) or len(asked) > 2)
    assert len(asked) == 3


def test_same_seed_same_result():
    rng = np.random.default_rng(9)
    d = design_from_arrays(rng.normal(size=(40, 3)), rng.normal(size=40))
    a = bootstrap_stability(d, SETTINGS, {}, n_boot=10, seed=4)
    b = bootstrap_stability(d, SETTINGS, {}, n_boot=10, seed=4)
    assert np.array_equal(a.coef_draws["lasso"], b.coef_draws["lasso"])


def test_greenhouse_sample():
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "sample_projects" / "greenhouse.csv"
    d = build_design(read_table(path), Roles.from_dict(GREENHOUSE_ROLES))
    res = engine.fit_all(d, FitSettings(n_penalties=30))
    alphas = {k: pf.alpha for k, pf in res.penalized.items()}
    st = bootstrap_stability(d, res.settings, alphas, n_boot=40, seed=0)
    # The table's derived columns are exact aliases (sample_projects/README): order decides.
    assert set(st.order_driven) == {"mean_temp_c", "day_temp_f"}
    assert st.grouped and st.models == tuple(res.models())


def test_refits_with_a_flat_target_are_counted_and_said():
    # Two groups, each with its own constant target: a draw of one group twice has nothing
    # to fit.  With 2 groups that happens with probability 1/2 per refit (exact).
    rng = np.random.default_rng(10)
    g = np.repeat([0, 1], 10)
    d = design_from_arrays(rng.normal(size=(20, 2)), np.where(g == 0, 1.0, 2.0),
                           groups=g)
    st = bootstrap_stability(d, SETTINGS, {}, n_boot=200, seed=0)
    assert _binomial_ok(st.n_flat / 200, 0.5, 200)
    assert any("the same everywhere" in s for s in st.sentences)

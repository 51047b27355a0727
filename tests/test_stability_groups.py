"""Grouped bootstrap refits from re-weighted group cross-products against refits on the rows.

Source: the row route of this package (``method='rows'``: every refit on the rows
re-weighted by their draw counts; tests/test_stability.py checks it against exact
probabilities and stacked copies) given the same seeded draws, and numpy sums on the rows.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from regbench.analysis.group_refits import GroupRefits, ordered_choice
from regbench.analysis.stability import bootstrap_stability, group_counts, resample_counts
from regbench.data import design_from_arrays
from regbench.models.gram import gram_stats
from regbench.models.results import FitSettings


def _design(n=3000, groups=25, seed=0, weighted=True):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 8)) + rng.normal(0, 20, 8)
    X[:, 6] = 1.8 * X[:, 0] + 32.0  # an exact alias (a unit change)
    X[:, 7] = X[:, 1] + X[:, 2] + 0.05 * rng.normal(size=n)  # a near dependency, kept
    y = X[:, :4] @ [1.0, 0.3, 0.0, -0.05] + rng.normal(size=n) + rng.normal(size=groups)[rng.integers(0, groups, n)]
    g = rng.integers(0, groups, n)
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    return design_from_arrays(X, y, columns=tuple(f"c{j}" for j in range(8)), weights=w, groups=g)


def test_group_sums_equal_the_cross_products_of_the_drawn_rows():
    d = _design()
    r = GroupRefits(d, FitSettings(alpha=0.1), {})
    counts = group_counts(r.n_groups, np.random.default_rng(1))
    st = r.stats(counts)
    rows = gram_stats(d.X, d.y, d.weights * counts[d.groups])
    # Source: the Gram of the rows re-weighted by their group's count.
    assert st.W == pytest.approx(rows.W, rel=1e-13)
    np.testing.assert_allclose(st.mean_x(), rows.mean_x(), rtol=1e-13)
    np.testing.assert_allclose(st.centered_xx(), rows.centered_xx(), rtol=1e-10, atol=1e-7)
    np.testing.assert_allclose(st.centered_xy(), rows.centered_xy(), rtol=1e-10, atol=1e-7)


def test_group_counts_draw_as_the_row_route_does():
    d = _design(n=500, groups=9)
    a = resample_counts(d, np.random.default_rng(5))
    b = group_counts(9, np.random.default_rng(5))[d.groups]
    np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("weighted", [True, False])
def test_same_selection_frequencies_as_row_refits_given_the_same_draws(weighted):
    d = _design(weighted=weighted)
    settings = FitSettings()
    alphas = {"ridge": 0.5, "lasso": 0.05, "elastic_net": 0.08}
    a = bootstrap_stability(d, settings, alphas, n_boot=30, seed=3, method="groups")
    b = bootstrap_stability(d, settings, alphas, n_boot=30, seed=3, method="rows")
    assert a.models == b.models
    for k in a.models:
        # Same draws, same models: identical frequencies, coefficients to solver round-off.
        np.testing.assert_array_equal(a.selected_freq[k], b.selected_freq[k])
        scale = np.abs(b.coef_draws[k]).max()
        np.testing.assert_allclose(a.coef_draws[k], b.coef_draws[k], atol=1e-8 * scale)
    np.testing.assert_array_equal(a.set_aside_freq, b.set_aside_freq)
    # The exact alias is set aside in every refit, the near dependency in none.
    assert a.set_aside_freq[6] == 1.0 and a.set_aside_freq[7] == 0.0
    assert a.order_driven == b.order_driven == ("c6",)
    # Lasso's choice varies between draws somewhere, so the comparison is not trivial.
    assert np.any((a.selected_freq["lasso"] > 0) & (a.selected_freq["lasso"] < 1))
    assert a.sentences == b.sentences


def test_ordered_choice_on_cross_products_matches_the_rows_walk():
    from regbench.models.ols import fit_ols

    d = _design(seed=4)
    pins = ("c6",)
    st = gram_stats(d.X, d.y, d.weights)
    _, _, mean, sd = st.standardized()
    size = np.sqrt(sd ** 2 + mean ** 2)
    S = st.centered_xx() / st.W / np.outer(size, size)
    kept = ordered_choice(S, [6], 1e-6, sd)
    # Source: fit_ols on the rows with the same pin (the alias c0 gives way to the pinned c6).
    assert tuple(d.columns[j] for j in sorted(kept)) == fit_ols(d, pins).kept


def test_group_refits_cancel_between_refits():
    from regbench.errors import Cancelled

    d = _design(n=600)
    calls = []

    def cancel():
        calls.append(1)
        return len(calls) > 3

    with pytest.raises(Cancelled):
        bootstrap_stability(d, FitSettings(alpha=0.1), {}, n_boot=50, seed=0, cancel=cancel)
    assert len(calls) == 4


def test_ordered_choice_keeps_every_independent_column_in_walk_order():
    # With no dependency the walk keeps every column, pins first (the one-factorization shortcut);
    # source: fit_ols on the rows keeps the same columns.
    from regbench.models.ols import fit_ols

    rng = np.random.default_rng(7)
    X = rng.normal(size=(400, 6)) + rng.normal(0, 5, 6)
    X[:, 5] = 3.0  # no spread: never kept
    d = design_from_arrays(X, X[:, 0] + rng.normal(size=400), columns=tuple(f"c{j}" for j in range(6)))
    st = gram_stats(d.X, d.y, d.weights)
    _, _, mean, sd = st.standardized()
    size = np.sqrt(sd ** 2 + mean ** 2)
    S = st.centered_xx() / st.W / np.outer(size, size)
    assert ordered_choice(S, [3], 1e-6, sd) == [3, 0, 1, 2, 4]
    assert tuple(d.columns[j] for j in (0, 1, 2, 3, 4)) == fit_ols(d).kept


@pytest.mark.parametrize("weighted", [True, False])
def test_row_draws_from_cross_products_equal_row_refits(weighted):
    # Source: the row route (every refit on the re-weighted rows, OLS by a factor of the rows) on the same draws.
    d = _design(weighted=weighted)
    d = replace(d, groups=None, groups_column=None)
    settings = FitSettings()
    alphas = {"ridge": 0.5, "lasso": 0.05, "elastic_net": 0.08}
    a = bootstrap_stability(d, settings, alphas, n_boot=30, seed=3)  # 'auto': cross-products per draw
    b = bootstrap_stability(d, settings, alphas, n_boot=30, seed=3, method="rows")
    assert a.models == b.models and not a.grouped
    for k in a.models:
        np.testing.assert_array_equal(a.selected_freq[k], b.selected_freq[k])
        scale = np.abs(b.coef_draws[k]).max()
        np.testing.assert_allclose(a.coef_draws[k], b.coef_draws[k], atol=1e-8 * scale)
    np.testing.assert_array_equal(a.set_aside_freq, b.set_aside_freq)
    assert a.set_aside_freq[6] == 1.0 and a.set_aside_freq[7] == 0.0
    assert np.any((a.selected_freq["lasso"] > 0) & (a.selected_freq["lasso"] < 1))
    assert a.sentences == b.sentences

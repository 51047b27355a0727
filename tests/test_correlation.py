"""The correlation map, checked against numpy's weighted covariance and the greenhouse scenario's aliases."""

from __future__ import annotations

import numpy as np
import pytest

from regbench.analysis.correlation import correlation_map, weighted_correlation
from regbench.data import design_from_arrays


def test_weighted_correlation_matches_numpy_cov_with_weights():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(300, 4)) @ rng.normal(size=(4, 4))
    w = rng.uniform(0.2, 3.0, 300)
    # Source: numpy.cov with aweights, normalised to a correlation (bias cancels in the ratio).
    cov = np.cov(X, rowvar=False, aweights=w)
    ref = cov / np.sqrt(np.outer(np.diag(cov), np.diag(cov)))
    np.testing.assert_allclose(weighted_correlation(X, w), ref, rtol=1e-12, atol=1e-14)
    # Unweighted: numpy.corrcoef.
    np.testing.assert_allclose(weighted_correlation(X, np.ones(300)), np.corrcoef(X, rowvar=False), atol=1e-14)


def test_map_names_columns_and_marks_constant_ones(greenhouse):
    cm = correlation_map(greenhouse)
    assert cm.columns == greenhouse.columns and not cm.sampled and cm.n_rows == greenhouse.n
    # The scenario's exact aliases (demo.py): °F is a linear function of °C, so their correlation is 1.
    assert cm.value("day_temp_c", "day_temp_f") == pytest.approx(1.0, abs=1e-12)
    assert np.allclose(np.diag(cm.matrix), 1.0)
    X = np.column_stack([np.arange(10.0), np.ones(10)])
    d = design_from_arrays(X, np.arange(10.0) * 2, columns=("x", "flat"))
    m = correlation_map(d)
    assert np.isnan(m.value("x", "flat")) and m.to_dict()["matrix"][0][1] is None


def test_large_designs_use_a_seeded_sample():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(500, 2))
    d = design_from_arrays(X, X[:, 0], columns=("a", "b"))
    one, two = correlation_map(d, max_rows=100), correlation_map(d, max_rows=100)
    assert one.sampled and one.n_rows == 100 and one == two

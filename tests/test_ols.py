"""OLS with set-aside explanations, checked against outside sources.

Sources: NIST StRD certified values (Longley, Wampler1, Wampler2; from memory,
as /work/shared/REFERENCES.md records them, reproduced there with statsmodels),
published Hald cement results (from memory, same file), statsmodels WLS, and
mathematical facts (an exact alias is reproduced by its combination to round-off;
rows of weight 0 contribute nothing; units do not change what is set aside).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from regbench.data import Roles, build_design, design_from_arrays, read_table
from regbench.demo import GREENHOUSE_ROLES
from regbench.errors import ModelError
from regbench.models.ols import default_rank_tol, fit_ols
from regbench.sentences import set_aside_sentence

ROOT = Path(__file__).resolve().parents[1]
EPS = np.finfo(float).eps


def rel_err(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return np.max(np.abs(a - b) / np.abs(b))


def sm_wls(X, y, w):
    import statsmodels.api as sm

    return sm.WLS(y, sm.add_constant(X, has_constant="add"), weights=w).fit()


# -- NIST StRD ------------------------------------------------------------------------------


def test_longley_matches_nist_certified_values_to_9_digits():
    import statsmodels.api as sm

    data = sm.datasets.longley.load_pandas()
    cols = ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR")
    assert tuple(data.exog.columns) == cols
    design = design_from_arrays(data.exog.to_numpy(), data.endog.to_numpy(), columns=cols)
    r = fit_ols(design)
    # NIST StRD Longley certified values (from memory, as in REFERENCES.md; statsmodels agrees to ~1e-12).
    b = [15.0618722713733, -0.0358191792925910, -2.02022980381683, -1.03322686717359,
         -0.0511041056535807, 1829.15146461355]
    se = [84.9149257747669, 0.0334910077722432, 0.488399681651699, 0.214274163161675,
          0.226073200069370, 455.478499142212]
    assert r.kept == cols and r.set_aside == ()
    assert rel_err(r.coef, b) < 1e-9
    assert rel_err(r.std_errors, se) < 1e-9
    assert rel_err(r.intercept, -3482258.63459582) < 1e-9
    assert rel_err(r.intercept_se, 890420.383607373) < 1e-9
    assert rel_err(r.residual_sd, 304.854073561965) < 1e-9
    assert abs(r.r_squared - 0.995479004577296) < 1e-10
    assert r.df_resid == 9 and r.n_obs == 16 and r.rank == 6


def wampler(coefs):
    x = np.arange(21.0)
    X = np.column_stack([x ** k for k in range(1, 6)])
    y = sum(c * x ** k for k, c in enumerate(coefs))
    return design_from_arrays(X, y, columns=tuple(f"x^{k}" for k in range(1, 6)))


@pytest.mark.parametrize("coefs", [
    (1, 1, 1, 1, 1, 1),  # NIST Wampler1 defining formula (from memory, REFERENCES.md)
    (1, 0.1, 0.01, 0.001, 1e-4, 1e-5),  # NIST Wampler2 defining formula (from memory, REFERENCES.md)
])
def test_wampler_polynomials_keep_every_column_and_their_accuracy(coefs):
    design = wampler(coefs)
    r = fit_ols(design)
    # Certified: every column in the model, coefficients as in the formula, residual SD 0.
    assert r.set_aside == () and r.rank == 5
    # Measured here: about 1e-11 relative (Wampler1) and 1e-13 (Wampler2); we require 1e-8.
    assert rel_err(r.coef, coefs[1:]) < 1e-8
    assert abs(r.intercept - 1.0) < 1e-8
    assert r.residual_sd <= 1e-12 * np.std(design.y)
    assert r.r_squared == pytest.approx(1.0, abs=1e-12)


# -- Hald cement ----------------------------------------------------------------------------


def test_hald_cement_published_fit(hald):
    r = fit_ols(hald)
    # Montgomery, Peck & Vining; Draper & Smith (from memory, REFERENCES.md): rounded to 4 decimals.
    assert r.set_aside == ()
    assert r.intercept == pytest.approx(62.4054, abs=5e-5)
    np.testing.assert_allclose(r.coef, [1.5511, 0.5102, 0.1019, -0.1441], atol=5e-5)
    assert r.r_squared == pytest.approx(0.9824, abs=5e-5)
    # statsmodels OLS on the same data, all digits.
    ref = sm_wls(hald.X, hald.y, np.ones(hald.n))
    np.testing.assert_allclose(r.coef, ref.params[1:], rtol=1e-11)
    np.testing.assert_allclose(r.std_errors, ref.bse[1:], rtol=1e-10)


# -- statsmodels WLS cross-check ------------------------------------------------------------


def random_design(seed, n=80, p=5, alias=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * rng.uniform(0.1, 50, p) + rng.uniform(-100, 100, p)
    X[:, 1] += 0.8 * X[:, 0]  # some ordinary correlation
    if alias:
        X = np.column_stack([X, 3.0 * X[:, 0] - 0.25 * X[:, 2] + 7.0])
    beta = rng.normal(size=X.shape[1])
    y = 5.0 + X @ beta + rng.normal(0, 2.0, n)
    w = rng.uniform(0.2, 3.0, n)
    return design_from_arrays(X, y, weights=w)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_weighted_inference_matches_statsmodels_wls(seed):
    d = random_design(seed)
    r = fit_ols(d)
    ref = sm_wls(d.X, d.y, d.weights)  # statsmodels WLS, frequency-free weights
    assert r.set_aside == ()
    np.testing.assert_allclose(r.intercept, ref.params[0], rtol=1e-10)
    np.testing.assert_allclose(r.intercept_se, ref.bse[0], rtol=1e-9)
    np.testing.assert_allclose(r.coef, ref.params[1:], rtol=1e-10)
    np.testing.assert_allclose(r.std_errors, ref.bse[1:], rtol=1e-9)
    np.testing.assert_allclose(r.t_values, ref.tvalues[1:], rtol=1e-9)
    np.testing.assert_allclose(r.p_values, ref.pvalues[1:], rtol=1e-7, atol=1e-300)
    ci = np.asarray(ref.conf_int(0.05))
    np.testing.assert_allclose(r.ci_low, ci[1:, 0], rtol=1e-9)
    np.testing.assert_allclose(r.ci_high, ci[1:, 1], rtol=1e-9)
    assert r.r_squared == pytest.approx(ref.rsquared, rel=1e-11)
    assert r.adj_r_squared == pytest.approx(ref.rsquared_adj, rel=1e-11)
    assert r.residual_sd == pytest.approx(np.sqrt(ref.scale), rel=1e-10)
    assert r.df_resid == ref.df_resid


def test_aliased_design_inference_on_kept_columns_matches_statsmodels():
    d = random_design(4, alias=True)
    r = fit_ols(d)
    # Column x6 = 3 x1 - 0.25 x3 + 7 by construction: it comes last, so it is the one set aside.
    assert [sa.column for sa in r.set_aside] == ["x6"]
    kept = [d.columns.index(c) for c in r.kept]
    # statsmodels only on the kept columns: it must not decide what is set aside (PITFALLS.md).
    ref = sm_wls(d.X[:, kept], d.y, d.weights)
    np.testing.assert_allclose(r.coef[kept], ref.params[1:], rtol=1e-9)
    np.testing.assert_allclose(r.std_errors[kept], ref.bse[1:], rtol=1e-8)
    np.testing.assert_allclose(r.p_values[kept], ref.pvalues[1:], rtol=1e-6, atol=1e-300)
    assert r.df_resid == ref.df_resid and r.rank == 5
    assert r.adj_r_squared == pytest.approx(ref.rsquared_adj, rel=1e-11)
    j = d.columns.index("x6")
    assert r.coef[j] == 0.0 and r.model.coef[j] == 0.0
    for arr in (r.std_errors, r.t_values, r.p_values, r.ci_low, r.ci_high):
        assert np.isnan(arr[j])
    sa = r.set_aside[0]
    # Mathematical fact: the stated combination is the construction.
    assert sa.combination == pytest.approx({"x1": 3.0, "x3": -0.25}, rel=1e-9)
    assert sa.intercept == pytest.approx(7.0, rel=1e-9)
    assert set(sa.alternatives) == {"x1", "x3"}


def test_zero_weight_rows_contribute_nothing():
    d = random_design(5)
    w = d.weights.copy()
    w[::7] = 0.0
    X = d.X.copy()
    X[::7, 2] = 1e12  # wild values on rows that do not count
    zero = design_from_arrays(X, d.y, weights=w)
    keep = w > 0
    dropped = design_from_arrays(d.X[keep], d.y[keep], weights=w[keep])
    a, b = fit_ols(zero), fit_ols(dropped)
    # Fact: a weight-0 row adds nothing to any weighted sum.
    np.testing.assert_allclose(a.coef, b.coef, rtol=1e-9)
    np.testing.assert_allclose(a.std_errors, b.std_errors, rtol=1e-9)
    assert a.df_resid == b.df_resid and a.n_obs == int(keep.sum())
    ref = sm_wls(d.X[keep], d.y[keep], w[keep])  # statsmodels WLS on the counted rows
    np.testing.assert_allclose(a.std_errors, ref.bse[1:], rtol=1e-9)


def test_model_and_standardized_coefficients():
    d = random_design(6, alias=True)
    r = fit_ols(d)
    _, _, sd = d.standardized()
    assert r.model.name == "ols" and r.model.columns == d.columns and r.model.alpha is None
    np.testing.assert_array_equal(r.model.coef, r.coef)
    np.testing.assert_allclose(r.model.coef_std, r.coef * sd, rtol=1e-15)
    # Fact: predictions are the weighted least-squares fitted values (numpy lstsq on sqrt(w) rows).
    sw = np.sqrt(d.weights)
    A = np.column_stack([np.ones(d.n), d.X])
    sol, *_ = np.linalg.lstsq(A * sw[:, None], d.y * sw, rcond=None)
    np.testing.assert_allclose(r.model.predict(d.X), A @ sol, rtol=1e-9)


def test_units_do_not_change_what_is_set_aside():
    d = random_design(7, alias=True)
    X = d.X.copy()
    X[:, 3] *= 1e9
    X[:, 0] *= 1e-7
    r0, r1 = fit_ols(d), fit_ols(design_from_arrays(X, d.y, weights=d.weights))
    assert r0.kept == r1.kept
    np.testing.assert_allclose(r1.model.predict(X), r0.model.predict(d.X), rtol=1e-9)


# -- the greenhouse sample: exact aliases and pins ------------------------------------------


def reproduce(design, sa):
    x = design.X[:, design.index(sa.column)]
    fit = sa.intercept + sum(c * design.X[:, design.index(k)] for k, c in sa.combination.items())
    return x, fit


def test_greenhouse_exact_aliases(greenhouse):
    r = fit_ols(greenhouse)
    by = {sa.column: sa for sa in r.set_aside}
    assert set(by) == {"mean_temp_c", "day_temp_f"}
    mean, f = by["mean_temp_c"], by["day_temp_f"]
    # Facts from the table's construction: mean = (day + night) / 2, °F = 1.8 °C + 32.
    assert mean.combination == pytest.approx({"day_temp_c": 0.5, "night_temp_c": 0.5}, abs=1e-12)
    assert abs(mean.intercept) < 1e-10
    assert f.combination == pytest.approx({"day_temp_c": 1.8}, abs=1e-12)
    assert f.intercept == pytest.approx(32.0, abs=1e-10)
    for sa in (mean, f):
        x, fit = reproduce(greenhouse, sa)
        assert np.max(np.abs(x - fit)) < 1e3 * EPS * np.max(np.abs(x))  # round-off
        assert sa.exact and sa.residual < 1e-12
    assert set(mean.alternatives) == {"day_temp_c", "night_temp_c"}
    assert f.alternatives == ("day_temp_c",)
    s = set_aside_sentence(mean)
    assert s.startswith("mean_temp_c was set aside: it equals 0.5 × day_temp_c + 0.5 × night_temp_c exactly")
    assert "day_temp_c or night_temp_c" in s and "same predictions" in s
    assert set_aside_sentence(f).startswith("day_temp_f was set aside: it equals 32 + 1.8 × day_temp_c exactly")
    assert f.sentence() == set_aside_sentence(f)
    assert r.rank == greenhouse.p - 2
    # statsmodels WLS on the kept columns agrees on inference.
    kept = [greenhouse.index(c) for c in r.kept]
    ref = sm_wls(greenhouse.X[:, kept], greenhouse.y, greenhouse.weights)
    np.testing.assert_allclose(r.coef[kept], ref.params[1:], rtol=1e-8)
    np.testing.assert_allclose(r.std_errors[kept], ref.bse[1:], rtol=1e-8)


def test_greenhouse_pins_are_respected_and_predictions_do_not_change(greenhouse):
    base = fit_ols(greenhouse)
    pinned = fit_ols(greenhouse, pins=("mean_temp_c",))
    assert "mean_temp_c" in pinned.kept
    aside = {sa.column for sa in pinned.set_aside}
    assert "mean_temp_c" not in aside and len(aside) == 2
    assert aside & {"day_temp_c", "night_temp_c"}
    # Fact: the same column space gives the same fitted values.
    np.testing.assert_allclose(pinned.model.predict(greenhouse.X), base.model.predict(greenhouse.X),
                               rtol=1e-10)
    assert pinned.r_squared == pytest.approx(base.r_squared, rel=1e-12)
    for sa in pinned.set_aside:
        x, fit = reproduce(greenhouse, sa)
        assert np.max(np.abs(x - fit)) < 1e3 * EPS * np.max(np.abs(x))
    both = fit_ols(greenhouse, pins=("mean_temp_c", "day_temp_f"))
    assert {"mean_temp_c", "day_temp_f"} <= set(both.kept)
    assert both.rank == base.rank


def test_dependent_pins_are_refused_by_name(greenhouse):
    with pytest.raises(ModelError, match=r"day_temp_c.*day_temp_f.*unpin"):
        fit_ols(greenhouse, pins=("day_temp_c", "day_temp_f"))
    with pytest.raises(ModelError, match="mean_temp_c"):
        fit_ols(greenhouse, pins=("day_temp_c", "night_temp_c", "mean_temp_c"))
    with pytest.raises(ModelError, match="'no_such' is not a design column"):
        fit_ols(greenhouse, pins=("no_such",))


# -- tolerance, almost-exact and degenerate cases -------------------------------------------


def near_alias(seed=8, noise=1e-6):
    rng = np.random.default_rng(seed)
    n = 50
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    x3 = 2.0 * x1 - x2 + noise * rng.normal(size=n)
    y = 1.0 + x1 + x2 + rng.normal(0, 0.1, n)
    return design_from_arrays(np.column_stack([x1, x2, x3]), y, columns=("a", "b", "c"))


def test_near_exact_dependency_kept_by_default_set_aside_as_almost_with_larger_tolerance():
    d = near_alias()
    assert fit_ols(d).set_aside == ()  # default tolerance only removes round-off dependencies
    r = fit_ols(d, rank_tol=1e-4)
    assert r.rank_tol == 1e-4 and r.kept == ("a", "b")
    (sa,) = r.set_aside
    assert not sa.exact
    # Fact: residual of c on a, b is the added noise (~1e-6 of c's spread ~2.2).
    assert 1e-7 < sa.relative_residual < 1e-5
    x, fit = reproduce(d, sa)
    w = d.weights / d.weights.sum()
    assert sa.residual == pytest.approx(np.sqrt(w @ (x - fit) ** 2), rel=1e-9)
    text = set_aside_sentence(sa)
    assert "almost equals" in text and "2 × a − b" in text and "% of its spread" in text
    assert "almost the same predictions" in text


def test_constant_column_is_set_aside_as_the_intercept():
    rng = np.random.default_rng(9)
    X = np.column_stack([rng.normal(size=30), np.full(30, 4.5)])
    d = design_from_arrays(X, rng.normal(size=30), columns=("x", "k"))
    r = fit_ols(d)
    (sa,) = r.set_aside
    assert sa.column == "k" and sa.combination == {} and sa.intercept == 4.5
    assert "constant (4.5)" in set_aside_sentence(sa)
    with pytest.raises(ModelError, match="pinned column 'k' is constant"):
        fit_ols(d, pins=("k",))


def test_default_tolerance_is_stated_value():
    d = random_design(10)
    # The docstring's rule: 100 · max(n, p) · eps.
    assert fit_ols(d).rank_tol == 100 * max(d.n, d.p) * EPS == default_rank_tol(d.n, d.p)


def test_bad_values_are_named():
    d = random_design(11)
    X = d.X.copy()
    X[4, 2] = np.nan
    with pytest.raises(ModelError, match=r"row 5: column 'x3'"):
        fit_ols(design_from_arrays(X, d.y))
    w = d.weights.copy()
    w[2] = -1
    with pytest.raises(ModelError, match="row 3: weight"):
        fit_ols(design_from_arrays(d.X, d.y, weights=w))
    with pytest.raises(ModelError, match="rank tolerance"):
        fit_ols(d, rank_tol=-1.0)


def test_shifted_alias_with_large_offset_is_exact():
    rng = np.random.default_rng(12)
    c = np.round(20 + 0.05 * rng.normal(size=40), 3)  # spread far smaller than size
    k = c + 273.15
    year = 1990.0 + np.arange(40)
    X = np.column_stack([c, year, k, 2.0 * year + 5.0])
    d = design_from_arrays(X, rng.normal(size=40), columns=("temp_c", "year", "temp_k", "code"))
    r = fit_ols(d)
    # Facts of the construction: temp_k = temp_c + 273.15 and code = 2 year + 5, up to float round-off.
    assert [sa.column for sa in r.set_aside] == ["temp_k", "code"]
    k_sa, code_sa = r.set_aside
    assert k_sa.combination == pytest.approx({"temp_c": 1.0}, rel=1e-9) and k_sa.exact
    assert k_sa.intercept == pytest.approx(273.15, rel=1e-12)
    assert code_sa.combination == pytest.approx({"year": 2.0}, rel=1e-12) and code_sa.exact
    assert set_aside_sentence(k_sa).startswith("temp_k was set aside: it equals 273.15 + temp_c exactly")


def test_offset_does_not_make_a_column_almost_constant():
    rng = np.random.default_rng(13)
    X = np.column_stack([rng.normal(size=30), 100.0 + 1e-3 * rng.normal(size=30)])
    d = design_from_arrays(X, rng.normal(size=30), columns=("x", "level"))
    # Rank decisions are made on centered columns at unit SD: a column with a large offset
    # and a small spread is as usable as any other, even under a generous tolerance.
    assert fit_ols(d, rank_tol=1e-3).set_aside == ()
    assert fit_ols(d, pins=("level",)).kept == ("x", "level")
    # Its coefficient is that of statsmodels OLS (reference library).
    ref = sm_wls(X, d.y, np.ones(30))
    np.testing.assert_allclose(fit_ols(d).coef, ref.params[1:], rtol=1e-9)


def test_constant_pin_is_refused_by_name():
    rng = np.random.default_rng(13)
    X = np.column_stack([rng.normal(size=30), np.full(30, 100.0)])
    X[3, 1] = np.nextafter(100.0, 200.0)  # one ulp of spread: round-off, not information
    d = design_from_arrays(X, rng.normal(size=30), columns=("x", "level"))
    with pytest.raises(ModelError, match="pinned column 'level' is constant"):
        fit_ols(d, pins=("level",))
    (sa,) = fit_ols(d).set_aside
    assert sa.column == "level" and sa.exact and sa.combination == {}
    assert "constant" in set_aside_sentence(sa)


# -- the blocked pass over the rows -----------------------------------------------------------


def test_tiny_blocks_keep_nist_accuracy():
    import statsmodels.api as sm

    data = sm.datasets.longley.load_pandas()
    cols = tuple(data.exog.columns)
    design = design_from_arrays(data.exog.to_numpy(), data.endog.to_numpy(), columns=cols)
    # Blocks of 1, 3 and 5 rows: fewer rows per block than the 6 columns (+ intercept, target).
    for chunk in (1, 3, 5):
        r = fit_ols(design, chunk_rows=chunk)
        # NIST StRD Longley certified values (from memory, as in REFERENCES.md).
        assert rel_err(r.coef, [15.0618722713733, -0.0358191792925910, -2.02022980381683,
                                -1.03322686717359, -0.0511041056535807, 1829.15146461355]) < 1e-9
        assert rel_err(r.std_errors, [84.9149257747669, 0.0334910077722432, 0.488399681651699,
                                      0.214274163161675, 0.226073200069370, 455.478499142212]) < 1e-9
        assert rel_err(r.intercept, -3482258.63459582) < 1e-9
        assert rel_err(r.residual_sd, 304.854073561965) < 1e-9
        assert r.kept == cols and r.rank == 6
    # NIST Wampler1 defining formula (from memory, REFERENCES.md): y = 1 + x + ... + x^5.
    r = fit_ols(wampler((1, 1, 1, 1, 1, 1)), chunk_rows=4)
    assert rel_err(r.coef, np.ones(5)) < 1e-6 and r.rank == 5


def assert_same_fit(a, b, rel=1e-12):
    """Two OLS results agree to ``rel`` relative (round-off of a different blocking)."""
    assert a.kept == b.kept and a.rank == b.rank and a.n_obs == b.n_obs
    # Standardized coefficients (coef × SD) to ``rel`` of the largest: a small coefficient of
    # an overlapping column moves more, relative to itself, with any change of round-off.
    big = np.abs(b.model.coef_std).max()
    np.testing.assert_allclose(a.model.coef_std, b.model.coef_std, rtol=0, atol=rel * big)
    np.testing.assert_allclose(a.coef, b.coef, rtol=1e-10, atol=0)
    np.testing.assert_allclose(a.std_errors, b.std_errors, rtol=rel, atol=0)
    np.testing.assert_allclose(a.p_values, b.p_values, rtol=1e-9, atol=1e-300)
    # The intercept is ȳ − m·b, a difference of larger terms: round-off relative to those.
    assert a.intercept == pytest.approx(b.intercept, abs=rel * (abs(b.intercept) + np.abs(b.coef) @ np.abs(
        b.r_factor[0, 1:-1]) + abs(b.r_factor[0, -1])))
    assert a.intercept_se == pytest.approx(b.intercept_se, rel=rel)
    assert a.residual_sd == pytest.approx(b.residual_sd, rel=rel)
    assert a.r_squared == pytest.approx(b.r_squared, rel=rel)
    assert [s.column for s in a.set_aside] == [s.column for s in b.set_aside]
    for sa, sb in zip(a.set_aside, b.set_aside):
        assert sa.exact == sb.exact and tuple(sa.combination) == tuple(sb.combination)
        assert sa.combination == pytest.approx(sb.combination, rel=1e-10)
        assert sa.intercept == pytest.approx(sb.intercept, rel=1e-10, abs=1e-12)
        if not sa.exact:
            assert sa.residual == pytest.approx(sb.residual, rel=1e-9)
    # The factor is unique up to the signs of its rows: compare R'R.
    Fa, Fb = a.r_factor, b.r_factor
    np.testing.assert_allclose(Fa.T @ Fa, Fb.T @ Fb, rtol=0, atol=rel * np.abs(Fb.T @ Fb).max())


@pytest.mark.parametrize("chunk", [1, 2, 7, 33])
def test_blocks_of_any_size_give_the_one_block_result(greenhouse, chunk):
    # Weights, weight-0 rows with wild values (so the blocks' kept rows are uneven) and an alias.
    d = random_design(21, n=150, alias=True)
    w = d.weights.copy()
    w[[0, 1, 2, 40, 41, 97, 149]] = 0.0
    X = d.X.copy()
    X[w == 0, 3] = np.nan  # rows of weight 0 are not used, so they may hold anything
    d = design_from_arrays(X, d.y, weights=w)
    for design in (d, greenhouse):
        one = fit_ols(design, chunk_rows=design.n)
        many = fit_ols(design, chunk_rows=chunk)
        assert_same_fit(many, one)
    # The single block is the previous route: compare with statsmodels WLS on the kept columns.
    keep = w > 0
    kept = [d.index(c) for c in fit_ols(d).kept]
    ref = sm_wls(d.X[keep][:, kept], d.y[keep], w[keep])
    np.testing.assert_allclose(fit_ols(d, chunk_rows=chunk).coef[kept], ref.params[1:], rtol=1e-9)


def test_pins_and_tolerance_work_the_same_in_blocks(greenhouse):
    pins = tuple(greenhouse.columns[-2:])
    assert_same_fit(fit_ols(greenhouse, pins=pins, chunk_rows=5),
                    fit_ols(greenhouse, pins=pins, chunk_rows=greenhouse.n))
    d = near_alias()
    assert_same_fit(fit_ols(d, rank_tol=1e-4, chunk_rows=3), fit_ols(d, rank_tol=1e-4, chunk_rows=d.n))


def test_r_factor_is_the_factor_of_the_weighted_rows():
    d = random_design(22, n=60, alias=True)
    w = d.weights.copy()
    w[::9] = 0.0
    d = design_from_arrays(d.X, d.y, weights=w)
    r = fit_ols(d, chunk_rows=7)
    F = r.r_factor
    p = d.p
    assert F.shape == (p + 2, p + 2) and np.all(np.tril(F, -1) == 0.0)
    # Fact: R'R is the weighted cross-product of [1, x, y] divided by W (numpy, directly).
    Z = np.column_stack([np.ones(d.n), d.X, d.y])
    G = (Z * (w / w.sum())[:, None]).T @ Z
    np.testing.assert_allclose(F.T @ F, G, rtol=0, atol=1e-12 * np.abs(G).max())
    np.testing.assert_allclose(F[0, 1:p + 1], np.average(d.X, axis=0, weights=w), rtol=1e-13)
    assert F[0, p + 1] == pytest.approx(np.average(d.y, weights=w), rel=1e-13)


def test_bad_value_in_a_later_block_is_named():
    d = random_design(23)
    X = d.X.copy()
    X[61, 1] = np.inf
    X[70, 0] = np.nan
    with pytest.raises(ModelError, match=r"row 62: column 'x2'"):
        fit_ols(design_from_arrays(X, d.y), chunk_rows=8)

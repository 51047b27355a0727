"""The stress test: damage kinds, closed-form checks, bit-for-bit zero shift, ranking and refit."""

from __future__ import annotations

import math

import numpy as np
import pytest

from regbench.analysis.stress import (
    StressConfig,
    damage_block,
    rank_columns,
    resolve_column,
    run_stress,
    stress_refit,
    stress_sweep,
)
from regbench.data import Roles, build_design, design_from_arrays, table_from_frame
from regbench.errors import Cancelled, DataError
from regbench.models.results import FitSettings, LinearModel


def lm(name, intercept, coef, columns):
    coef = np.asarray(coef, dtype=float)
    return LinearModel(name=name, columns=tuple(columns), intercept=float(intercept), coef=coef, coef_std=coef.copy())


def wmean(v, w):
    return np.average(v, weights=w)


def wsd(v, w):
    # numpy's weighted covariance with bias=True is the weighted population variance.
    return math.sqrt(np.cov(v, aweights=w, bias=True))


@pytest.fixture
def small():
    rng = np.random.default_rng(11)
    n = 600
    X = rng.normal([5.0, -2.0, 100.0], [1.0, 3.0, 20.0], size=(n, 3))
    y = 2.0 + X @ [0.7, -0.2, 0.01] + rng.normal(0, 0.4, n)
    w = rng.uniform(0.5, 2.0, n)
    cols = ("a", "b", "c")
    d = design_from_arrays(X, y, cols, weights=w, target="out")
    models = {
        "ols": lm("ols", 2.0, [0.7, -0.2, 0.01], cols),
        "lasso": lm("lasso", 2.3, [0.65, 0.0, 0.008], cols),  # does not use b
        "ridge": lm("ridge", 1.9, [0.69, -0.19, 0.011], cols),
    }
    return d, models


# -- bit-for-bit: a model that does not use the column cannot move -------------------------


@pytest.mark.parametrize("kind,fill,strength", [
    ("constant", float("nan"), None), ("constant", float("inf"), None), ("missing", float("nan"), 0.5),
    ("missing", -float("inf"), 1.0), ("wild", None, 0.3), ("shuffle", None, None), ("rescale", 1e300, 1e300),
])
def test_unused_column_gives_exactly_zero_shift(small, kind, fill, strength):
    d, models = small
    res = run_stress(d, models, StressConfig("b", kind, strength=strength, fill=fill))
    # Mathematical fact: lasso's prediction does not involve b, so it is unchanged bit for bit.
    assert np.array_equal(res.row_shift["lasso"], np.zeros(d.n))
    assert res.shifts["lasso"].shift_rmse == 0.0 and res.shifts["lasso"].mean_shift == 0.0
    assert res.shifts["lasso"].moved_share == 0.0
    assert res.shifts["lasso"].error_damaged == res.shifts["lasso"].error_clean
    assert not res.shifts["lasso"].uses_column
    assert "lasso does not use b and does not move at all" in res.sentences[0]
    if fill is not None and not np.isfinite(fill):
        # The models that use b get non-finite predictions; they count as moved.
        assert not np.isfinite(res.shifts["ols"].shift_rmse)
        assert res.shifts["ols"].moved_share > 0


def test_nan_in_unused_column_of_the_rows_themselves(small):
    d, models = small
    X = d.X.copy()
    X[:, 1] = np.nan
    # LinearModel.predict multiplies used columns only (its documented contract).
    assert np.array_equal(models["lasso"].predict(X), models["lasso"].predict(d.X))


# -- closed forms -------------------------------------------------------------------------


@pytest.mark.parametrize("share", [1.0, 0.4])
def test_shuffle_shift_matches_closed_form(share):
    # For a linear model, shift_i = c (x_π(i) − x_i).  Over a uniformly random
    # permutation E[(x_π(i) − x_i)²] = 2 Var(x) (exact), and only a share of the
    # rows is permuted: E[shift MSE] = 2 c² Var_w(x) · share when the weights do
    # not depend on x.  (x_π − x)² has relative SD about √2, so with m permuted rows
    # the relative sampling error is about 1.4/√m; allow 5 of those.
    rng = np.random.default_rng(5)
    n = 200_000
    x = rng.normal(3.0, 2.0, n)
    z = rng.normal(size=n)
    w = rng.uniform(0.5, 1.5, n)
    d = design_from_arrays(np.column_stack([x, z]), x + z, ("x", "z"), weights=w)
    c = 0.8
    m = lm("ols", 0.5, [c, 1.0], ("x", "z"))
    res = run_stress(d, {"ols": m}, StressConfig("x", "shuffle", strength=share, seed=3))
    expected = 2 * c**2 * wsd(x, w) ** 2 * share
    rel = 5 * 1.4 / math.sqrt(share * n)
    assert res.shifts["ols"].shift_rmse**2 == pytest.approx(expected, rel=rel)
    # A permutation of the same values: the weighted mean shift is near 0 (within sampling error).
    assert abs(res.shifts["ols"].mean_shift) < 5 * c * wsd(x, w) * math.sqrt(2 * share / n) + 1e-12


def test_noise_and_rescale_closed_forms(small):
    d, models = small
    w = d.weights
    res = run_stress(d, models, StressConfig("a", "noise", strength=2.0, seed=1))
    # shift = c_a · 2 · SD_w(a) · ε with ε standard normal: RMS ≈ |c_a| · 2 · SD_w(a).
    assert res.shifts["ols"].shift_rmse == pytest.approx(0.7 * 2 * wsd(d.X[:, 0], w), rel=0.15)
    res = run_stress(d, models, StressConfig("a", "rescale", strength=1.8, fill=32.0))
    # Exact: shift = c_a · (0.8 a + 32).
    expect = 0.7 * (0.8 * d.X[:, 0] + 32.0)
    np.testing.assert_allclose(res.row_shift["ols"], expect, rtol=1e-12)
    assert res.shifts["ols"].mean_shift == pytest.approx(wmean(expect, w), rel=1e-12)


def test_kinds_damage_as_documented(small):
    d, _ = small
    w = d.weights
    idx = resolve_column(d, "c")
    x = d.X[:, 2]
    const = damage_block(d, idx, StressConfig("c", "constant"))[:, 0]
    assert np.all(const == pytest.approx(wmean(x, w), rel=1e-12))
    assert np.all(damage_block(d, idx, StressConfig("c", "constant", fill=7.0))[:, 0] == 7.0)
    wild = damage_block(d, idx, StressConfig("c", "wild", strength=0.1, seed=2))[:, 0]
    changed = wild != x
    assert changed.sum() == round(0.1 * d.n)
    np.testing.assert_allclose(np.abs(wild[changed] - wmean(x, w)), 10 * wsd(x, w), rtol=1e-10)
    miss = damage_block(d, idx, StressConfig("c", "missing", strength=0.25, seed=2))[:, 0]
    assert (miss != x).sum() == round(0.25 * d.n)
    shuf = damage_block(d, idx, StressConfig("c", "shuffle", seed=2))[:, 0]
    assert sorted(shuf) == sorted(x) and not np.array_equal(shuf, x)
    # The design itself is untouched.
    assert np.array_equal(d.X[:, 2], x)


def test_same_seed_same_damage_different_seed_different(small):
    d, models = small
    a = run_stress(d, models, StressConfig("a", "shuffle", seed=4))
    b = run_stress(d, models, StressConfig("a", "shuffle", seed=4))
    c = run_stress(d, models, StressConfig("a", "shuffle", seed=5))
    assert np.array_equal(a.row_shift["ols"], b.row_shift["ols"])
    assert not np.array_equal(a.row_shift["ols"], c.row_shift["ols"])


def test_statistics_match_direct_numpy(small):
    d, models = small
    res = run_stress(d, models, StressConfig("a", "noise", strength=0.5, seed=9))
    w = d.weights
    tol = 0.1 * wsd(d.y, w)
    assert res.tolerance == pytest.approx(tol, rel=1e-12)
    from regbench.analysis.stress import damaged_design

    Xd = damaged_design(d, StressConfig("a", "noise", strength=0.5, seed=9)).X
    for k, m in models.items():
        clean = d.X @ m.coef + m.intercept
        dam = Xd @ m.coef + m.intercept
        s = res.shifts[k]
        assert s.shift_rmse == pytest.approx(math.sqrt(np.average((dam - clean) ** 2, weights=w)), rel=1e-9)
        assert s.moved_share == pytest.approx(w[np.abs(dam - clean) > tol].sum() / w.sum(), abs=1e-12)
        assert s.error_clean == pytest.approx(math.sqrt(np.average((clean - d.y) ** 2, weights=w)), rel=1e-9)
        assert s.error_damaged == pytest.approx(math.sqrt(np.average((dam - d.y) ** 2, weights=w)), rel=1e-9)


# -- categorical blocks and names ---------------------------------------------------------


@pytest.fixture
def with_category():
    import pandas as pd

    rng = np.random.default_rng(2)
    n = 120
    frame = pd.DataFrame({
        "kind": rng.choice(["red", "blue", "green"], n),
        "x": rng.normal(size=n),
    })
    frame["y"] = frame["x"] + (frame["kind"] == "red") * 1.0 + rng.normal(0, 0.1, n)
    d = build_design(table_from_frame(frame), Roles(target="y"))
    cols = d.columns
    assert cols == ("kind=green", "kind=red", "x")
    return d, {"ols": lm("ols", 0.0, [0.1, 1.0, 1.0], cols), "lasso": lm("lasso", 0.0, [0.0, 0.9, 1.0], cols)}


def test_categorical_by_table_name_damages_all_levels_jointly(with_category):
    d, models = with_category
    idx = resolve_column(d, "kind")
    assert list(idx) == [0, 1]
    block = damage_block(d, idx, StressConfig("kind", "shuffle", seed=1))
    # Whole rows move: every damaged row is an original row of the block (at most one level set).
    originals = {tuple(r) for r in d.X[:, idx]}
    assert all(tuple(r) in originals for r in block)
    assert block.sum(axis=1).max() <= 1.0
    res = run_stress(d, models, StressConfig("kind", "shuffle", seed=1))
    assert res.columns == ("kind=green", "kind=red")
    # A single coded level is accepted by its design name.
    res1 = run_stress(d, models, StressConfig("kind=green", "shuffle", seed=1))
    assert res1.columns == ("kind=green",)
    assert res1.shifts["lasso"].shift_rmse == 0.0  # lasso does not use kind=green


def test_unknown_column_names_valid_ones(with_category):
    d, models = with_category
    with pytest.raises(DataError, match=r"'colour' is not a predictor.*kind, x.*kind=green"):
        run_stress(d, models, StressConfig("colour", "shuffle"))


def test_config_checks_and_round_trip():
    with pytest.raises(DataError, match="unknown; choose one of: shuffle"):
        StressConfig("x", "melt")
    with pytest.raises(DataError, match="share of rows"):
        StressConfig("x", "wild", strength=1.5).resolved_strength()
    with pytest.raises(DataError, match="'noise'"):
        StressConfig("x", "noise", strength=-1).resolved_strength()
    with pytest.raises(DataError, match="tolerance"):
        StressConfig("x", "noise", tolerance=-0.1)
    assert StressConfig("x", "rescale").resolved_strength() == 1.8
    assert StressConfig("x", "wild").resolved_strength() == 0.05
    for cfg in (StressConfig("x", "missing", 0.3, 4, 0.2, float("nan")), StressConfig("v", "constant", fill=2.5),
                StressConfig("v", "shuffle")):
        import json

        back = StressConfig.from_dict(json.loads(json.dumps(cfg.to_dict(), allow_nan=False)))
        assert back.to_dict() == cfg.to_dict()
    with pytest.raises(DataError, match="'strength'"):
        StressConfig.from_dict({"column": "x", "kind": "noise", "strength": "lots"})


# -- sweep and ranking --------------------------------------------------------------------


def test_sweep_matches_single_runs(small):
    d, models = small
    sw = stress_sweep(d, models, "a", "noise", strengths=[0.0, 0.5, 2.0], seed=3)
    assert sw.shift_rmse["ols"][0] == 0.0
    for i, s in enumerate([0.0, 0.5, 2.0]):
        one = run_stress(d, models, StressConfig("a", "noise", strength=s, seed=3))
        for k in models:
            assert sw.shift_rmse[k][i] == pytest.approx(one.shifts[k].shift_rmse, rel=1e-9, abs=1e-15)
            assert sw.error_damaged[k][i] == pytest.approx(one.shifts[k].error_damaged, rel=1e-9)
    with pytest.raises(DataError, match="constant"):
        stress_sweep(d, models, "a", "constant")


def test_ranking_matches_single_runs_with_progress_and_cancel(small, with_category):
    d, models = small
    calls = []
    rk = rank_columns(d, models, "shuffle", seed=2, progress=lambda *a: calls.append(a))
    assert rk.columns == ("a", "b", "c")
    assert calls[-1][:2] == (3, 3) and len(calls) == 4
    for j, col in enumerate(rk.columns):
        one = run_stress(d, models, StressConfig(col, "shuffle", seed=2))
        for i, k in enumerate(rk.models):
            assert rk.shift_rmse[i, j] == pytest.approx(one.shifts[k].shift_rmse, rel=1e-9, abs=0)
    assert rk.shift_rmse[rk.models.index("lasso"), 1] == 0.0
    assert rk.order["lasso"][-1] == "b"
    # Column a (c = 0.7, SD 1) moves OLS far more than c (c = 0.01, SD 20) or b.
    assert rk.order["ols"][0] == "a"
    dc, mc = with_category
    assert rank_columns(dc, mc).columns == ("kind", "x")
    seen = []

    def cancel():
        seen.append(1)
        return len(seen) > 1

    with pytest.raises(Cancelled):
        rank_columns(d, models, cancel=cancel)


# -- retraining on damaged data (real engine) ---------------------------------------------


def test_refit_on_rescaled_column_matches_ols_equivariance():
    pytest.importorskip("regbench.models.engine")
    rng = np.random.default_rng(8)
    n = 300
    X = rng.normal(size=(n, 2))
    y = 1.0 + X @ [2.0, -1.0] + rng.normal(0, 0.2, n)
    d = design_from_arrays(X, y, ("u", "v"))
    settings = FitSettings(alpha=0.01)
    res = stress_refit(d, settings, {}, StressConfig("u", "rescale", strength=2.0))
    # OLS is equivariant to rescaling a column (mathematical fact): trained on 2u it
    # learns c/2 and the same intercept, so on clean rows it predicts c/2·u instead of c·u.
    from regbench.models.engine import fit_models_at

    c = fit_models_at(d, settings, {})["ols"].coef[0]
    np.testing.assert_allclose(res.row_shift["ols"], (c / 2 - c) * X[:, 0], rtol=1e-8, atol=1e-10)
    assert res.refit and "retrained" in res.sentences[0]
    # No damage at all (share 0): the refit is the clean fit, bit for bit.
    same = stress_refit(d, settings, {}, StressConfig("u", "shuffle", strength=0.0))
    assert all(np.array_equal(v, np.zeros(n)) for v in same.row_shift.values())


def _round_trip(obj):
    import io
    import json

    from regbench.project.codec import Decoder, Encoder

    enc = Encoder()
    tree = json.loads(json.dumps(enc.encode(obj), allow_nan=False))
    arrays = {name: np.load(io.BytesIO(b), allow_pickle=False) for name, b in enc.arrays}
    return Decoder(arrays).decode(tree)


def test_results_survive_the_project_codec(small):
    pytest.importorskip("regbench.project.codec")
    d, models = small
    res = run_stress(d, models, StressConfig("b", "missing", strength=0.5, fill=float("nan")))
    back = _round_trip(res)
    assert back.config.to_dict() == res.config.to_dict() and back.sentences == res.sentences
    assert np.array_equal(back.row_shift["lasso"], res.row_shift["lasso"])
    assert np.isnan(back.shifts["ols"].shift_rmse) and back.shifts["lasso"].shift_rmse == 0.0
    rk = _round_trip(rank_columns(d, models))
    np.testing.assert_array_equal(rk.shift_rmse, rank_columns(d, models).shift_rmse)
    sw = _round_trip(stress_sweep(d, models, "a", "shuffle"))
    assert sw.strengths.tolist() == list(np.linspace(0, 1, 11))


@pytest.mark.parametrize("kind,strength", [
    ("shuffle", None), ("shuffle", 0.4), ("noise", 0.7), ("constant", None), ("rescale", 1.8), ("wild", 0.1),
    ("missing", 0.3),
])
def test_closed_form_ranking_equals_damaging_each_column_in_turn(small, kind, strength):
    # Source: run_stress, which damages one column and predicts every row again.
    d, models = small
    rk = rank_columns(d, models, kind, strength=strength, seed=5)
    for j, col in enumerate(rk.columns):
        one = run_stress(d, models, StressConfig(col, kind, strength=strength, seed=5))
        for i, k in enumerate(rk.models):
            assert rk.shift_rmse[i, j] == pytest.approx(one.shifts[k].shift_rmse, rel=1e-10, abs=1e-300)
            assert rk.error_damaged[i, j] == pytest.approx(one.shifts[k].error_damaged, rel=1e-10)


def test_closed_form_ranking_leaves_overflow_to_the_column_route(small):
    # An extreme rescale overflows to inf: the column-by-column route reports it as it always has.
    d, models = small
    rk = rank_columns(d, models, "rescale", strength=1e308, seed=0)
    one = run_stress(d, models, StressConfig("a", "rescale", strength=1e308))
    assert rk.shift_rmse[rk.models.index("ols"), 0] == one.shifts["ols"].shift_rmse == math.inf


# -- the closed-form ranking against the rows themselves ----------------------------------


@pytest.mark.parametrize("layout", ["rows", "columns"])
@pytest.mark.parametrize("kind,strength,fill", [
    ("shuffle", None, None), ("shuffle", 0.3, None), ("noise", 0.7, None), ("constant", None, None),
    ("constant", None, 2.5), ("rescale", 1.8, None), ("rescale", 0.5, -1.0), ("wild", 0.1, None),
    ("missing", 0.3, None), ("missing", 1.0, None),
])
def test_closed_form_ranking_on_either_memory_layout(small, layout, kind, strength, fill):
    # Source: run_stress, which damages one column and predicts every row again; the design
    # stored row by row or column by column (a table's float block) takes different routes.
    d, models = small
    from dataclasses import replace

    X = np.ascontiguousarray(d.X) if layout == "rows" else np.asfortranarray(d.X)
    d = replace(d, X=X)
    rk = rank_columns(d, models, kind, strength=strength, seed=7) if fill is None else None
    if fill is not None:
        # rank_columns has no fill; the pass it runs does.
        from regbench.analysis.stress import _difference_sums

        cfg = StressConfig("a", kind, strength, seed=7, fill=fill)
        resid = np.column_stack([m.predict(d.X) - d.y for m in models.values()])
        dd, _ = _difference_sums(d.X, d.weights, np.arange(3), cfg, d.weights[:, None] * resid)
        for j, col in enumerate(("a", "b", "c")):
            one = run_stress(d, models, StressConfig(col, kind, strength, seed=7, fill=fill))
            b = models["ols"].coef[j]
            assert abs(b) * math.sqrt(dd[j] / d.weights.sum()) == pytest.approx(one.shifts["ols"].shift_rmse, rel=1e-12)
        return
    for j, col in enumerate(rk.columns):
        one = run_stress(d, models, StressConfig(col, kind, strength=strength, seed=7))
        for i, k in enumerate(rk.models):
            assert rk.shift_rmse[i, j] == pytest.approx(one.shifts[k].shift_rmse, rel=1e-12, abs=1e-300)
            assert rk.error_damaged[i, j] == pytest.approx(one.shifts[k].error_damaged, rel=1e-12)
        assert rk.error_clean[k] == pytest.approx(one.shifts[k].error_clean, rel=1e-13)


@pytest.mark.parametrize("layout", ["rows", "columns"])
def test_shuffle_ranking_equals_a_plain_permutation(small, layout):
    # Source: numpy alone. A full shuffle with seed s is the permutation default_rng(s).permutation(n)
    # of the rows (the module's convention); predict with the damaged column and take the weighted
    # RMS of the change and the weighted RMSE against the target.
    d, models = small
    from dataclasses import replace

    d = replace(d, X=np.ascontiguousarray(d.X) if layout == "rows" else np.asfortranarray(d.X))
    rk = rank_columns(d, models, "shuffle", seed=4)
    X, y, w = np.array(d.X), d.y, d.weights
    perm = np.random.default_rng(4).permutation(d.n)
    for j in range(3):
        Xd = X.copy()
        Xd[:, j] = X[perm, j]
        for i, k in enumerate(rk.models):
            m = models[k]
            clean = m.intercept + X @ m.coef
            moved = m.intercept + Xd @ m.coef
            shift = math.sqrt(np.sum(w * (moved - clean) ** 2) / w.sum())
            error = math.sqrt(np.sum(w * (moved - y) ** 2) / w.sum())
            if m.coef[j] == 0.0:
                # Unused column: no move at all (the full product above rounds differently, about 1e-16).
                assert rk.shift_rmse[i, j] == 0.0 and shift < 1e-14
                continue
            assert rk.shift_rmse[i, j] == pytest.approx(shift, rel=1e-12)
            assert rk.error_damaged[i, j] == pytest.approx(error, rel=1e-12)


def test_ranking_of_probabilities_follows_the_logistic_curve(small):
    # A yes/no outcome: damage moves the log-odds linearly and the probability through the logistic
    # curve, so the ranking must agree with run_stress (which predicts every damaged row again), not
    # with a linear closed form.
    d, _ = small
    from dataclasses import replace

    rng = np.random.default_rng(3)
    d = replace(d, y=(rng.uniform(size=d.n) < 0.4).astype(float), outcome="binary", levels=("0", "1"))
    cols = d.columns
    models = {"lasso": replace(lm("lasso", -8.0, [1.2, 0.0, 0.03], cols), outcome="binary"),
              "ridge": replace(lm("ridge", -7.5, [1.0, -0.1, 0.03], cols), outcome="binary")}
    rk = rank_columns(d, models, "shuffle", seed=1)
    for j, col in enumerate(rk.columns):
        one = run_stress(d, models, StressConfig(col, "shuffle", seed=1))
        for i, k in enumerate(rk.models):
            assert rk.shift_rmse[i, j] == pytest.approx(one.shifts[k].shift_rmse, rel=1e-12, abs=1e-300)
            assert rk.error_damaged[i, j] == pytest.approx(one.shifts[k].error_damaged, rel=1e-12)


def test_ranking_reads_a_model_on_every_level_in_the_designs_coding():
    # A penalized model on every level of a two-level category carries the reference level as an extra
    # column; damaging the one design column moves its predictions by (b_level - b_reference) · D.
    import pandas as pd

    rng = np.random.default_rng(5)
    n = 200
    frame = pd.DataFrame({"shade": rng.choice(["low", "high"], n), "x": rng.normal(size=n)})
    frame["y"] = frame["x"] + (frame["shade"] == "low") * 2.0 + rng.normal(0, 0.1, n)
    d = build_design(table_from_frame(frame), Roles(target="y"))
    assert d.columns == ("shade=low", "x")
    m = LinearModel(name="ridge", columns=("shade=low", "x", "shade=high"), intercept=0.5,
                    coef=np.array([1.5, 0.9, -0.4]), coef_std=np.array([1.5, 0.9, -0.4]),
                    reference_levels=(("shade=high", ("shade=low",)),))
    rk = rank_columns(d, {"ridge": m}, "shuffle", seed=3)
    one = run_stress(d, {"ridge": m}, StressConfig("shade", "shuffle", seed=3))
    assert rk.shift_rmse[0, 0] == pytest.approx(one.shifts["ridge"].shift_rmse, rel=1e-12)
    assert rk.shift_rmse[0, 0] > 0


def test_predictions_a_block_of_rows_at_a_time_match_one_product(small, monkeypatch):
    """Predictions made a few rows at a time equal numpy's product of the used columns in one go
    (reference: numpy), the last block short; an unused column of NaN still moves nothing."""
    from regbench.models import results

    d, models = small
    lasso = models["lasso"]
    used = np.flatnonzero(lasso.coef != 0.0)
    whole = lasso.intercept + d.X[:, used] @ lasso.coef[used]
    monkeypatch.setattr(results, "PREDICT_BLOCK", 7 * used.size)  # 7 rows a block
    np.testing.assert_allclose(lasso.predict(d.X), whole, rtol=1e-14, atol=1e-12)
    X = d.X.copy()
    X[:, 1] = np.nan
    assert np.array_equal(lasso.predict(X), lasso.predict(d.X))

"""Structure: coefficients side by side, sign flips, collinear sets and weight shares."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from regbench.analysis.structure import collinear_groups, compare_structure
from regbench.data import design_from_arrays
from regbench.models.results import FitSettings, LinearModel, NearDependency, SetAside


def lm(name, coef, sd=None):
    coef = np.asarray(coef, dtype=float)
    sd = np.ones_like(coef) if sd is None else np.asarray(sd, float)
    return LinearModel(name=name, columns=(), intercept=0.5, coef=coef, coef_std=coef * sd)


def test_union_find_merges_linked_columns():
    cols = ("a", "b", "c", "d", "e", "f", "g")
    groups = collinear_groups(cols, [("c", "d"), ("a", "b"), ("b", "c"), ("f", "e"), ("g",), ("zz", "g")])
    # Connected components of the link graph (definition); singletons and unknown names drop out.
    assert groups == [("a", "b", "c", "d"), ("e", "f")]
    assert collinear_groups(cols, []) == []


@pytest.fixture
def hand_made():
    rng = np.random.default_rng(1)
    n = 50
    X = rng.normal(size=(n, 5))
    d = design_from_arrays(X, X.sum(axis=1), ("t1", "t2", "tmean", "h", "z"))
    sd = X.std(axis=0)
    models = {
        "ols": lm("ols", [0.4, 0.6, 0.0, -0.2, 1.0], sd),
        "ridge": lm("ridge", [0.3, 0.3, 0.3, 0.1, 0.9], sd),
        "lasso": lm("lasso", [0.0, 0.0, 0.9, 0.0, 1.0], sd),
    }
    sa = SetAside(column="tmean", combination={"t1": 0.5, "t2": 0.5}, intercept=0.0, residual=0.0,
                  alternatives=("t1", "t2"))
    nd = NearDependency(column="h", vif=40.0, explained_by=("t1",), r_squared=0.97, sentence="")
    results = SimpleNamespace(ols=SimpleNamespace(set_aside=(sa,)),
                              diagnostics=SimpleNamespace(near_dependencies=(nd,)))
    return d, models, results


def test_matrices_usage_and_shares_match_direct_computation(hand_made):
    d, models, results = hand_made
    st = compare_structure(d, results, models)
    assert st.models == ("ols", "ridge", "lasso") and st.columns == d.columns
    np.testing.assert_array_equal(st.coef, np.array([m.coef for m in models.values()]))
    np.testing.assert_array_equal(st.coef_std, np.array([m.coef_std for m in models.values()]))
    assert st.used[2].tolist() == [False, False, True, False, True]
    (cs,) = st.collinear_sets
    assert cs.columns == ("t1", "t2", "tmean", "h") and cs.set_aside == ("tmean",)
    for i, m in enumerate(models.values()):
        a = np.abs(m.coef_std[:4])
        np.testing.assert_allclose(cs.shares[i], a / a.sum(), rtol=1e-12)
        assert cs.weight[i] == pytest.approx(a.sum(), rel=1e-12)
    assert cs.shares[0, 2] == 0.0 and cs.shares[2].tolist() == [0.0, 0.0, 1.0, 0.0]
    text = cs.sentence
    assert "OLS sets tmean aside and puts all the weight on t1, t2 and h" in text
    assert "ridge spreads it over all four columns" in text
    assert "lasso keeps only tmean" in text
    # The exact dependency alone (without the near-dependency h) is a set of its own.
    (alias,) = st.alias_sets
    assert alias.columns == ("t1", "t2", "tmean")
    r = np.abs(models["ridge"].coef_std[:3])
    np.testing.assert_allclose(alias.shares[1], r / r.sum(), rtol=1e-12)
    assert alias.sentence.startswith("Within the exact dependency t1, t2 and tmean: OLS sets tmean aside and puts "
                                     "all the weight on t1 and t2")


def test_sign_flips(hand_made):
    d, models, results = hand_made
    st = compare_structure(d, results, models)
    (flip,) = st.sign_flips
    assert flip.column == "h" and flip.positive == ("ridge",) and flip.negative == ("ols",)
    assert any("h is positive in ridge but negative in OLS" in s for s in st.sentences)
    st2 = compare_structure(d, None, {k: models[k] for k in ("ols", "lasso")})
    assert st2.sign_flips == () and st2.collinear_sets == ()
    assert "No column changes sign between the models." in st2.sentences


def test_to_dict_is_json(hand_made):
    import json

    d, models, results = hand_made
    js = json.loads(json.dumps(compare_structure(d, results, models).to_dict(), allow_nan=False))
    assert js["used"]["lasso"] == ["tmean", "z"]
    assert js["collinear_sets"][0]["shares"]["lasso"]["tmean"] == 1.0


def test_with_the_engine_on_an_exact_alias():
    engine = pytest.importorskip("regbench.models.engine")
    rng = np.random.default_rng(4)
    n = 200
    a, b, z = rng.normal(size=(3, n))
    X = np.column_stack([a, b, (a + b) / 2, 1.8 * a + 32, z])
    y = 1 + a + 0.5 * b + 0.3 * z + rng.normal(0, 0.3, n)
    d = design_from_arrays(X, y, ("day", "night", "mean", "day_f", "z"))
    res = engine.fit_all(d, FitSettings(n_penalties=30))
    st = compare_structure(d, res, res.models())
    groups = [cs.columns for cs in st.collinear_sets]
    assert ("day", "night", "mean", "day_f") in groups
    cs = st.collinear_sets[groups.index(("day", "night", "mean", "day_f"))]
    # An exact alias: OLS keeps two of the four and gives the others exactly zero.
    assert set(cs.set_aside) == {c for c, u in zip(d.columns, st.used[0]) if not u}
    assert len(cs.set_aside) == 2
    for i in range(len(st.models)):
        if cs.weight[i] > 0:
            assert cs.shares[i].sum() == pytest.approx(1.0, rel=1e-12)
    # Ridge shrinks but does not select: its closed form gives no exact zeros (almost surely).
    assert cs.shares[st.models.index("ridge")].min() > 0


def test_a_sentence_about_many_overlapping_columns_names_a_few_and_counts_the_rest():
    """A set of 40 overlapping columns: the sentence names the first NAMED and counts the others (the
    tables list every one), so on a wide table it stays one sentence."""
    from regbench.analysis.structure import NAMED, _set_sentence
    from regbench.formatting import join_words

    group = tuple(f"probe_{j:02d}" for j in range(40))
    shares = np.full((2, 40), 1 / 40)
    text = _set_sentence(group, ("ols", "ridge"), shares, (), "Across the overlapping columns")
    assert text.startswith("Across the overlapping columns " + ", ".join(group[:NAMED]) + f" and {40 - NAMED} more:")
    assert "probe_39" not in text
    assert join_words(["a", "b", "c"], most=2) == "a, b and c"   # one name short of the limit: no count
    assert join_words(list("abcde"), most=2) == "a, b and 3 more"

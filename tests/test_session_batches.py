"""A session on a table read in batches (or on a cluster) against the same session in memory.

Source: the in-memory session of this package (read_table, build_design, fit_all and the analyses),
which the other test files check against NIST StRD, statsmodels and scikit-learn. On a small table with
a tiny memory budget every usable row is in the streamed route's sample, so every number — fits,
held-out predictions, agreement, structure, stress, ranges and stability — must equal the in-memory
session's to 1e-9.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from regbench.analysis.stress import StressConfig
from regbench.data import Roles
from regbench.data.reader import read_table
from regbench.errors import DataError
from regbench.models.results import FitSettings
from regbench.models.spec import RowSource
from regbench.session import Session
from test_stream import _frame

TOL = 1e-9
#: Internal factors fixed only up to the signs of their rows (R and -R factor the same cross-products).
SIGN_FREE = {"r_factor"}
#: The solver's certificates (duality gaps of size round-off, iteration counts), not results.
ROUND_OFF = {"convergence"}
#: Figures the streamed route does not compute yet (None there): group-robust standard errors need each
#: group's scores, which the pass does not gather.
NOT_STREAMED = {"cluster_std_errors", "cluster_intercept_se", "n_clusters"}


def _close(a, b, where="") -> None:
    """Numbers equal to TOL (relative, or absolute on the scale of the values), recursively through results."""
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for f in dataclasses.fields(a):
            if f.compare and f.name not in SIGN_FREE | NOT_STREAMED | ROUND_OFF:
                _close(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, dict):
        assert set(a) == set(b), where
        for k in a:
            _close(a[k], b[k], f"{where}[{k}]")
    elif isinstance(a, (list, tuple)) and not isinstance(a, str):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{where}[{i}]")
    elif isinstance(a, np.ndarray) and a.dtype.kind in "fc":
        assert a.shape == b.shape, where
        scale = np.nanmax(np.abs(a[np.isfinite(a)])) if np.isfinite(a).any() else 1.0
        np.testing.assert_allclose(b, a, rtol=TOL, atol=TOL * max(scale, 1e-300), equal_nan=True, err_msg=where)
    elif isinstance(a, np.ndarray):
        np.testing.assert_array_equal(a, b, err_msg=where)
    elif isinstance(a, float) or isinstance(a, np.floating):
        assert (math.isnan(a) and math.isnan(b)) or b == pytest.approx(a, rel=TOL, abs=TOL), where
    elif isinstance(a, str):
        pass  # sentences round their numbers; the numbers themselves are compared
    else:
        assert a == b, where


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The same grouped, weighted table in memory and read in batches under a 1 MB budget."""
    f = _frame(n=1500, seed=1)
    path = tmp_path_factory.mktemp("rows") / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", groups="site")
    settings = FitSettings(folds=4, seed=3)
    out = []
    for session in (Session(read_table(path), roles, settings),
                    Session.from_batches(path, roles, settings, RowSource(memory_budget=10**6))):
        session.add_stress(StressConfig("x0", "rescale", 1.8))
        session.add_stress(StressConfig("x1", "shuffle", None, seed=2))
        session.set_bootstrap(20)
        session.compute()
        out.append(session)
    return path, out[0], out[1]


def test_a_session_read_in_batches_equals_the_session_in_memory(pair):
    _, mem, st = pair
    assert st.source is not None and mem.source is None
    assert st.streamed.route == "streamed" and not st.sampled
    assert st.design.n == mem.design.n and st.table.n_rows == st.design.n
    np.testing.assert_array_equal(st.design.row_numbers, mem.design.row_numbers)
    np.testing.assert_array_equal(st.table.row_numbers, mem.design.row_numbers)  # the file's own row numbers
    _close(mem.results, st.results, "results")
    for key in ("models", "heldout", "agreement", "structure", "stress", "sweeps", "ranges"):
        _close(mem.derived_results()[key], st.derived_results()[key], key)
    _close(mem.fit_quality(), st.fit_quality(), "fit_quality")
    assert st.stability is not None
    _close(mem.stability, st.stability, "stability")
    # Every row is at hand: the one sentence says so and nothing is withheld.
    assert "every one of its 1,495 usable rows" in st.row_sample_note and st.sample_limits() == {}
    assert mem.row_sample_note is None


def test_a_chosen_alpha_on_a_session_read_in_batches_matches_memory(pair):
    _, mem, st = pair
    for s in (mem, st):
        s.apply_alpha_update(s.compute_for_alpha("lasso", 0.05))
    _close(mem.models()["lasso"], st.models()["lasso"], "lasso at 0.05")
    _close(mem.agreement(), st.agreement(), "agreement at 0.05")


def test_a_sampled_session_says_so_and_withholds_what_needs_every_row(tmp_path):
    f = _frame(n=1500, seed=1)
    path = tmp_path / "t.parquet"
    f.to_parquet(path, index=False, row_group_size=400)
    roles = Roles(target="y", weights="w", predictors=tuple(f"x{j}" for j in range(8)))
    settings = FitSettings(folds=4, seed=3)
    from regbench.data.stream import stream_fit

    streamed = stream_fit(path, roles, settings, memory_budget=10**6, sample_rows=300)
    st = Session.from_streamed(path, streamed, roles, settings, RowSource(memory_budget=10**6))
    st.set_bootstrap(20)
    st.compute()
    mem = Session(read_table(path), roles, settings)
    mem.compute(bootstrap=0)
    # Fitted numbers use every row (source: the in-memory fit).
    _close(mem.results.ols, st.results.ols, "ols")
    assert st.sampled and st.design.n == 300 and st.table.n_rows == 300
    note = st.row_sample_note
    assert "all 1,495 usable rows" in note and "sample of 300" in note and "seed 3" in note
    # What needs every row is withheld with one line each, not computed on the sample.
    assert st.heldout() == {} and st.stability is None
    assert set(st.sample_limits()) == {"heldout", "stability"}
    # Row-level views use the sample: the stress figures cover its 300 rows.
    assert st.stress_results() == () and st.agreement() is not None
    # Ranges over near-best models come from the statistics of every row, so they equal memory's.
    _close(mem.ranges().low, st.ranges().low, "ranges.low")


def test_row_settings_are_declared_and_checked():
    # Source: the declaration in models/spec.py (one place for type, range, default and help).
    from regbench.models import spec

    declared = spec.specs(RowSource)
    assert declared["memory_budget"][0].flag == "--memory-budget" and declared["memory_budget"][1] is None
    assert declared["cluster"][0].flag == "--cluster" and declared["cluster"][1] is None
    with pytest.raises(DataError, match="setting 'cluster': 'my-cluster' is not 'local' or a scheduler"):
        RowSource(cluster="my-cluster").check(DataError)
    with pytest.raises(DataError, match="setting 'memory_budget': 10 is out of range"):
        RowSource(memory_budget=10).check(DataError)
    RowSource(memory_budget=5 * 10**8, cluster="tcp://127.0.0.1:8786").check(DataError)
    s = Session(read_table_small(), Roles(target="y"))
    s.set_rows({"memory_budget": 2 * 10**9, "cluster": "local"})
    assert s.rows == RowSource(2 * 10**9, "local") and s.dirty
    s.undo()
    assert s.rows == RowSource() and not s.dirty
    with pytest.raises(DataError, match="cluster"):
        s.set_rows({"cluster": "nowhere"})


def read_table_small():
    import pandas as pd

    from regbench.data.reader import table_from_frame

    rng = np.random.default_rng(0)
    return table_from_frame(pd.DataFrame({"a": rng.normal(size=30), "b": rng.normal(size=30),
                                          "y": rng.normal(size=30)}))

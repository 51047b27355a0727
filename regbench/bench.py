"""``regbench bench``: time regbench against the scripted statsmodels / scikit-learn route.

Both routes run as whole processes (start-up and imports included, as a user
feels them) on the same generated ``sensor_line`` table read from Parquet, with
the same grouped folds and the same α grids:

* regbench: read the table, build the design, ``fit_all`` (OLS with set-aside
  explanations, collinearity diagnostics, ridge, lasso and elastic net over
  the α grid with grouped K-fold CV).
* reference: pandas reads the table, the columns are standardized once,
  statsmodels ``OLS``, scikit-learn ``LassoCV`` and ``ElasticNetCV``
  (``cv`` = the same (train, test) folds, ``alphas`` = the same grid, default
  tolerance) and ``RidgeCV`` with the same folds and the ridge grid mapped to
  scikit-learn's scale (``alpha·n``).  It does not compute diagnostics.

Each worker reports its own peak resident memory (``ru_maxrss``) and its
resident memory right after the table was loaded, so the memory the fit needs
beyond the loaded table can be set against the table's size.

The table is generated once per size under ``benchmarks/data/`` (git-ignored)
or ``$REGBENCH_BENCH_DIR``.
"""

from __future__ import annotations

import functools
import json
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Optional

TARGET = "throughput"
GROUPS = "batch"


def _data_dir() -> Path:
    env = os.environ.get("REGBENCH_BENCH_DIR")
    if env:
        d = Path(env)
    else:
        d = Path(__file__).resolve().parents[1] / "benchmarks" / "data"
    d.mkdir(parents=True, exist_ok=True)
    return d


def _status_bytes(field: str) -> int:
    """A memory figure of this process from /proc/self/status (0 where unavailable)."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _rss_bytes() -> int:
    """Current resident memory."""
    return _status_bytes("VmRSS")


def _peak_rss_bytes() -> int:
    """Peak resident memory since start or since :func:`_reset_peak`.

    Read from VmHWM rather than ``ru_maxrss``, which Linux carries over from
    the parent process across fork and exec.
    """
    return _status_bytes("VmHWM")


def _reset_peak() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
    except OSError:
        pass


def prepare(rows: int, cols: int, folds: int = 5, n_penalties: int = 100, seed: int = 0) -> dict:
    """Write the table, its fold ids and the α grids for one size; return their paths."""
    import numpy as np

    d = _data_dir()
    stem = f"sensor_line_{rows}x{cols}"
    table = d / f"{stem}.parquet"
    if not table.exists():
        from regbench.demo import sensor_line

        frame = sensor_line(rows, cols)
        tmp = table.with_suffix(".parquet.tmp")
        frame.to_parquet(tmp, index=False)
        os.replace(tmp, table)
        del frame
    extras = d / f"{stem}_f{folds}_k{n_penalties}_s{seed}_g2.npz"
    if not extras.exists():
        from regbench.data import Roles, build_design, read_table
        from regbench.models.cv import fold_ids
        from regbench.models.gram import gram_stats
        from regbench.models.penalized import Problem, alpha_grid

        design = build_design(read_table(table), Roles(target=TARGET, groups=GROUPS))
        ids = fold_ids(design.n, folds, seed, design.groups, design.weights, design.groups_column)
        problem = Problem.from_stats(gram_stats(design.X, design.y, design.weights))
        grids = {f"grid_{r:g}": alpha_grid(problem.c, r, n_penalties, 1e-3, evals=problem.evals)
                 for r in (0.0, 1.0, 0.5)}
        tmp = extras.with_name(extras.name + ".tmp.npz")
        np.savez(tmp, fold_ids=ids, **grids)
        os.replace(tmp, extras)
    return {"table": str(table), "extras": str(extras), "rows": rows, "cols": cols, "folds": folds,
            "n_penalties": n_penalties, "seed": seed}


# --------------------------------------------------------------------------- workers

def _worker_regbench(job: dict) -> dict:
    t0 = time.perf_counter()
    from regbench.data import Roles, build_design, read_table
    from regbench.models.engine import fit_all
    from regbench.models.gram import gram_stats
    from regbench.models.results import FitSettings

    # The engine imports these where used; load them now so that their memory is not
    # counted as the fit's (their time is in the whole-process figure either way).  Only
    # what a fit of a numeric target loads: no scikit-learn, no scipy.stats.
    import regbench.models.diagnostics  # noqa: F401
    import regbench.models.ols  # noqa: F401
    import scipy.linalg  # noqa: F401
    import scipy.special  # noqa: F401
    import scipy.sparse  # noqa: F401  (the group-robust standard errors)

    t_import = time.perf_counter()
    table = read_table(job["table"])
    t_read = time.perf_counter()
    design = build_design(table, Roles(target=TARGET, groups=GROUPS))
    del table
    t_design = time.perf_counter()
    peak_load = _peak_rss_bytes()
    rss_loaded = _rss_bytes()
    _reset_peak()
    marks = []
    settings = FitSettings(folds=job["folds"], n_penalties=job["n_penalties"], seed=job["seed"])
    c_fit = time.process_time()
    results = fit_all(design, settings, progress=lambda d, t, m: marks.append((time.perf_counter(), m)))
    t_fit = time.perf_counter()
    fit_cpu = time.process_time() - c_fit
    peak = _peak_rss_bytes()
    out = {"import": t_import - t0, "read": t_read - t_import, "design": t_design - t_read, "fit": t_fit - t_design,
           "steps": {m: tb - ta for (ta, m), (tb, _) in zip(marks, marks[1:])}, "rss_loaded": rss_loaded,
           "peak_rss": peak, "process_peak": max(peak, peak_load), "table_bytes": int(design.X.nbytes + design.y.nbytes),
           "lasso_alpha": results.penalized["lasso"].alpha, "ridge_alpha": results.penalized["ridge"].alpha,
           "enet_alpha": results.penalized["elastic_net"].alpha, "fit_cpu": fit_cpu}
    if not job.get("measures", True):
        # The paired whole comparison: the process does what the scripted route does (and the
        # collinearity diagnostics besides), nothing more.
        return out
    # The floor of the fit (and of the stress ranking): one weighted XᵀWX over the same rows
    # (``gram_stats``: BLAS syrk on √w-scaled blocks), on one BLAS thread as the fit and the window's
    # worker run, the median of three, in wall and CPU time (the cores are shared).
    from regbench.analysis.stress import rank_columns
    from regbench.models.ols import one_blas_thread

    models = results.models()
    with one_blas_thread():
        pass_wall, pass_cpu = _timed(lambda: gram_stats(design.X, design.y, design.weights))
        stress, stress_cpu = _timed(lambda: rank_columns(design, models, kind="shuffle", seed=job["seed"]))
    out.update(stress_all_columns=stress, one_gram_pass=pass_wall, one_gram_pass_cpu=pass_cpu,
               stress_all_columns_cpu=stress_cpu, stress_gram_pass=pass_wall, stress_gram_pass_cpu=pass_cpu)
    return out


def _timed(work, repeats: int = 3):
    """Median wall and CPU seconds of ``work()`` over ``repeats`` runs in this process."""
    wall, cpu = [], []
    for _ in range(repeats):
        t, c = time.perf_counter(), time.process_time()
        work()
        wall.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    return statistics.median(wall), statistics.median(cpu)


def _worker_reference(job: dict) -> dict:
    import warnings

    t0 = time.perf_counter()
    import numpy as np
    import pandas as pd
    import statsmodels.api as sm
    from sklearn.linear_model import ElasticNetCV, LassoCV, RidgeCV

    t_import = time.perf_counter()
    frame = pd.read_parquet(job["table"])
    t_read = time.perf_counter()
    cols = [c for c in frame.columns if c not in (TARGET, GROUPS)]
    X = frame[cols].to_numpy(dtype=float)
    y = frame[TARGET].to_numpy(dtype=float)
    del frame
    peak_load = _peak_rss_bytes()
    rss_loaded = _rss_bytes()
    _reset_peak()
    extras = np.load(job["extras"], allow_pickle=False)
    ids = extras["fold_ids"]
    splits = [(np.flatnonzero(ids != k), np.flatnonzero(ids == k)) for k in range(job["folds"])]
    t1 = time.perf_counter()
    sm.OLS(y, sm.add_constant(X)).fit()
    t_ols = time.perf_counter()
    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    n = Xs.shape[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lasso = LassoCV(alphas=extras["grid_1"], cv=splits).fit(Xs, y)
        t_lasso = time.perf_counter()
        enet = ElasticNetCV(l1_ratio=0.5, alphas=extras["grid_0.5"], cv=splits).fit(Xs, y)
        t_enet = time.perf_counter()
        # RidgeCV minimises Σ(y − Xβ)² + a‖β‖², so a = n·α on the same standardized columns.
        ridge = RidgeCV(alphas=n * extras["grid_0"], cv=splits).fit(Xs, y)
        t_ridge = time.perf_counter()
    return {
        "import": t_import - t0, "read": t_read - t_import, "ols": t_ols - t1, "lasso_cv": t_lasso - t_ols,
        "enet_cv": t_enet - t_lasso, "ridge_cv": t_ridge - t_enet, "fit": t_ridge - t1,
        "rss_loaded": rss_loaded, "peak_rss": _peak_rss_bytes(), "process_peak": max(_peak_rss_bytes(), peak_load),
        "table_bytes": int(X.nbytes + y.nbytes),
        "lasso_alpha": float(lasso.alpha_), "enet_alpha": float(enet.alpha_), "ridge_alpha": float(ridge.alpha_) / n,
    }


def write_big_table(path: Path, rows: int, cols: int, chunk: int = 200_000, seed: int = 11) -> None:
    """A sensor-line table of ``rows`` rows written row group by row group (memory bounded by ``chunk``)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    n_groups, n_drivers = 200, 8
    shift = rng.normal(0, 0.5, (n_groups, n_drivers))
    loading = rng.normal(0, 1, (n_drivers, cols)) * (rng.random((n_drivers, cols)) < 0.4)
    loading[rng.integers(0, n_drivers, cols), np.arange(cols)] += 1.0
    scale = rng.uniform(0.5, 20, cols)
    offset = rng.uniform(-50, 50, cols)
    beta = np.zeros(n_drivers)
    beta[:3] = (1.5, -0.8, 0.4)
    labels = np.array([f"B{b:04d}" for b in range(n_groups)])
    tmp = path.with_suffix(".parquet.tmp")
    writer = None
    try:
        for k, a in enumerate(range(0, rows, chunk)):
            m = min(chunk, rows - a)
            r = np.random.default_rng([seed, k])
            batch = r.integers(0, n_groups, m)
            drivers = r.normal(0, 1, (m, n_drivers)) + shift[batch]
            # Fortran order makes each column contiguous, so pyarrow wraps it without a copy.
            sensors = np.asfortranarray((drivers @ loading + r.normal(0, 0.3, (m, cols))) * scale + offset)
            arrays = [pa.array(labels[batch])] + [pa.array(sensors[:, j]) for j in range(cols)]
            arrays.append(pa.array(100 + drivers @ beta + r.normal(0, 1.0, m)))
            names = ["batch"] + [f"s{j + 1:03d}" for j in range(cols)] + [TARGET]
            t = pa.Table.from_arrays(arrays, names=names)
            if writer is None:
                # A dictionary of distinct floats is built and then thrown away page after page:
                # only the group labels repeat (measured: 9× faster writing without it).
                writer = pq.ParquetWriter(tmp, t.schema, use_dictionary=["batch"])
            writer.write_table(t, row_group_size=chunk)
            del sensors, drivers, arrays, t
    finally:
        if writer is not None:
            writer.close()
    os.replace(tmp, path)


def _worker_streamed(job: dict) -> dict:
    """``regbench fit --memory-budget``'s route, timed inside one process."""
    t0 = time.perf_counter()
    from regbench.data import Roles
    from regbench.data.stream import stream_fit
    from regbench.models.ols import one_blas_thread
    from regbench.models.results import FitSettings

    import scipy.linalg  # noqa: F401
    import sklearn.linear_model  # noqa: F401

    t1 = time.perf_counter()
    with one_blas_thread():
        s = stream_fit(job["table"], Roles(target=TARGET, groups=GROUPS), FitSettings(folds=job["folds"]),
                       memory_budget=job.get("budget"))
    t2 = time.perf_counter()
    return {"import": t1 - t0, "fit": t2 - t1, "peak_rss": _peak_rss_bytes(), "rows": s.rows_used,
            "cols": len(s.design.columns), "lasso_alpha": s.results.penalized["lasso"].alpha}


def _worker_scan(job: dict) -> dict:
    """The floor of a streamed fit: one pyarrow scan into float64 batches and one weighted Gram pass."""
    import numpy as np
    import pyarrow.parquet as pq

    from regbench.models.ols import one_blas_thread

    t0 = time.perf_counter()
    f = pq.ParquetFile(job["table"])
    cols = [c for c in f.schema_arrow.names if c != GROUPS]
    p = len(cols)
    xx = np.zeros((p, p))
    with one_blas_thread():
        for b in f.iter_batches(batch_size=65_536, columns=cols):
            X = np.column_stack([b.column(i).to_numpy() for i in range(p)])
            w = np.ones(X.shape[0])
            xx += X.T @ (X * w[:, None])
    return {"scan_gram": time.perf_counter() - t0, "peak_rss": _peak_rss_bytes()}


def _worker_project(job: dict) -> dict:
    """A whole project (fit, comparisons, stress, and stability with ``bootstrap`` refits)."""
    t0 = time.perf_counter()
    from regbench.data import Roles
    from regbench.models.results import FitSettings
    from regbench.session import Session

    s = Session.from_table_file(job["table"], Roles(target=TARGET, groups=GROUPS), FitSettings(folds=job["folds"]))
    t1 = time.perf_counter()
    s.compute_results(bootstrap=job["bootstrap"])
    return {"load": t1 - t0, "compute": time.perf_counter() - t1}


def _worker_cli_fit(job: dict) -> dict:
    """``regbench fit TABLE --json`` as a user runs it."""
    from regbench.cli import main

    # A regular file: the CLI refuses to write its JSON onto a device such as /dev/null.
    out = _data_dir() / f"cli_fit_{os.getpid()}.json"
    try:
        rc = main(["fit", job["table"], "--target", TARGET, "--groups", GROUPS, "--json", str(out)])
    finally:
        out.unlink(missing_ok=True)
    if rc != 0:
        raise SystemExit(f"regbench fit exited with status {rc}")
    return {"rc": rc}


def _worker_read(job: dict) -> dict:
    """One read of ``job['table']`` by ``job['how']``: regbench's reader (read and typed), pandas'
    ``read_csv``, or pyarrow's ``read_table`` and every numeric column into one float64 matrix.
    Time and peak memory are counted from after the imports."""
    import numpy as np

    how = job["how"]
    if how == "regbench":
        from regbench.data import read_table
    else:
        import pandas as pd
        import pyarrow.parquet as pq
    base = _rss_bytes()
    _reset_peak()
    t0, c0 = time.perf_counter(), time.process_time()
    if how == "regbench":
        out = read_table(job["table"])
    elif how == "pandas":
        out = pd.read_csv(job["table"])
    else:
        tab = pq.read_table(job["table"])
        import pyarrow as pa

        keep = [f.name for f in tab.schema if pa.types.is_integer(f.type) or pa.types.is_floating(f.type)]
        out = np.empty((tab.num_rows, len(keep)), order="F")
        for j, c in enumerate(keep):
            out[:, j] = tab.column(c).to_numpy()
        del tab
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    del out
    return {"read": wall, "read_cpu": cpu, "above_start": _peak_rss_bytes() - base}


def _worker_open(job: dict) -> dict:
    """Open a saved project, counting the designs built and the per-fold passes run; and, for scale,
    read its table and build one design (what opening needs), and time the per-fold Gram pass the
    cached fit continues from once a refit needs it."""
    import numpy as np

    import regbench.data.design as design_mod
    import regbench.project.store as store_mod
    import regbench.session as session_mod
    from regbench.data import Roles, read_table
    from regbench.models.gram import per_fold
    from regbench.project import load_project

    built, passes = [], []
    real = design_mod.build_design

    def counting(*a, **k):
        built.append(1)
        return real(*a, **k)

    def counting_pass(*a, **k):
        passes.append(1)
        return per_fold(*a, **k)

    for mod in (design_mod, store_mod, session_mod):
        mod.build_design = counting
    store_mod.per_fold = counting_pass
    t0, c0 = time.perf_counter(), time.process_time()
    session = load_project(job["project"], compute=False)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    count, passes_on_open = len(built), len(passes)
    t1, c1 = time.perf_counter(), time.process_time()
    design = real(read_table(job["table"]), Roles(target=TARGET, groups=GROUPS))
    floor, floor_cpu = time.perf_counter() - t1, time.process_time() - c1
    c2 = time.process_time()
    ids = np.asarray(session.results.fold_ids) if session.results is not None else np.zeros(design.n, dtype=int)
    per_fold(design.X, design.y, design.weights, ids, int(ids.max()) + 1)
    return {"open": wall, "open_cpu": cpu, "designs": count, "passes": passes_on_open, "floor": floor,
            "floor_cpu": floor_cpu, "gram_cpu": time.process_time() - c2}


WORKERS = {"regbench": _worker_regbench, "reference": _worker_reference, "streamed": _worker_streamed,
           "scan": _worker_scan, "project": _worker_project, "cli_fit": _worker_cli_fit, "read": _worker_read,
           "open": _worker_open}


def _run(route: str, job: dict, timeout: Optional[float] = None) -> dict:
    """One whole process; wall time measured from outside (None when it ran past ``timeout``)."""
    import resource

    t = time.perf_counter()
    used = resource.getrusage(resource.RUSAGE_CHILDREN)
    try:
        proc = subprocess.run([sys.executable, "-m", "regbench.bench", route, json.dumps(job)],
                              capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None
    wall = time.perf_counter() - t
    done = resource.getrusage(resource.RUSAGE_CHILDREN)
    # CPU time of the process alone: on shared cores it moves far less with the load than wall time.
    cpu = (done.ru_utime + done.ru_stime) - (used.ru_utime + used.ru_stime)
    if proc.returncode != 0:
        last = (proc.stderr.strip().splitlines() or ["no message"])[-1]
        raise BenchFailed(f"the {route} process on {Path(job['table']).name} failed ({last}); "
                          f"run `python -m regbench.bench {route} '{json.dumps(job)}'` to see it in full")
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out["wall"] = wall
    out["cpu"] = cpu
    return out


class BenchFailed(Exception):
    """A benchmark worker process failed."""


def _mb(b: float) -> str:
    return f"{b / 2**20:,.0f} MB"


def _median(runs, key):
    return statistics.median(r[key] for r in runs)


def main(rows: int = 100_000, cols: int = 100, quick: bool = False, wide: bool = False) -> int:
    """Run the benchmark and print the results; returns the exit status.

    Parameters
    ----------
    rows, cols : int
        Size of the headline comparison.
    quick : bool
        A tiny run (seconds) that checks the machinery works.
    wide : bool
        Only the wide case (:func:`wide_case`).
    """
    try:
        if wide:
            return wide_case(*((40, 400) if quick else (200, 2_000)), repeats=1 if quick else 3)
        return _main(rows, cols, quick)
    except BenchFailed as exc:
        sys.stderr.write(f"regbench bench: {exc}\n")
        return 1


def _main(rows: int, cols: int, quick: bool) -> int:
    if quick:
        rows, cols = 2_000, 10
        repeats, ref_repeats = 1, 1
        scaling_rows, scaling_cols = (1_000,), ()
    else:
        # The reference takes minutes (RidgeCV refits every α on every fold), so it runs once.
        repeats, ref_repeats = 3, 1
        scaling_rows, scaling_cols = (10_000, 100_000, 1_000_000), (20, 100, 400)
    p = functools.partial(print, flush=True)
    p(f"regbench bench — {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
      f"{time.strftime('%Y-%m-%d %H:%M', time.gmtime())} UTC")
    p(f"Table: sensor_line({rows:,} rows, {cols} sensors), grouped {5}-fold CV by batch, 100 α per family.")
    p("Whole-process wall times (start-up and imports included); medians.")
    job = prepare(rows, cols)
    ours = [_run("regbench", job) for _ in range(repeats)]
    ref = [_run("reference", job) for _ in range(ref_repeats)]
    t_ours, t_ref = _median(ours, "wall"), _median(ref, "wall")
    p("")
    p(f"  regbench   {t_ours:8.2f} s  (median of {repeats}; import {_median(ours, 'import'):.2f} s, "
      f"read {_median(ours, 'read'):.2f} s, design {_median(ours, 'design'):.2f} s, fit {_median(ours, 'fit'):.2f} s)")
    steps = ours[len(ours) // 2]["steps"]
    p("             fit steps: " + ", ".join(f"{k} {v:.2f} s" for k, v in steps.items()))
    p(f"  reference  {t_ref:8.2f} s  (median of {ref_repeats}; import {_median(ref, 'import'):.2f} s, "
      f"read {_median(ref, 'read'):.2f} s, OLS {_median(ref, 'ols'):.2f} s, LassoCV {_median(ref, 'lasso_cv'):.2f} s, "
      f"ElasticNetCV {_median(ref, 'enet_cv'):.2f} s, RidgeCV {_median(ref, 'ridge_cv'):.2f} s)")
    p(f"  regbench is {t_ref / t_ours:.1f}× faster as a whole process "
      f"({_median(ref, 'fit') / _median(ours, 'fit'):.1f}× on the fitting alone).")
    table_bytes = ours[0]["table_bytes"]
    extra_ours = _median(ours, "peak_rss") - _median(ours, "rss_loaded")
    extra_ref = _median(ref, "peak_rss") - _median(ref, "rss_loaded")
    p(f"  peak memory of the fit beyond the loaded table: regbench {_mb(extra_ours)} ({extra_ours / table_bytes:.2f}× "
      f"the {_mb(table_bytes)} table), reference {_mb(extra_ref)} ({extra_ref / table_bytes:.2f}×)")
    p(f"  whole-process peak RSS (reading included): regbench {_mb(_median(ours, 'process_peak'))}, "
      f"reference {_mb(_median(ref, 'process_peak'))}")
    p(f"  stress test over all {cols} columns (shuffle, 4 fitted models kept fixed): "
      f"{_median(ours, 'stress_all_columns'):.2f} s (median of {repeats})")
    p(f"  fit time / one Gram pass: {_median(ours, 'fit') / _median(ours, 'one_gram_pass'):.1f} "
      f"(one pass {_median(ours, 'one_gram_pass') * 1000:.0f} ms)")
    p("  chosen α (regbench / reference; the reference standardizes once, regbench on each fold's rows): "
      + ", ".join(f"{k} {ours[0][k + '_alpha']:.4g} / {ref[0][k + '_alpha']:.4g}" for k in ("ridge", "lasso", "enet")))
    p("")
    p("Scaling (regbench only, one run each): rows × columns, whole process and fit")
    for r, c in [(r, cols) for r in scaling_rows] + [(rows, c) for c in scaling_cols if c != cols]:
        j = prepare(r, c)
        o = _run("regbench", j)
        p(f"  {r:>9,} × {c:<4} wall {o['wall']:7.2f} s   fit {o['fit']:6.2f} s   one Gram pass "
          f"{o['one_gram_pass']:6.3f} s   beyond table {(o['peak_rss'] - o['rss_loaded']) / o['table_bytes']:.2f}×")
    p("")
    p("The cores are shared with other work on this machine; repeat for firm numbers.")
    return 0


def _paired(a_route, a_job, b_route, b_job, pairs):
    """Walls of ``pairs`` alternating runs of two routes and the median of their ratios a/b."""
    ratios, a_w, b_w, cpu = [], [], [], []
    for _ in range(pairs):
        a = _run(a_route, a_job)
        b = _run(b_route, b_job)
        a_w.append(a["wall"])
        b_w.append(b["wall"])
        ratios.append(a["wall"] / b["wall"])
        cpu.append(a["cpu"] / b["cpu"])
    return statistics.median(a_w), statistics.median(b_w), statistics.median(ratios), statistics.median(cpu)


#: Longest a reference run may take in the targets (the 100k × 1,000 scripted route runs past it).
REFERENCE_CAP = 600.0


def _load() -> str:
    one, five, _ = os.getloadavg()
    return f"load {one:.1f}/{five:.1f}"


def _target_headline(p, pairs: int) -> None:
    """100k × 100 whole comparison (paired runs), fit against one Gram pass, stress ranking against it.

    The paired regbench processes read, build and fit only (as the scripted route reads and fits);
    the Gram pass and the stress ranking are timed in separate regbench runs.
    """
    job = prepare(100_000, 100)
    ratios, timed, refs = [], [], []
    for _ in range(pairs):
        r = _run("reference", job)
        o = _run("regbench", dict(job, measures=False))
        refs.append(r)
        timed.append(o)
        ratios.append(r["wall"] / o["wall"])
    p(f"  100k × 100 whole comparison: scripted route {_median(refs, 'wall'):.1f} s / regbench "
      f"{_median(timed, 'wall'):.2f} s = {statistics.median(ratios):.1f}× (median of {pairs} paired ratios; "
      f"target ≥ 30×) [{_load()}]")
    cpu_ratio = statistics.median(r["cpu"] / o["cpu"] for r, o in zip(refs, timed))
    p(f"    in CPU time: scripted route {_median(refs, 'cpu'):.1f} s / regbench {_median(timed, 'cpu'):.2f} s = "
      f"{cpu_ratio:.1f}× (a multi-threaded BLAS waiting on busy cores adds CPU time of its own)")
    p(f"    regbench: import {_median(timed, 'import'):.2f} s, read {_median(timed, 'read'):.2f} s, design "
      f"{_median(timed, 'design'):.2f} s, fit {_median(timed, 'fit'):.2f} s; scripted route: import "
      f"{_median(refs, 'import'):.2f} s, read {_median(refs, 'read'):.2f} s, fit {_median(refs, 'fit'):.1f} s")
    ours = [_run("regbench", job) for _ in range(pairs)]
    fit_ratio = statistics.median(o["fit"] / o["one_gram_pass"] for o in ours)
    cpu_ratio = statistics.median(o["fit_cpu"] / o["one_gram_pass_cpu"] for o in ours)
    p(f"  100k × 100 fit / one weighted Gram pass: {fit_ratio:.1f}× (fit {_median(ours, 'fit'):.2f} s, pass "
      f"{_median(ours, 'one_gram_pass') * 1000:.0f} ms; target ≤ 8×); in CPU time {cpu_ratio:.1f}× "
      f"[{_load()}]")
    p("    the pass: one weighted XᵀWX of every row (gram_stats, BLAS syrk), on one BLAS thread as the fit "
      "runs; median of 3 passes in each of the runs")
    _stress_line(p, ours)


def _stress_line(p, ours) -> None:
    """The stress ranking over every column against one Gram pass, from regbench runs that measured both."""
    stress_ratio = statistics.median(o["stress_all_columns"] / o["stress_gram_pass"] for o in ours)
    stress_cpu = statistics.median(o["stress_all_columns_cpu"] / o["stress_gram_pass_cpu"] for o in ours)
    p(f"  100k × 100 stress ranking over every column / one Gram pass (both on one BLAS thread): "
      f"{stress_ratio:.2f}× wall ({_median(ours, 'stress_all_columns') * 1000:.0f} ms / "
      f"{_median(ours, 'stress_gram_pass') * 1000:.0f} ms), {stress_cpu:.2f}× CPU (medians of {len(ours)} runs, "
      f"each the median of 3); what one permuted difference and column sums allow: about 3.5×, so the target "
      f"is ≤ 5.3× [{_load()}]")


def _target_stress(p, pairs: int) -> None:
    """The stress ranking alone (the headline target prints it too, after the paired comparison)."""
    job = prepare(100_000, 100)
    _stress_line(p, [_run("regbench", job) for _ in range(pairs)])


def _target_wide_rows(p) -> None:
    """100k × 1,000: regbench against the scripted route, the reference capped at :data:`REFERENCE_CAP`."""
    job = prepare(100_000, 1_000)
    o = _run("regbench", dict(job, measures=False))
    p(f"  100k × 1,000 regbench process: {o['wall']:.1f} s wall, {o['cpu']:.1f} s CPU (import {o['import']:.2f} s, "
      f"read {o['read']:.2f} s, design {o['design']:.2f} s, fit {o['fit']:.2f} s; target ≤ 20 s) [{_load()}]")
    p("    fit steps: " + ", ".join(f"{k} {v:.2f} s" for k, v in o["steps"].items()))
    r = _run("reference", job, timeout=REFERENCE_CAP)
    if r is None:
        p(f"  100k × 1,000: regbench {o['wall']:.1f} s; the scripted route was stopped at {REFERENCE_CAP:.0f} s, so "
          f"the ratio is > {REFERENCE_CAP / o['wall']:.1f}× (target ≥ 30×) [{_load()}]")
    else:
        p(f"  100k × 1,000: scripted route {r['wall']:.1f} s / regbench {o['wall']:.1f} s = {r['wall'] / o['wall']:.1f}× "
          f"(one run each; target ≥ 30×) [{_load()}]")


def _big_table(p, rows: int) -> Path:
    path = _data_dir() / f"sensor_line_big_{rows}x100.parquet"
    if not path.exists():
        t = time.perf_counter()
        write_big_table(path, rows, 100)
        p(f"  wrote {path.name} ({path.stat().st_size / 1e9:.1f} GB) in {time.perf_counter() - t:.0f} s")
    return path


def _target_in_memory_peak(p) -> None:
    """1M × 100 read, built and fitted in memory: whole-process peak against the float64 table."""
    path = _big_table(p, 1_000_000)
    o = _run("regbench", {"table": str(path), "folds": 5, "n_penalties": 100, "seed": 0})
    p(f"  1M × 100 in memory: whole-process peak {_mb(o['process_peak'])} = {o['process_peak'] / o['table_bytes']:.2f}× "
      f"the {_mb(o['table_bytes'])} float64 table (target ≤ 2×); wall {o['wall']:.1f} s [{_load()}]")


def _target_streamed(p, rows: int, budget: int, pairs: int) -> None:
    """A streamed fit under ``budget``: peak memory, and time against one pyarrow scan plus one Gram pass."""
    path = _big_table(p, rows)
    j = {"table": str(path), "folds": 5, "budget": budget}
    ratios, fits, scans, peaks, cpu_ratios = [], [], [], [], []
    for _ in range(pairs):
        s = _run("streamed", j)
        c = _run("scan", j)
        fits.append(s["wall"])
        scans.append(c["wall"])
        peaks.append(s["peak_rss"])
        ratios.append(s["wall"] / c["wall"])
        cpu_ratios.append(s["cpu"] / c["cpu"])
    table = rows * 101 * 8
    p(f"  {rows / 1e6:g}M × 100 with --memory-budget {budget / 1e6:.0f}MB: peak {_mb(max(peaks))} "
      f"({max(peaks) / table:.2f}× the {_mb(table)} float64 table); streamed fit {statistics.median(fits):.1f} s / one "
      f"pyarrow scan + one Gram pass {statistics.median(scans):.1f} s = {statistics.median(ratios):.2f}× "
      f"(median of {pairs}; targets: peak under 1.2 GB at 3M, ≤ 3× at 10M); in CPU time "
      f"{statistics.median(cpu_ratios):.2f}× [{_load()}]")


def _target_stability(p, pairs: int) -> None:
    job = prepare(100_000, 100)
    a, b, r, c = _paired("project", dict(job, bootstrap=200), "project", dict(job, bootstrap=0), pairs)
    p(f"  stability: project with 200 grouped refits {a:.2f} s / without {b:.2f} s = {r:.2f}× (target ≤ 1.5×; "
      f"{c:.2f}× in CPU time) [{_load()}]")


def _target_wide_project(p, pairs: int) -> None:
    """20,000 × 1,000 (the sensor line, 200 batches): a whole project with 200 grouped refits against
    the same project without stability, paired whole processes (what `regbench new` computes)."""
    job = prepare(20_000, 1_000)
    a, b, r, c = _paired("project", dict(job, bootstrap=200), "project", dict(job, bootstrap=0), pairs)
    p(f"  wide_project: 20,000 × 1,000 project with 200 grouped refits {a:.1f} s / without {b:.1f} s = {r:.2f}× "
      f"({c:.2f}× in CPU time; beside the 100k × 100 stability target of ≤ 1.5×: at 1,000 columns each refit's "
      f"p×p solves weigh far more against the pass over 20,000 rows) [{_load()}]")


def _target_startup(p, pairs: int) -> None:
    small = prepare(10_000, 100)
    a, b, r, c = _paired("reference", small, "cli_fit", small, pairs)
    p(f"  10k × 100: scripted route {a:.2f} s / `regbench fit` {b:.2f} s = {r:.1f}× (target ≥ 5×; {c:.1f}× in CPU "
      f"time) [{_load()}]")


def _csv_of(job: dict) -> Path:
    """The benchmark table written once as CSV beside its Parquet file."""
    path = Path(job["table"]).with_suffix(".csv")
    if not path.exists():
        import pandas as pd

        tmp = path.with_suffix(".csv.tmp")
        pd.read_parquet(job["table"]).to_csv(tmp, index=False)
        os.replace(tmp, path)
    return path


def _target_read(p, pairs: int, fmt: str) -> None:
    """A 100k × 100 table read and typed by regbench against pandas' read_csv (CSV) or pyarrow's
    read_table into a float64 matrix (Parquet): paired runs, time in CPU seconds (the cores are
    shared) and peak memory above the process's start."""
    job = prepare(100_000, 100)
    table = str(_csv_of(job)) if fmt == "csv" else job["table"]
    other = "pandas" if fmt == "csv" else "pyarrow"
    ours, refs = [], []
    for _ in range(pairs):
        ours.append(_run("read", {"table": table, "how": "regbench"}))
        refs.append(_run("read", {"table": table, "how": other}))
    t = statistics.median(o["read_cpu"] / r["read_cpu"] for o, r in zip(ours, refs))
    w = statistics.median(o["read"] / r["read"] for o, r in zip(ours, refs))
    m = statistics.median(o["above_start"] / r["above_start"] for o, r in zip(ours, refs))
    ref = "pandas.read_csv" if fmt == "csv" else "pyarrow read_table + to numpy"
    p(f"  100k × 100 {fmt.upper()} read and typed / {ref}: CPU {t:.2f}× ({_median(ours, 'read_cpu'):.2f} s / "
      f"{_median(refs, 'read_cpu'):.2f} s), wall {w:.2f}×, peak memory {m:.2f}× ({_mb(_median(ours, 'above_start'))} / "
      f"{_mb(_median(refs, 'above_start'))}) (medians of {pairs} paired ratios; target ≤ 1.5×) [{_load()}]")


def _saved_project(job: dict) -> Path:
    """The 100k × 100 benchmark table saved once as a fitted project."""
    path = Path(job["table"]).with_suffix(".regbench")
    if not path.exists():
        from regbench.data import Roles
        from regbench.models.results import FitSettings
        from regbench.project import save_project
        from regbench.session import Session

        s = Session.from_table_file(job["table"], Roles(target=TARGET, groups=GROUPS), FitSettings(folds=job["folds"]))
        s.compute()
        save_project(s, path)
    return path


def _target_open(p, pairs: int) -> None:
    """Opening a saved 100k × 100 project: designs built, per-fold passes run, and its time against
    reading the table and building one design (the per-fold pass waits until a refit needs it)."""
    job = prepare(100_000, 100)
    j = {"project": str(_saved_project(job)), "table": job["table"]}
    runs = [_run("open", j) for _ in range(pairs)]
    bare = statistics.median(r["open_cpu"] / r["floor_cpu"] for r in runs)
    wall = statistics.median(r["open"] / r["floor"] for r in runs)
    with_pass = statistics.median(r["open_cpu"] / (r["floor_cpu"] + r["gram_cpu"]) for r in runs)
    p(f"  100k × 100 saved project opened: {max(r['designs'] for r in runs)} design built, "
      f"{max(r['passes'] for r in runs)} per-fold passes; open {_median(runs, 'open_cpu'):.2f} s CPU / reading the "
      f"table and building one design {_median(runs, 'floor_cpu'):.2f} s = {bare:.2f}× ({wall:.2f}× wall; the open "
      f"also checks each member's hash and decodes the cached results; against reading, building and one per-fold "
      f"Gram pass of {_median(runs, 'gram_cpu'):.2f} s: {with_pass:.2f}×) (median of {pairs}; target ≤ 1.5×) "
      f"[{_load()}]")


#: The targets ``--targets`` runs, by name (``--only`` picks some; ``--big`` adds the rest: the wide and big
#: tables, and the stress ranking alone, which the headline prints too).
TARGETS = ("stability", "startup", "headline", "read_csv", "read_parquet", "open_project", "wide_rows", "wide_project",
           "memory_1m", "stream_3m", "stream_10m", "stress_ranking")


def targets(big: bool = False, pairs: int = 3, only=None) -> int:
    """Each target of the one-pass work as a ratio measured in this run (medians of paired runs).

    Every line carries the machine's load average when it was measured: the cores
    are shared, and a ratio measured under load is a ratio under load.
    """
    p = functools.partial(print, flush=True)
    chosen = tuple(only) if only else (TARGETS if big else TARGETS[:6])
    unknown = [t for t in chosen if t not in TARGETS]
    if unknown:
        sys.stderr.write(f"regbench bench: unknown target {', '.join(unknown)}; choose from {', '.join(TARGETS)}\n")
        return 2
    p(f"regbench bench --targets — {os.cpu_count()} cores, {_load()} at {time.strftime('%H:%M', time.gmtime())} UTC; "
      f"medians of {pairs} paired runs")
    runs = {
        "stability": lambda: _target_stability(p, pairs),
        "startup": lambda: _target_startup(p, pairs),
        "headline": lambda: _target_headline(p, pairs),
        "wide_rows": lambda: _target_wide_rows(p),
        "wide_project": lambda: _target_wide_project(p, pairs),
        "read_csv": lambda: _target_read(p, pairs, "csv"),
        "read_parquet": lambda: _target_read(p, pairs, "parquet"),
        "open_project": lambda: _target_open(p, pairs),
        "memory_1m": lambda: _target_in_memory_peak(p),
        "stream_3m": lambda: _target_streamed(p, 3_000_000, 500_000_000, pairs),
        "stream_10m": lambda: _target_streamed(p, 10_000_000, 500_000_000, 1),
        "stress_ranking": lambda: _target_stress(p, pairs),
    }
    try:
        for name in chosen:
            runs[name]()
    except BenchFailed as exc:
        sys.stderr.write(f"regbench bench: {exc}\n")
        return 1
    if not only and not big:
        p("  (100k × 1,000, the 20,000 × 1,000 project, 1M, 3M and 10M rows run with --big)")
    return 0


def wide_case(rows: int = 200, cols: int = 2_000, repeats: int = 3) -> int:
    """A wide table (fewer rows than columns): whole-process times of both routes, medians."""
    p = functools.partial(print, flush=True)
    p(f"Wide table: sensor_line({rows:,} rows, {cols:,} sensors), grouped 5-fold CV, 100 α per family; "
      "whole-process wall times, medians.")
    job = prepare(rows, cols)
    ours, ref = [], []
    for _ in range(repeats):  # interleaved, so each pair meets the same load on a shared machine
        ours.append(_run("regbench", job))
        ref.append(_run("reference", job))
    t_ours, t_ref = _median(ours, "wall"), _median(ref, "wall")
    p(f"  regbench   {t_ours:8.2f} s  (median of {repeats}; fit {_median(ours, 'fit'):.2f} s)")
    p(f"  reference  {t_ref:8.2f} s  (median of {repeats}; fit {_median(ref, 'fit'):.2f} s)")
    ratios = sorted(r["wall"] / o["wall"] for o, r in zip(ours, ref))
    p(f"  reference / regbench, paired by run: {', '.join(f'{x:.2f}' for x in ratios)} "
      f"(median {statistics.median(ratios):.2f})")
    return 0


def _worker_main(argv) -> int:
    route, job = argv[0], json.loads(argv[1])
    out = WORKERS[route](job)
    sys.stdout.write(json.dumps(out) + "\n")
    return 0




# --------------------------------------------------------------------------- yes/no outcome

BINARY_TARGET = "on_spec"


def prepare_binary(rows: int, cols: int, folds: int = 5, n_penalties: int = 20, seed: int = 0) -> dict:
    """The sensor-line table with a yes/no target (throughput in its top quarter), its folds and α grids."""
    import numpy as np

    d = _data_dir()
    stem = f"sensor_line_binary_{rows}x{cols}"
    table = d / f"{stem}.parquet"
    if not table.exists():
        from regbench.demo import sensor_line

        frame = sensor_line(rows, cols)
        frame[BINARY_TARGET] = (frame[TARGET] > frame[TARGET].quantile(0.75)).astype(float)
        frame = frame.drop(columns=[TARGET])
        tmp = table.with_suffix(".parquet.tmp")
        frame.to_parquet(tmp, index=False)
        os.replace(tmp, table)
        del frame
    extras = d / f"{stem}_f{folds}_k{n_penalties}_s{seed}.npz"
    if not extras.exists():
        from regbench.data import Roles, build_design, read_table
        from regbench.models.cv import fold_ids
        from regbench.models.logistic import _Rows, logistic_grid

        design = build_design(read_table(table), Roles(target=BINARY_TARGET, groups=GROUPS, outcome="binary"))
        ids = fold_ids(design.n, folds, seed, design.groups, design.weights, design.groups_column)
        rows_ = _Rows(design.X, design.y, design.weights)
        grids = {f"grid_{r:g}": logistic_grid(rows_, r, n_penalties, 1e-3) for r in (0.0, 1.0, 0.5)}
        tmp = extras.with_name(extras.name + ".tmp.npz")
        np.savez(tmp, fold_ids=ids, **grids)
        os.replace(tmp, extras)
    return {"table": str(table), "extras": str(extras), "rows": rows, "cols": cols, "folds": folds,
            "n_penalties": n_penalties, "seed": seed}


def _worker_regbench_binary(job: dict) -> dict:
    t0 = time.perf_counter()
    from regbench.data import Roles, build_design, read_table
    from regbench.models.engine import fit_all
    from regbench.models.results import FitSettings

    t_import = time.perf_counter()
    design = build_design(read_table(job["table"]), Roles(target=BINARY_TARGET, groups=GROUPS, outcome="binary"))
    t_design = time.perf_counter()
    marks = []
    settings = FitSettings(folds=job["folds"], n_penalties=job["n_penalties"], seed=job["seed"])
    c_fit = time.process_time()
    results = fit_all(design, settings, progress=lambda d, t, m: marks.append((time.perf_counter(), m)))
    t_fit = time.perf_counter()
    fit_cpu = time.process_time() - c_fit
    steps = {m: tb - ta for (ta, m), (tb, _) in zip(marks, marks[1:])}
    return {"import": t_import - t0, "read_design": t_design - t_import, "fit": t_fit - t_design, "steps": steps,
            **{f"{k}_alpha": results.penalized[k].alpha for k in ("ridge", "lasso", "elastic_net")}}


def _worker_reference_binary(job: dict) -> dict:
    """statsmodels Logit, then scikit-learn LogisticRegressionCV for each penalty with the same folds and grid.

    The grid maps to scikit-learn's C = 1/(α·n) on columns standardized once; held-out log-loss chooses.
    """
    import warnings

    t0 = time.perf_counter()
    import numpy as np
    import pandas as pd
    import statsmodels.api as sm
    from sklearn.linear_model import LogisticRegressionCV

    t_import = time.perf_counter()
    frame = pd.read_parquet(job["table"])
    cols = [c for c in frame.columns if c not in (BINARY_TARGET, GROUPS)]
    X = frame[cols].to_numpy(dtype=float)
    y = frame[BINARY_TARGET].to_numpy(dtype=float)
    del frame
    extras = np.load(job["extras"], allow_pickle=False)
    ids = extras["fold_ids"]
    splits = [(np.flatnonzero(ids != k), np.flatnonzero(ids == k)) for k in range(job["folds"])]
    t1 = time.perf_counter()
    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sm.Logit(y, sm.add_constant(Xs)).fit(disp=0, method="newton", maxiter=100)
    t_logit = time.perf_counter()
    n = Xs.shape[0]
    times, chosen = {}, {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, rho, solver in (("ridge", 0.0, "lbfgs"), ("lasso", 1.0, "saga"), ("elastic_net", 0.5, "saga")):
            grid = extras[f"grid_{rho:g}"]
            ta = time.perf_counter()
            kw = {"l1_ratios": [rho]} if rho > 0 else {}
            m = LogisticRegressionCV(Cs=1.0 / (grid * n), cv=splits, scoring="neg_log_loss", solver=solver,
                                     max_iter=1000, penalty="elasticnet" if rho > 0 else "l2", **kw).fit(Xs, y)
            times[key] = time.perf_counter() - ta
            chosen[f"{key}_alpha"] = float(1.0 / (np.ravel(m.C_)[0] * n))
    return {"import": t_import - t0, "read": t1 - t_import, "logit": t_logit - t1, **times,
            "fit": time.perf_counter() - t1, **chosen}


WORKERS["regbench_binary"] = _worker_regbench_binary
WORKERS["reference_binary"] = _worker_reference_binary


def logistic_main(rows: int = 100_000, cols: int = 100, quick: bool = False, n_penalties: int = 20) -> int:
    """The yes/no benchmark: regbench against statsmodels Logit + scikit-learn LogisticRegressionCV.

    Both whole processes, one run each, same grouped folds and the same α grid (``n_penalties`` values
    per family; 20 by default because the scripted route takes many minutes per family at 100k rows).
    """
    if quick:
        rows, cols, n_penalties = 2_000, 10, 8
    p = functools.partial(print, flush=True)
    try:
        job = prepare_binary(rows, cols, n_penalties=n_penalties)
        p(f"regbench bench --logistic — {platform.machine()}, {os.cpu_count()} cores, "
          f"{time.strftime('%Y-%m-%d %H:%M', time.gmtime())} UTC")
        p(f"Table: sensor_line({rows:,} rows, {cols} sensors), yes/no target '{BINARY_TARGET}' (top quarter of "
          f"throughput), grouped 5-fold CV, {n_penalties} α per family, one run each, whole processes.")
        ours = _run("regbench_binary", job)
        ref = _run("reference_binary", job)
    except BenchFailed as exc:
        sys.stderr.write(f"regbench bench: {exc}\n")
        return 1
    p(f"  regbench   {ours['wall']:8.2f} s  (import {ours['import']:.2f} s, read and design "
      f"{ours['read_design']:.2f} s, fit {ours['fit']:.2f} s)")
    p("             fit steps: " + ", ".join(f"{k} {v:.2f} s" for k, v in ours["steps"].items()))
    p(f"  reference  {ref['wall']:8.2f} s  (import {ref['import']:.2f} s, read {ref['read']:.2f} s, Logit "
      f"{ref['logit']:.2f} s, ridge {ref['ridge']:.2f} s, lasso {ref['lasso']:.2f} s, "
      f"elastic net {ref['elastic_net']:.2f} s)")
    p(f"  regbench is {ref['wall'] / ours['wall']:.1f}× faster as a whole process "
      f"({ref['fit'] / ours['fit']:.1f}× on the fitting alone).")
    p("  chosen α (regbench / reference): " + ", ".join(
        f"{k} {ours[k + '_alpha']:.4g} / {ref[k + '_alpha']:.4g}" for k in ("ridge", "lasso", "elastic_net")))
    return 0


if __name__ == "__main__":
    sys.exit(_worker_main(sys.argv[1:]))

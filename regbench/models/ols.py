"""Weighted OLS that says which columns it set aside and why.

The rank decisions work on the centered, scaled problem::

    a_ij = sqrt(w_i / W) * (x_ij - m_j) / s_j

with ``m`` the weighted means, ``s_j`` the weighted SD of column j and
``W = sum(w)``, so neither a column's offset nor its units matter.  Rows of
weight 0 are left out of the fit (they contribute nothing) but are still
predicted by the model.

Rank tolerance
--------------
A column is set aside when what the columns kept before it leave of it (at
unit SD) is at most ``tol + 16·eps·(r_j + Σ_k |c_k|·r_k)``: ``tol`` is the
rank tolerance, by default ``100 * max(n, p) * eps`` (n rows with weight > 0,
p columns; the round-off of a Householder QR grows at most like
``max(n, p) * eps``), and the second term is the round-off the stored values
themselves carry: a column holds its numbers to about eps times their size
(weighted RMS), which is ``r_j = RMS_j / SD_j`` times its spread, and so do the
kept columns of the combination (standardized weights ``c``).  So a column
derived from others by a few float operations (a mean of two columns, °C to °F,
K = °C + 273.15, a year written as 1e8 + x) is set aside and called exact, while
any leftover above the rounding of the numbers keeps a column in the fit: a
near-dependency goes to the diagnostics, never to set-aside, unless the caller
passes a larger ``rank_tol`` (then it is reported as *almost* reproduced).
When the kept columns and the intercept fit every row exactly (``n - 1`` kept,
a wide table), the remaining columns are set aside for want of rows, and their
sentence says so.

Which columns are kept
----------------------
The choice among dependent columns follows a stated order so that it is
predictable and can be steered: pinned columns first, then the design order; a
column is set aside when the columns kept before it reproduce it, so the kept
set is a largest independent one.  This walk (Gram–Schmidt, twice) runs on the
triangular factor of the scaled columns (same lengths and angles as the columns
themselves; at most n rows of it are non-zero).

Work on the rows
----------------
The rows are visited in blocks of a few thousand (:func:`block_rows`): one
pass for the weighted means, one for the triangular factor (a tall-skinny QR:
the factor so far stacked on the next block, refactored by LAPACK ``geqrf`` —
the same factor as one Householder QR of all rows, up to the signs of its
rows), and short matrix-vector passes for the refinement and the left-over of
each set-aside column.  No single library call then holds the interpreter for
long (a GUI stays responsive while a worker thread fits), and everything else
runs on the (p+2)×(p+2) factor, which the result keeps for the diagnostics.
The pass runs with one BLAS thread (:func:`one_blas_thread`): on cores shared
with other work, many short multi-threaded calls wait on each other (measured
here: 1-8 s with two threads against 0.5 s with one on 100,000 × 100 rows).

When the engine hands over the cross-products it has already gathered
(``stats``) and the centred columns are well conditioned (condition number at
most :data:`GRAM_FACTOR_MAX_COND`, no constant column, the target not nearly
reproduced), the factor is the Cholesky factor of the centred co-moments
instead, and the QR pass is skipped (:func:`factor_from_stats`): forming the
Gram squares the condition number, so the relative error this adds is at most
about κ²·eps = 2e-10, and the solution is still refined on the rows.  The
streamed route hands over the same statistics and decides the same way.
"""

from __future__ import annotations

import contextlib
from typing import Optional, Sequence

import numpy as np

from regbench.errors import ModelError
from regbench.formatting import count_text, join_words
from regbench.models.results import LinearModel, OLSResult, SetAside

EPS = np.finfo(np.float64).eps
#: Multiple of max(n, p) * eps in the default rank tolerance (see the module docstring).
ROUNDOFF_FACTOR = 100.0
#: A term of a set-aside combination whose standardized weight is below this share of the
#: largest is round-off, provided dropping it does not leave more over (checked).
NEGLIGIBLE_TERM = 1e-6
#: A column's stored values carry round-off of about eps times its size (weighted RMS);
#: a left-over below this many eps times the sizes involved is that round-off.
DATA_ROUNDOFF = 16.0
#: Largest condition number of the centred, unit-SD columns for which the factor is taken from
#: the engine's cross-products (:func:`factor_from_stats`).  Forming the Gram squares the
#: condition number, so what follows from the factor then carries a relative error of about
#: κ²·eps: at most 2e-10 here, against the 1e-9 to which the streamed and in-memory routes agree.
#: Above it the factor comes from a QR of the rows (Householder accuracy).
GRAM_FACTOR_MAX_COND = 1e3
#: Smallest share of the target's spread the columns may leave over for that route: the
#: residual sum of squares is then a difference, accurate to eps over this share (2e-12).
GRAM_FACTOR_MIN_LEFT = 1e-4
#: Budget of one QR step over a block of rows, in rows × columns²: about 5-25 ms of
#: one core here, so no single call on the rows runs long.
BLOCK_WORK = 2 ** 25


def default_rank_tol(n: int, p: int) -> float:
    """The default relative rank tolerance, ``100 * max(n, p) * eps``."""
    return ROUNDOFF_FACTOR * max(int(n), int(p), 1) * EPS


def block_rows(p: int) -> int:
    """Rows per block of the pass over the rows for ``p`` columns.

    At least twice the factor's own rows, so stacking the factor on each block
    adds at most half to the work; otherwise ``BLOCK_WORK / (p + 2)²``.
    """
    q = int(p) + 2
    return int(max(2 * q, 256, BLOCK_WORK // (q * q)))


def one_blas_thread():
    """A context in which BLAS/LAPACK use one thread (threadpoolctl; nothing when absent).

    The limit is process-wide while it lasts: other threads' BLAS calls run on one
    thread too, which is what a GUI fitting in a worker thread wants anyway.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - a declared dependency
        return contextlib.nullcontext()
    # SciPy carries its own OpenBLAS beside numpy's, and a limit covers only the libraries
    # loaded when it is set: loaded here, or the first LAPACK calls of a fit run on every
    # core (measured: 4-6 s of CPU for the OLS pass at 100,000 × 100 against 0.4 s).
    import scipy.linalg  # noqa: F401
    return threadpool_limits(limits=1, user_api="blas")


def fit_ols(design, pins: Sequence[str] = (), rank_tol: Optional[float] = None, *,
            chunk_rows: Optional[int] = None, factor=None, group_stats=None, stats=None) -> OLSResult:
    """Weighted least squares with intercept, setting aside columns the others reproduce.

    Parameters
    ----------
    design : regbench.data.Design
    pins : sequence of str
        Columns to keep whenever possible; when a dependency forces a choice,
        a column that is not pinned is set aside.
    rank_tol : float, optional
        Relative rank tolerance (see the module docstring): a column is set
        aside when the columns kept before it reproduce it up to ``rank_tol``
        times its weighted RMS.  Default ``100 * max(n, p) * eps`` with n the
        rows of weight above 0: round-off only.
    chunk_rows : int, optional
        Rows per block of the pass over the rows; default :func:`block_rows`.
        The result does not depend on it beyond round-off.
    factor : FactorRows, optional
        The rows' factor gathered elsewhere (a streamed or distributed pass,
        :func:`factor_rows`); ``design`` then needs only ``columns``.  Without
        the rows the solution is not refined on residuals; it is the QR
        solution of the factor.
    group_stats : sequence of GramStats, optional
        With ``factor``: each group's weighted cross-products over its rows (a streamed
        pass), from which the cluster-robust standard errors follow without the rows.
    stats : GramStats, optional
        The weighted cross-products of the same rows (the engine's one pass).
        When the centred columns are well conditioned (:func:`factor_from_stats`)
        the factor is their Cholesky factor and OLS makes no QR pass over the rows;
        every route that has the statistics decides the same way, so they agree.

    Returns
    -------
    OLSResult
        Coefficients and inference (weighted, as weighted least squares with
        weights ``w``: residual variance ``sum(w e²) / (n - rank - 1)``) over all
        design columns; set-aside columns hold coef 0.0 and NaN inference, and
        each has a :class:`SetAside` explaining the combination of kept
        columns that reproduces it.  ``n_obs`` counts rows of weight above 0;
        ``rank`` counts kept columns (the intercept not included).

    Raises
    ------
    ModelError
        Pinned columns that are not design columns, pinned columns that
        depend on each other (named), non-finite values or bad weights.
    """
    with one_blas_thread():
        return _fit_ols(design, pins, rank_tol, chunk_rows, factor, group_stats, stats)


def _fit_ols(design, pins, rank_tol, chunk_rows, factor=None, group_stats=None, stats=None) -> OLSResult:
    columns = tuple(design.columns)
    p = len(columns)
    fac = None
    if stats is not None:
        fac = factor_from_stats(stats, design if factor is None else None, chunk_rows,
                                n=None if factor is None else factor.n)
    if fac is None:
        fac = weighted_factor(design, chunk_rows) if factor is None else factor
    pin_idx = _pin_positions(pins, columns)
    if rank_tol is not None and not (np.isfinite(rank_tol) and rank_tol >= 0):
        raise ModelError(f"rank tolerance must be a number >= 0, got {rank_tol!r}")
    roundoff = default_rank_tol(fac.n, p)
    tol = roundoff if rank_tol is None else float(rank_tol)
    sc = _Scales(fac)
    # The factor of the centered columns and target, ``sqrt(w/W)·[x - m, y - ybar]``; only
    # its first min(n, p+1) rows can be non-zero (a wide table has fewer rows than columns).
    m_rows = min(fac.n, p + 1)
    Raug = fac.R[1:m_rows + 1, 1:]
    # ``C``: coordinates of the columns centered and at unit weighted SD (rank decisions
    # and solving: offset- and scale-free).
    C = Raug[:, :p] / sc.scale
    qz = Raug[:, p]
    _check_pins(C, pin_idx, columns, tol, sc.constant, sc.rel_size)
    kept, row_limited = _ordered_choice(C, pin_idx, tol, sc.constant, sc.rel_size, fac.n)
    kept = sorted(kept)
    aside = [j for j in range(p) if j not in set(kept)]

    beta_k, icpt, Rk = _solve_kept(C, qz, kept, fac, sc.scale)
    counts = bool(getattr(design, "counts", False))
    stats = _inference(fac, p, kept, beta_k, icpt, Rk, sc.scale, counts)
    xtwx_inv = stats.pop("xtwx_inv")

    cl_se, cl_icpt_se, n_clusters = None, float("nan"), 0
    if getattr(design, "groups", None) is not None and fac.rows.has_rows:
        resid = fac.rows.residuals(_full(p, kept, beta_k), icpt)
        cl_se, cl_icpt_se, n_clusters = _cluster_se(design, fac.rows, kept, fac.mean, resid, xtwx_inv, fac.W,
                                                    stats["observations"], p)
    elif group_stats is not None and len(group_stats):
        scores = _group_scores(group_stats, kept, beta_k, fac.mean, fac.ybar)
        cl_se, cl_icpt_se, n_clusters = _sandwich(scores, kept, fac.mean, xtwx_inv, fac.W, stats["observations"], p)

    sources = tuple(getattr(design, "sources", columns) or columns)
    set_aside = _explain_all(aside, kept, C, columns, fac.rows, fac.W, fac.mean, fac.sd, sc.scale, sc.size,
                             sc.rel_size, roundoff, tol, sc.constant, row_limited, fac.n, sources)
    coef = stats["coef"]
    model = LinearModel(
        name="ols", columns=columns, intercept=float(icpt), coef=coef.copy(),
        coef_std=coef * fac.sd,
    )
    return OLSResult(
        columns=columns,
        kept=tuple(columns[j] for j in kept),
        set_aside=set_aside,
        intercept=float(icpt),
        n_obs=int(fac.n),
        rank=len(kept),
        rank_tol=float(tol),
        model=model,
        r_factor=fac.R,
        weights_kind="counts" if counts else "precision",
        cluster_std_errors=cl_se,
        cluster_intercept_se=float(cl_icpt_se),
        n_clusters=int(n_clusters),
        **stats,
    )


def _pin_positions(pins, columns) -> list:
    """Positions of the pinned columns (each once, in the order given); an unknown one is refused."""
    pins = tuple(dict.fromkeys(pins))
    for c in pins:
        if c not in columns:
            raise ModelError(
                f"pinned column '{c}' is not a design column; design columns are: {', '.join(columns)}"
            )
    return [columns.index(c) for c in pins]


class _Scales:
    """Per-column sizes the rank decisions are measured against (see the module docstring)."""

    def __init__(self, fac):
        sd, mean = fac.sd, fac.mean
        #: Weighted SD, 1 where a column has none (coordinates at unit SD).
        self.scale = np.where(sd > 0, sd, 1.0)
        # Typical size of each column (weighted RMS about zero): its stored values carry
        # round-off of about eps times this, whatever its spread.
        size = np.sqrt(sd * sd + mean * mean)
        self.size = np.where(size > 0, size, 1.0)
        #: Relative round-off of each column's stored values, measured against its spread.
        self.rel_size = self.size / self.scale
        #: No spread beyond the round-off of its values.
        self.constant = sd <= DATA_ROUNDOFF * EPS * self.size


def _solve_kept(C, qz, kept, fac, scale):
    """Coefficients (original units) of the kept columns, the intercept and the kept columns' R.

    Solved through a QR of their coordinates (no normal equations), then refined on residuals
    computed in original units (corrected semi-normal equations with the same triangular
    factor, Björck 1996, section 6.6) when the rows are at hand.
    """
    from scipy import linalg

    if not kept:
        return np.zeros(0), fac.ybar, None
    rows, mean, W, p = fac.rows, fac.mean, fac.W, C.shape[1]
    k = len(kept)
    if k == p and C.shape[0] > p and not np.any(np.tril(C, -1)):
        # Every column kept and ``C`` already triangular: it is its own QR (Q the identity).
        Rk = np.triu(C[:k])
        b = linalg.solve_triangular(Rk, qz[:k], check_finite=False)
    else:
        Qk, Rk = linalg.qr(C[:, kept], mode="economic", check_finite=False)
        b = linalg.solve_triangular(Rk, Qk.T @ qz, check_finite=False)
    beta_k = b / scale[kept]
    icpt = fac.ybar - mean[kept] @ beta_k
    for _ in range(2 if rows.has_rows else 0):
        e = rows.residuals(_full(p, kept, beta_k), icpt)
        ebar = (rows.w @ e) / W
        v = (rows.w / W) * (e - ebar)
        g = (rows.vecmat(v)[kept] - mean[kept] * v.sum()) / scale[kept]
        db = linalg.solve_triangular(
            Rk, linalg.solve_triangular(Rk, g, trans="T", check_finite=False), check_finite=False)
        beta_k = beta_k + db / scale[kept]
        icpt = icpt + ebar - mean[kept] @ (db / scale[kept])
    return beta_k, icpt, Rk


def _inference(fac, p, kept, beta_k, icpt, Rk, scale, counts) -> dict:
    """Fit quality, classical standard errors, t, p and 95% intervals, as :class:`OLSResult` fields.

    Also ``xtwx_inv``, ``(X_k' W X_k)⁻¹`` on the centered kept columns, which the cluster-robust
    standard errors need.
    """
    # scipy.special's Student t functions, not scipy.stats: the latter costs a second of start-up.
    from scipy import linalg, special

    rows, n, W, mean = fac.rows, fac.n, fac.W, fac.mean
    k = len(kept)
    aside = [j for j in range(p) if j not in set(kept)]
    ssr, tss = rows.sums_of_squares(_full(p, kept, beta_k), icpt, fac.ybar)
    # Observations behind the fit: with count rows, a row of weight w is w observations,
    # so inference equals that of the table with every row written out w times.
    n_eff = float(W) if counts else float(n)
    df = n_eff - k - 1
    r2 = 1.0 - ssr / tss if tss > 0 else float("nan")
    adj = 1.0 - (n_eff - 1) / df * (1.0 - r2) if df > 0 else float("nan")
    sigma2 = ssr / df if df > 0 else float("nan")
    note = ""
    if not df > 0:
        what = f"{count_text(n_eff, 'observation')}" if counts else f"{count_text(n, 'row')}"
        note = (f"No standard errors or p-values: the intercept and {count_text(k, 'kept column')} fit all {what} "
                "exactly, so no residual degrees of freedom are left to measure the noise.")

    coef = np.zeros(p)
    se = np.full(p, np.nan)
    coef[kept] = beta_k
    if k:
        Rinv = linalg.solve_triangular(Rk, np.eye(k), check_finite=False)
        cov_scaled = Rinv @ Rinv.T  # (A_k' A_k)^-1 on the centered unit-SD columns
        xtwx_inv = cov_scaled / (W * np.outer(scale[kept], scale[kept]))  # (X_k' W X_k)^-1, centered
        cov = sigma2 * xtwx_inv
        se[kept] = np.sqrt(np.diag(cov))
        m = mean[kept]
        icpt_se = float(np.sqrt(sigma2 / W + m @ cov @ m))
    else:
        xtwx_inv = np.zeros((0, 0))
        icpt_se = float(np.sqrt(sigma2 / W))
    with np.errstate(divide="ignore", invalid="ignore"):
        tval = coef / se
    tval[aside] = np.nan
    if df > 0:
        pval = 2.0 * special.stdtr(df, -np.abs(tval))
        q = special.stdtrit(df, 0.975)
    else:
        pval = np.full(p, np.nan)
        q = np.nan
    ci_low = coef - q * se
    ci_high = coef + q * se
    for arr in (pval, ci_low, ci_high):
        arr[aside] = np.nan
    return dict(coef=coef, std_errors=se, t_values=tval, p_values=pval, ci_low=ci_low, ci_high=ci_high,
                intercept_se=icpt_se, r_squared=float(r2), adj_r_squared=float(adj),
                residual_sd=float(np.sqrt(sigma2)), df_resid=float(df), observations=n_eff,
                inference_note=note, xtwx_inv=xtwx_inv)


def _cluster_se(design, rows, kept, mean, resid, xtwx_inv, W, n_eff, p):
    """Cluster-robust (by group) standard errors of the kept coefficients and the intercept.

    Sandwich ``V = c · B (Σ_g s_g s_gᵀ) B`` with ``B = (Zᵀ W Z)⁻¹`` for ``Z = [1, x - m]``
    (the kept columns centered), ``s_g = Σ_{i in g} w_i e_i z_i``, and the small-sample
    factor ``c = G/(G-1) · (N-1)/(N-K)`` (G groups, N observations, K kept columns plus
    the intercept), which is statsmodels' default for ``cov_type="cluster"``.
    """
    from scipy import sparse

    g_all = np.asarray(design.groups)
    g = g_all if rows.all_pos else g_all[rows.pos]
    labels, code = np.unique(g, return_inverse=True)
    G = labels.size
    k = len(kept)
    S = np.zeros((G, k + 1))
    we = rows.w * resid
    every = k == p
    for a, b, block in rows.blocks():
        # Column-ordered like the design's rows: written straight in, no transposing copy.
        Zb = np.empty((b - a, k + 1), order="F")
        Zb[:, 0] = we[a:b]
        np.subtract(block if every else block[:, kept], mean[kept], out=Zb[:, 1:])
        Zb[:, 1:] *= we[a:b, None]
        ind = sparse.csr_matrix((np.ones(b - a), (code[a:b], np.arange(b - a))), shape=(G, b - a))
        S += ind @ Zb
    return _sandwich(S, kept, mean, xtwx_inv, W, n_eff, p)


def _group_scores(group_stats, kept, beta_k, mean, ybar) -> np.ndarray:
    """Each group's score ``s_g = Σ_{i in g} w_i e_i z_i`` (``z = [1, x - m]``) from its cross-products.

    About the reference point (m, ȳ), with ``e = (y - ȳ) - (x - m)ᵀβ``:
    ``s_g = [Σw(y-ȳ) - Σw(x-m)ᵀβ,  Σw(x-m)(y-ȳ) - Σw(x-m)(x-m)ᵀβ]``.  Each group's
    statistics are recentred on (m, ȳ) first (its centred co-moments plus the offset of
    its mean, nothing cancelling); groups without weight have no score.
    """
    k = len(kept)
    rows = []
    for st in group_stats:
        if not st.W > 0:
            continue
        r = st.recentred(mean, ybar)
        s = np.empty(k + 1)
        s[0] = r.sy - r.sx[kept] @ beta_k
        s[1:] = r.xy[kept] - r.xx[np.ix_(kept, kept)] @ beta_k
        rows.append(s)
    return np.array(rows).reshape(len(rows), k + 1)


def _sandwich(S, kept, mean, xtwx_inv, W, n_eff, p):
    """The cluster-robust standard errors from the groups' scores ``S`` (G × (k+1)); see :func:`_cluster_se`."""
    G = S.shape[0]
    k = len(kept)
    B = np.zeros((k + 1, k + 1))
    B[0, 0] = 1.0 / W
    B[1:, 1:] = xtwx_inv
    K = k + 1
    c = (G / (G - 1.0)) * ((n_eff - 1.0) / (n_eff - K)) if G > 1 and n_eff > K else float("nan")
    # V = c·J B SᵀS B Jᵀ, J taking the intercept at the means back to the intercept at zero
    # (b0 = a - mᵀβ).  Only its diagonal is wanted: the squared row lengths of U = J B Sᵀ,
    # K×G, instead of three K×K products.
    U = B @ S.T
    U[0] -= mean[kept] @ U[1:]
    se = np.full(p, np.nan)
    d = np.sqrt(np.clip(c * np.einsum("ij,ij->i", U, U), 0.0, None))
    se[kept] = d[1:]
    return se, float(d[0]), int(G)


def _full(p, idx, values) -> np.ndarray:
    out = np.zeros(p)
    out[idx] = values
    return out


class _Rows:
    """The rows of weight above 0, visited block by block (no copy of the whole design)."""

    def __init__(self, X, y, w, pos, chunk):
        self.X = X
        self.pos = pos
        self.all_pos = bool(pos.all())
        self.y = y if self.all_pos else y[pos]
        self.w = w if self.all_pos else w[pos]
        self.n = int(self.w.shape[0])
        self.chunk = max(int(chunk), 1)

    def blocks(self):
        """``(start, stop, X block)`` over the kept rows; start/stop index ``self.y``, ``self.w``."""
        N = self.X.shape[0]
        done = 0
        for a in range(0, N, self.chunk):
            block = self.X[a:a + self.chunk]
            if not self.all_pos:
                block = block[self.pos[a:a + self.chunk]]
            m = block.shape[0]
            if m:
                yield done, done + m, block
            done += m

    def products(self, B) -> np.ndarray:
        """``X @ B`` over the kept rows, block by block."""
        out = np.empty((self.n,) + B.shape[1:])
        for a, b, block in self.blocks():
            out[a:b] = block @ B
        return out

    has_rows = True

    _last = None

    def residuals(self, beta, icpt) -> np.ndarray:
        # The fit's final residuals are asked for twice (sums of squares, group-robust errors):
        # the last answer is kept so the rows are read once.
        last = self._last
        if last is not None and last[1] == icpt and np.array_equal(last[0], beta):
            return last[2]
        resid = self.y - icpt - self.products(beta)
        self._last = (np.array(beta, copy=True), icpt, resid)
        return resid

    def sums_of_squares(self, beta, icpt, ybar):
        """Weighted residual and total sums of squares of a fit."""
        resid = self.residuals(beta, icpt)
        return float(self.w @ (resid * resid)), float(self.w @ ((self.y - ybar) ** 2))

    def weighted_ss(self, B, c, shift=None) -> np.ndarray:
        """``sum_i w_i (x_i @ B - c)²`` per column of ``B``, block by block.

        With ``shift`` (the weighted column means) the rows are centered first and ``c`` is
        taken as ``shift @ B`` (the intercept through the means), so a column with a large
        offset does not round the leftover at the size of the offset.
        """
        acc = np.zeros(B.shape[1])
        if shift is not None:
            c = 0.0
        for a, b, block in self.blocks():
            left = (block @ B if shift is None else (block - shift) @ B) - c
            acc += self.w[a:b] @ (left * left)
        return acc

    def vecmat(self, v) -> np.ndarray:
        """``v @ X`` over the kept rows, block by block."""
        acc = np.zeros(self.X.shape[1])
        for a, b, block in self.blocks():
            acc += v[a:b] @ block
        return acc


class _FactorOnly:
    """Stands in for the rows when only their factor is at hand (streamed or distributed pass).

    ``R`` is the factor of ``sqrt(w/W)·[1, x, y]``, so ``Σ w (x·B − c)² = W·‖R₁[−c; B]‖²``
    for the leading block ``R₁``; sums of squares need no row.
    """

    has_rows = False

    def __init__(self, R, W, n):
        self.R = R
        self.W = W
        self.n = n

    def sums_of_squares(self, beta, icpt, ybar):
        p = beta.shape[0]
        v = np.concatenate([[-icpt], -beta, [1.0]])
        ssr = self.W * float(np.sum((self.R @ v) ** 2))
        tss = self.W * float(np.sum(self.R[1:, p + 1] ** 2))
        return ssr, tss

    def weighted_ss(self, B, c, shift=None) -> np.ndarray:
        q = B.shape[0] + 1
        if shift is not None:  # centered: the intercept through the means
            return self.W * np.sum((self.R[1:q, 1:q] @ B) ** 2, axis=0)
        V = np.vstack([-np.asarray(c, dtype=float)[None, :], B])
        return self.W * np.sum((self.R[:q, :q] @ V) ** 2, axis=0)


def factor_rows(R, W: float, n: int) -> "_Factor":
    """What :func:`fit_ols` needs from a factor gathered without the rows.

    Parameters
    ----------
    R : ndarray (p+2, p+2)
        The factor of ``sqrt(w/W)·[1, x, y]`` (as :attr:`OLSResult.r_factor`).
    W : float
        Sum of the weights.
    n : int
        Rows of weight above 0.
    """
    R = np.asarray(R, dtype=np.float64)
    p = R.shape[0] - 2
    mean = R[0, 1:p + 1].copy()
    sd = np.sqrt(np.sum(R[1:, 1:p + 1] ** 2, axis=0))
    return _Factor(rows=_FactorOnly(R, float(W), int(n)), n=int(n), W=float(W), mean=mean,
                   ybar=float(R[0, p + 1]), sd=sd, R=R)


class _Factor:
    __slots__ = ("rows", "n", "W", "mean", "ybar", "sd", "R")

    def __init__(self, **kw):
        for k, v in kw.items():
            setattr(self, k, v)


def factor_from_stats(stats, design=None, chunk_rows: Optional[int] = None, n: Optional[int] = None):
    """The factor :func:`weighted_factor` returns, from the cross-products when that is accurate.

    ``RᵀR`` is the centred co-moment matrix of ``(x, y)`` over ``W``, so its Cholesky factor is
    the factor of ``sqrt(w/W)·[x - m, y - ȳ]`` up to the signs of its rows.  It is taken only
    when the centred columns at unit SD have a condition number (from the eigenvalues of their
    correlation matrix) of at most :data:`GRAM_FACTOR_MAX_COND`, none is constant, and the columns
    leave at least :data:`GRAM_FACTOR_MIN_LEFT` of the target's spread over; else None, and the
    caller factors the rows (or uses a factor gathered with them).

    Parameters
    ----------
    stats : GramStats
        Weighted cross-products of the rows (any shift).
    design : Design, optional
        The rows themselves, kept for the refinement and the measures on residuals;
        without them (a streamed or distributed pass) ``n`` is required.
    chunk_rows : int, optional
        Rows per block of the later passes over the rows.
    n : int, optional
        Rows of weight above 0, when ``design`` is not given.
    """
    from scipy.linalg import lapack

    p = stats.p
    q = p + 1
    if not stats.W > 0 or p == 0:
        return None
    mean, ybar = stats.mean_x(), stats.mean_y()
    A = np.empty((q, q))
    A[:p, :p] = stats.centered_xx()
    A[:p, p] = A[p, :p] = stats.centered_xy()
    A[p, p] = stats.centered_yy()
    A /= stats.W
    if not np.all(np.isfinite(A)) or not np.all(np.isfinite(mean)):
        return None  # a non-finite value: the pass over the rows names its row
    sd = np.sqrt(np.clip(np.diag(A), 0.0, None))
    size = np.sqrt(sd[:p] ** 2 + mean ** 2)
    if not (np.all(sd > 0) and np.all(sd[:p] > DATA_ROUNDOFF * EPS * size)):
        return None
    S = A / np.outer(sd, sd)
    evals = np.linalg.eigvalsh(S[:p, :p])
    if not (evals[0] > 0 and evals[-1] <= GRAM_FACTOR_MAX_COND ** 2 * evals[0]):
        return None
    Rs, info = lapack.dpotrf(S, lower=0, clean=1)
    if info != 0 or not Rs[p, p] ** 2 >= GRAM_FACTOR_MIN_LEFT:
        return None
    if design is not None:
        X = np.asarray(design.X, dtype=np.float64)
        y = np.asarray(design.y, dtype=np.float64)
        w = np.asarray(design.weights, dtype=np.float64)
        _check_inputs(design, X, y, w)
        rows = _Rows(X, y, w, w > 0, block_rows(p) if chunk_rows is None else chunk_rows)
        n = rows.n
    R = np.zeros((q + 1, q + 1))
    R[0, 0] = 1.0
    R[0, 1:p + 1] = mean
    R[0, p + 1] = ybar
    R[1:, 1:] = Rs * sd
    if design is None:
        rows = _FactorOnly(R, float(stats.W), int(n))
    return _Factor(rows=rows, n=int(n), W=float(stats.W), mean=mean, ybar=float(ybar), sd=sd[:p], R=R)


def weighted_factor(design, chunk_rows: Optional[int] = None) -> _Factor:
    """Check the design and factor its weighted rows in one blocked pass (after the means).

    Returns an object with the kept rows (``rows``), ``n`` (rows of weight above 0),
    ``W``, the weighted ``mean`` of each column, ``ybar``, the weighted SD ``sd`` and ``R``:
    the (p+2)×(p+2) triangular factor of ``sqrt(w/W)·[1, x, y]`` (see
    :attr:`OLSResult.r_factor`).  The columns are centered before the QR (the centered
    part is the factor's lower block; the means go in its first row), which keeps the
    accuracy of a QR of centered columns.
    """
    X_all = np.asarray(design.X, dtype=np.float64)
    y_all = np.asarray(design.y, dtype=np.float64)
    w_all = np.asarray(design.weights, dtype=np.float64)
    p = X_all.shape[1]
    _check_inputs(design, X_all, y_all, w_all)
    pos = w_all > 0
    rows = _Rows(X_all, y_all, w_all, pos, block_rows(p) if chunk_rows is None else chunk_rows)
    w, y, n = rows.w, rows.y, rows.n
    W = w.sum()

    # Pass 1: finiteness (first bad row, in row order) and the weighted column sums.
    # The sums are taken about the first row's values: a column with a large offset (a year
    # written as 1e8 + x) then gets its mean to the round-off of its spread, not of its size,
    # which the centered factor below needs.
    kept_rows = np.flatnonzero(pos) if not rows.all_pos else None
    total = np.zeros(p)
    origin = None
    for a, b, block in rows.blocks():
        if origin is None:
            origin = np.where(np.isfinite(block[0]), block[0], 0.0)
        finite = np.isfinite(block)
        if not finite.all():
            r, c = np.argwhere(~finite)[0]
            i = a + int(r)
            i = int(kept_rows[i]) if kept_rows is not None else i
            raise ModelError(
                f"row {int(design.row_numbers[i])}: column '{design.columns[c]}' is not a finite number"
            )
        total += w[a:b] @ (block - origin)
    mean = origin + total / W
    ybar = y[0] + (w @ (y - y[0])) / W
    sqw = np.sqrt(w / W)

    # Pass 2: tall-skinny QR of [x - m, y - ybar] rows scaled by sqrt(w/W): the factor so
    # far sits on top of each new block, so each LAPACK call is short.
    q = p + 1
    ss = np.zeros(p)
    Rc = np.zeros((0, q))  # the factor so far: at most q rows (fewer while rows are fewer)
    buf = None
    for a, b, block in rows.blocks():
        m = b - a
        r = Rc.shape[0]
        if buf is None or buf.shape[0] != r + m:
            buf = np.empty((r + m, q), order="F")
        buf[:r] = Rc
        Z = buf[r:]
        np.subtract(block, mean, out=Z[:, :p])
        Z[:, :p] *= sqw[a:b, None]
        Z[:, p] = sqw[a:b] * (y[a:b] - ybar)
        ss += np.einsum("ij,ij->j", Z[:, :p], Z[:, :p])
        Rc = _block_r(buf)
    if Rc.shape[0] < q:
        # A wide table (fewer rows than columns): the factor's lower rows are zero.
        Rc = np.vstack([Rc, np.zeros((q - Rc.shape[0], q))])
    sd = np.sqrt(ss)
    Rc[:, :p][:, sd == 0] = 0.0
    R = np.zeros((q + 1, q + 1))
    R[0, 0] = 1.0
    R[0, 1:p + 1] = mean
    R[0, p + 1] = ybar
    R[1:, 1:] = Rc
    return _Factor(rows=rows, n=n, W=W, mean=mean, ybar=ybar, sd=sd, R=R)


def r_factor(M: np.ndarray) -> np.ndarray:
    """The square upper-triangular R of a Householder QR of ``M`` (n >= p), overwriting ``M``.

    LAPACK ``geqrf`` directly: no Q is formed and no n×p triangular copy is made.
    """
    from scipy import linalg

    geqrf, = linalg.get_lapack_funcs(("geqrf",), (M,))
    _, _, work, _ = geqrf(M, lwork=-1)
    qr, _, _, info = geqrf(M, lwork=max(int(work[0].real), 1), overwrite_a=True)
    if info != 0:
        raise ModelError(f"the QR factorization failed (LAPACK info {info}); check the design for extreme values")
    k = min(M.shape)
    return np.triu(qr[:k, :])  # k×p: upper trapezoidal when M has fewer rows than columns


def _check_inputs(design, X, y, w) -> None:
    if w.shape[0] != X.shape[0] or y.shape[0] != X.shape[0]:
        raise ModelError("the design's target, weights and predictors have different numbers of rows")
    bad = ~np.isfinite(w) | (w < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ModelError(
            f"row {int(design.row_numbers[i])}: weight {w[i]!r} is not a finite number >= 0; fix or exclude the row"
        )
    if not np.any(w > 0):
        raise ModelError("every weight is zero; at least one row must have a weight above 0")
    pos = w > 0
    if not np.all(np.isfinite(y[pos])):
        i = int(np.flatnonzero(pos & ~np.isfinite(y))[0])
        raise ModelError(f"row {int(design.row_numbers[i])}: target '{design.target}' is not a finite number")
    # The predictors are checked block by block in the pass over the rows.


class _Walk:
    """Gram–Schmidt (twice) over unit-SD column coordinates, with the triangular factor of
    the kept columns so the combination reproducing a candidate is known."""

    def __init__(self, m):
        # Kept directions fill a Fortran-ordered buffer column by column (no copy of Q per column kept:
        # at 1,000 columns the copies cost more than the projections).
        self._Q = np.zeros((m, 16), order="F")
        self.R = np.zeros((0, 0))
        self.idx = []

    @property
    def Q(self):
        return self._Q[:, :len(self.idx)]

    def project(self, v):
        Q = self.Q
        if not self.idx:
            return v.copy(), np.zeros(0), np.zeros(0)
        c1 = Q.T @ v
        r = v - Q @ c1
        c2 = Q.T @ r
        r = r - Q @ c2
        coords = c1 + c2
        from scipy import linalg

        cs = linalg.solve_triangular(self.R, coords, check_finite=False)
        return r, coords, cs

    def add(self, j, r, coords, nr):
        k = len(self.idx)
        R = np.zeros((k + 1, k + 1))
        R[:k, :k] = self.R
        R[:k, k] = coords
        R[k, k] = nr
        self.R = R
        if k == self._Q.shape[1]:
            grown = np.zeros((self._Q.shape[0], 2 * k), order="F")
            grown[:, :k] = self._Q
            self._Q = grown
        self._Q[:, k] = r / nr
        self.idx.append(j)


def _tolerance(tol, j, cs, kept, rel_size) -> float:
    """Left-over (at unit SD) below which column j counts as reproduced by ``kept`` with
    standardized weights ``cs``: the rank tolerance plus the round-off its own stored
    values and those of the combination carry (eps times each size over the spread)."""
    data = rel_size[j] + (float(np.abs(cs) @ rel_size[kept]) if len(kept) else 0.0)
    return tol + DATA_ROUNDOFF * EPS * data


def _ordered_choice(C, pin_idx, tol, constant, rel_size, n) -> tuple:
    """Walk pins then design order; keep a column when what the kept columns leave of it
    is above its tolerance (:func:`_tolerance`).

    Returns the kept indices and whether the rows ran out: the kept columns and the
    intercept already fit every row of weight above 0 exactly (``n - 1`` kept), so later
    columns are set aside for want of rows, not because of what they are.
    """
    p = C.shape[1]
    if not pin_idx and not constant.any() and _every_column_kept(C, tol, rel_size):
        return list(range(p)), p >= max(n - 1, 0) and p > 0
    order = list(pin_idx) + [j for j in range(p) if j not in set(pin_idx)]
    walk = _Walk(C.shape[0])
    full_at = None
    for j in order:
        if constant[j]:
            continue
        if len(walk.idx) >= max(n - 1, 0):
            full_at = len(walk.idx) if full_at is None else full_at
            continue
        r, coords, cs = walk.project(C[:, j])
        nr = float(np.linalg.norm(r))
        if nr > _tolerance(tol, j, cs, walk.idx, rel_size):
            walk.add(j, r, coords, nr)
    row_limited = len(walk.idx) >= max(n - 1, 0) and len(walk.idx) > 0
    return list(walk.idx), row_limited


#: The walk's answer is read from the factor's diagonal only when every left-over clears its
#: tolerance by this factor (the walk's own round-off is a few eps of each left-over).
CLEAR_MARGIN = 2.0


def _every_column_kept(C, tol, rel_size) -> bool:
    """Whether the walk in design order would keep every column, read from the triangle ``C``.

    ``C`` is upper triangular, so what the columns before ``j`` leave of column ``j`` is
    ``|C[j, j]|`` and the combination of them that comes closest is
    ``C[:j, :j]⁻¹ C[:j, j] = −C[j, j]·(C⁻¹)[:j, j]``: one triangular inverse gives every
    step of the walk at once.  When every left-over is above :data:`CLEAR_MARGIN` times its
    tolerance (:func:`_tolerance`) the answer is the walk's; otherwise the caller walks.
    """
    from scipy.linalg import lapack

    p = C.shape[1]
    if p == 0 or C.shape[0] < p:
        return False
    T = np.ascontiguousarray(C[:p, :p])
    d = np.abs(np.diag(T))
    if not np.all(d > 0):
        return False
    Tinv, info = lapack.dtrtri(T, lower=0)
    if info != 0 or not np.all(np.isfinite(Tinv)):
        return False
    # Σ_k |c_k|·rel_size_k over the columns before j, for every j.
    spread = d * (rel_size @ np.triu(np.abs(Tinv), 1))
    need = tol + DATA_ROUNDOFF * EPS * (rel_size + spread)
    return bool(np.all(d > CLEAR_MARGIN * need))


def _check_pins(C, pin_idx, columns, tol, constant, rel_size) -> None:
    """Pinned columns must be independent of each other (and not constant)."""
    walk = _Walk(C.shape[0])
    for j in pin_idx:
        if constant[j]:
            raise ModelError(
                f"pinned column '{columns[j]}' is constant on every row with weight (up to the round-off of "
                "its values), so the intercept already carries it; unpin it"
            )
        r, coords, cs = walk.project(C[:, j])
        nr = float(np.linalg.norm(r))
        if nr <= _tolerance(tol, j, cs, walk.idx, rel_size):
            big = np.abs(cs) > NEGLIGIBLE_TERM * max(np.abs(cs).max(initial=0.0), 1e-300)
            names = [columns[walk.idx[i]] for i in np.flatnonzero(big)] or [columns[i] for i in walk.idx]
            raise ModelError(
                f"pinned columns {join_words([*names, columns[j]])} depend on each other "
                f"('{columns[j]}' is reproduced by {join_words(names)}), so they cannot all be kept; "
                "unpin one of them"
            )
        walk.add(j, r, coords, nr)


def _explain_all(aside, kept, C, columns, rows, W, mean, sd, scale, size, rel_size, roundoff, tol,
                 constant, row_limited, n, sources) -> tuple:
    """A :class:`SetAside` for each column of ``aside``: the combination of kept columns
    (and intercept) that reproduces it, or why there is none to give.

    A column whose spread is within the round-off of its values is explained by the
    intercept alone (constant).  When the rows ran out (the kept columns and the
    intercept fit every row exactly), a column whose combination needs more than half
    of the kept columns is reported as set aside for want of rows: any column would be
    reproduced then, so the combination says nothing about the columns.  The
    combinations come from the coordinates ``C`` (one solve for all columns); what
    each leaves over is measured on the rows in original units, in one blocked pass.
    """
    plans, cols, icpts = _plan_explanations(aside, kept, C, mean, scale, constant, row_limited)
    res_of = (np.sqrt(rows.weighted_ss(np.column_stack(cols), np.asarray(icpts), mean) / W) if cols
              else np.zeros(0))
    out = []
    for j, kind, a, b in plans:
        name = columns[j]
        if kind == "constant":
            res = float(res_of[b])
            rel = res / sd[j] if sd[j] > 0 else 0.0
            out.append(SetAside(column=name, combination={}, intercept=a, residual=res,
                                alternatives=(), relative_residual=float(rel),
                                exact=bool(constant[j]), reason="constant"))
        elif kind == "rows":
            out.append(SetAside(column=name, combination={}, intercept=float(mean[j]), residual=0.0,
                                alternatives=(), relative_residual=0.0, exact=True, reason="too_few_rows",
                                rows=int(n), kept_count=len(kept)))
        else:
            out.append(_combination_explained(j, a, b, res_of, columns, sd, roundoff, rel_size, sources))
    return tuple(out)


def _plan_explanations(aside, kept, C, mean, scale, constant, row_limited):
    """What to say of each set-aside column, and the left-overs to measure on the rows.

    Returns ``plans``, one ``(j, kind, a, b)`` per column: ``("constant", mean, at)``,
    ``("rows", …)``, or ``("combination", first, second)`` with each candidate
    ``(support, coef, intercept, at, standardized coef)`` (``second`` on the terms that are
    not round-off, or None); ``at`` indexes the columns ``cols`` of ``X @ B - c`` whose
    weighted size is the left-over, with ``icpts`` the ``c``.
    """
    from scipy import linalg

    p = C.shape[1]
    plans, cols, icpts = [], [], []

    def candidate(j, support, coef, icpt):
        # Column j minus the combination, as one column of X @ B - c.
        b = np.zeros(p)
        b[j] = 1.0
        b[support] -= coef
        cols.append(b)
        icpts.append(icpt)
        return len(cols) - 1

    todo = [j for j in aside if not (constant[j] or not kept)]
    cs_all = {}
    if todo:
        Qk, Rk = linalg.qr(C[:, kept], mode="economic", check_finite=False)
        sol = linalg.solve_triangular(Rk, Qk.T @ C[:, todo], check_finite=False)
        cs_all = {j: sol[:, i] for i, j in enumerate(todo)}
    for j in aside:
        if j not in cs_all:
            value = float(mean[j])
            plans.append((j, "constant", value, candidate(j, [], np.zeros(0), value)))
            continue
        cs = cs_all[j]
        big = np.abs(cs) > NEGLIGIBLE_TERM * np.abs(cs).max()
        support = [kept[i] for i in np.flatnonzero(big)]
        if row_limited and len(support) > len(kept) // 2:
            plans.append((j, "rows", cs, None))
            continue
        coef = cs * scale[j] / scale[kept]
        icpt = float(mean[j] - mean[kept] @ coef)
        first = (list(kept), coef, icpt, candidate(j, list(kept), coef, icpt), cs)
        second = None
        if len(support) < len(kept):
            cs2, *_ = np.linalg.lstsq(C[:, support], C[:, j], rcond=None)
            coef2 = cs2 * scale[j] / scale[support]
            icpt2 = float(mean[j] - mean[support] @ coef2)
            second = (support, coef2, icpt2, candidate(j, support, coef2, icpt2), cs2)
        plans.append((j, "combination", first, second))
    return plans, cols, icpts


def _combination_explained(j, first, second, res_of, columns, sd, roundoff, rel_size, sources) -> SetAside:
    """The :class:`SetAside` of a column other columns reproduce: the shorter combination when it
    leaves (almost) no more over than the full one; a category's levels named as such."""
    support, coef, icpt, at, cs = first
    res = float(res_of[at])
    if second is not None:
        support2, coef2, icpt2, at2, cs2 = second
        res2 = float(res_of[at2])
        if res2 - res <= max(1e-3 * res, roundoff * sd[j]):
            support, coef, icpt, res, cs = support2, coef2, icpt2, res2, cs2
    rel = res / sd[j]
    exact = bool(rel <= _tolerance(roundoff, j, cs, support, rel_size))
    srcs = {sources[s] for s in support}
    category = ""
    if len(srcs) == 1 and sources[j] not in srcs:
        src = next(iter(srcs))
        if all(columns[s].startswith(src + "=") for s in support):
            category = src
    return SetAside(
        column=columns[j],
        combination={columns[s]: float(c) for s, c in zip(support, coef)},
        intercept=icpt,
        residual=res,
        alternatives=tuple(columns[s] for s in support),
        relative_residual=float(rel),
        exact=exact,
        reason="category" if category else "combination",
        category=category,
    )


def _block_r(M: np.ndarray) -> np.ndarray:
    """The triangular factor of one stacked block: Cholesky QR twice where the block is well
    conditioned, else Householder (:func:`regbench.models.gram.block_factor`)."""
    from regbench.models.gram import block_factor  # gram imports this module (one_blas_thread)

    k = min(M.shape)
    if M.shape[0] < 2 * M.shape[1]:
        return r_factor(M)
    R = block_factor(M)
    return R[:k]

"""Weighted sufficient statistics of a design: the one pass over the rows.

Every penalized fit, every cross-validation fold and the held-out errors work
from the p×p quantities gathered here, so after this pass the cost no longer
grows with the number of rows.

The cross-products are *uncentred* sums over the rows of the shifted data
``x - s`` and ``y - t``, where ``s`` and ``t`` are fixed reference points (by
default the weighted means of the whole design).  Because they are plain sums,
the statistics of a training fold are the statistics of the whole design minus
those of its held-out fold, by subtraction.  Shifting by the full-data means
before accumulating keeps that subtraction accurate: without the shift the
sums of a column with a large mean (a temperature in kelvin, a year) are
dominated by ``W·mean²`` and the centred Gram, obtained by cancelling that
term, would lose as many digits as ``mean²/variance`` has.  With the shift the
remaining cancellation is only that of the fold's own mean offset, which is
small.  The full-data means cost one matrix-vector product over the rows
before the pass; it is cheap beside the pass's XᵀWX products.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

import numpy as np

from regbench.errors import ModelError

#: Bytes of one temporary block of rows; bounds the memory of the pass.
CHUNK_BYTES = 8 * 2**20
#: A centred sum of squares below this share of the sums it came from is round-off.
ROUNDOFF = 1e3 * np.finfo(float).eps


@dataclass(frozen=True)
class GramStats:
    """Weighted cross-products of the shifted design ``x - shift_x``, ``y - shift_y``.

    Attributes
    ----------
    W : float
        Sum of the row weights.
    n : int
        Number of rows.
    shift_x : ndarray (p,)
        Reference point subtracted from every row of X before accumulating.
    shift_y : float
        Reference point subtracted from y.
    sx : ndarray (p,)
        ``Σ w (x - shift_x)``.
    sy : float
        ``Σ w (y - shift_y)``.
    xx : ndarray (p, p)
        ``Σ w (x - shift_x)(x - shift_x)ᵀ`` (XᵀWX of the shifted data).
    xy : ndarray (p,)
        ``Σ w (x - shift_x)(y - shift_y)``.
    yy : float
        ``Σ w (y - shift_y)²``.
    xx_scale : ndarray (p,)
        Size of the sums behind ``diag(xx)``: for statistics obtained by
        subtraction, the larger operand's.  Round-off in ``diag(xx)`` is a few
        ulps of this, so a column whose centred sum of squares is not clearly
        above it is constant on these rows (a fold can leave a column with a
        variance of pure round-off, which must not be divided by).
    """

    W: float
    n: int
    shift_x: np.ndarray
    shift_y: float
    sx: np.ndarray
    sy: float
    xx: np.ndarray
    xy: np.ndarray
    yy: float
    xx_scale: np.ndarray = None

    @property
    def p(self) -> int:
        return self.sx.shape[0]

    def __sub__(self, other: "GramStats") -> "GramStats":
        """Statistics of the rows of ``self`` that are not in ``other`` (same shift)."""
        _same_shift(self, other)
        return GramStats(
            W=self.W - other.W, n=self.n - other.n, shift_x=self.shift_x, shift_y=self.shift_y,
            sx=self.sx - other.sx, sy=self.sy - other.sy, xx=self.xx - other.xx,
            xy=self.xy - other.xy, yy=self.yy - other.yy,
            xx_scale=np.maximum(self._scale(), other._scale()),
        )

    def __add__(self, other: "GramStats") -> "GramStats":
        """Statistics of the rows of both; with different shifts, the pairwise co-moment update."""
        if not _shifts_equal(self, other):
            return merge(self, other)
        return GramStats(
            W=self.W + other.W, n=self.n + other.n, shift_x=self.shift_x, shift_y=self.shift_y,
            sx=self.sx + other.sx, sy=self.sy + other.sy, xx=self.xx + other.xx,
            xy=self.xy + other.xy, yy=self.yy + other.yy,
            xx_scale=self._scale() + other._scale(),
        )

    def recentred(self, shift_x, shift_y) -> "GramStats":
        """The same rows' statistics about another reference point.

        ``Σ w (x - s)(x - s)ᵀ = C + W (x̄ - s)(x̄ - s)ᵀ`` with C the centred
        co-moments: the centred part is kept as it is and only the (small, when
        ``s`` is near the mean) offset term is added, so no digits cancel.
        """
        shift_x = np.asarray(shift_x, dtype=np.float64)
        shift_y = float(shift_y)
        if self.W > 0:
            mx, my = self.mean_x(), self.mean_y()
            cxx, cxy, cyy = self.centered_xx(), self.centered_xy(), self.centered_yy()
        else:
            mx, my = shift_x, shift_y
            cxx, cxy, cyy = self.xx, self.xy, self.yy
        dx = mx - shift_x
        dy = my - shift_y
        xx = cxx + self.W * np.outer(dx, dx)
        return GramStats(W=self.W, n=self.n, shift_x=shift_x, shift_y=shift_y, sx=self.W * dx,
                         sy=float(self.W * dy), xx=0.5 * (xx + xx.T), xy=cxy + self.W * dx * dy,
                         yy=float(cyy + self.W * dy * dy),
                         xx_scale=self._scale() + self.W * dx * dx)

    def centred(self) -> "GramStats":
        """The same statistics about their own weighted means (``sx`` = 0): centred co-moments."""
        if not self.W > 0:
            return self
        return self.recentred(self.mean_x(), self.mean_y())

    def _scale(self) -> np.ndarray:
        return np.diag(self.xx).copy() if self.xx_scale is None else self.xx_scale

    # Offsets of the weighted means from the shift; the centred quantities below
    # subtract W·d·dᵀ, which is small because the shift is close to the mean.
    def _dx(self) -> np.ndarray:
        return self.sx / self.W

    def _dy(self) -> float:
        return self.sy / self.W

    def mean_x(self) -> np.ndarray:
        """Weighted mean of each column."""
        return self.shift_x + self._dx()

    def mean_y(self) -> float:
        """Weighted mean of the target."""
        return float(self.shift_y + self._dy())

    def centered_xx(self) -> np.ndarray:
        """``Σ w (x - x̄)(x - x̄)ᵀ``."""
        d = self._dx()
        return self.xx - self.W * np.outer(d, d)

    def centered_xy(self) -> np.ndarray:
        """``Σ w (x - x̄)(y - ȳ)``."""
        return self.xy - self.W * self._dx() * self._dy()

    def centered_yy(self) -> float:
        """``Σ w (y - ȳ)²``."""
        return float(self.yy - self.W * self._dy() ** 2)

    def sd_x(self) -> np.ndarray:
        """Weighted population SD of each column (0 for a constant column)."""
        var = np.diag(self.centered_xx()) / self.W
        return np.sqrt(np.clip(var, 0.0, None))

    def standardized(self, zero_tol: float = 1e-12):
        """The standardized problem of these rows.

        Returns
        -------
        G : ndarray (p, p)
            ``X̃ᵀ W X̃ / W`` with X̃ the columns centred by the weighted mean and
            divided by the weighted population SD; rows and columns of
            constant columns are zero.
        c : ndarray (p,)
            ``X̃ᵀ W ỹ / W`` with ỹ = y - ȳ.
        mean : ndarray (p,)
        sd : ndarray (p,)
            Weighted population SD; a column counts as constant and gets sd 0
            when its SD is below ``zero_tol`` times (|mean| + 1) or its centred
            sum of squares is within round-off of ``xx_scale``.
        """
        if not self.W > 0:
            raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
        cxx = self.centered_xx()
        mean = self.mean_x()
        sd = np.sqrt(np.clip(np.diag(cxx) / self.W, 0.0, None))
        live = (sd > zero_tol * (np.abs(mean) + 1.0)) & (np.diag(cxx) > ROUNDOFF * self._scale())
        sd = np.where(live, sd, 0.0)
        inv = np.where(live, 1.0 / np.where(live, sd, 1.0), 0.0)
        G = cxx * np.outer(inv, inv) / self.W
        G = 0.5 * (G + G.T)
        c = self.centered_xy() * inv / self.W
        return G, c, mean, sd


def _shifts_equal(a: GramStats, b: GramStats) -> bool:
    return a.shift_y == b.shift_y and np.array_equal(a.shift_x, b.shift_x)


def _same_shift(a: GramStats, b: GramStats) -> None:
    if not _shifts_equal(a, b):
        raise ValueError("Gram statistics with different shifts cannot be subtracted; recentre one first")


def merge(a: GramStats, b: GramStats) -> GramStats:
    """Statistics of the rows of ``a`` and ``b`` together, as centred co-moments.

    The pairwise update of Chan, Golub & LeVeque (1983) in matrix form: with
    weights ``Wa``, ``Wb``, means ``ma``, ``mb`` and centred co-moments ``Ca``,
    ``Cb`` of the stacked ``z = (x, y)``::

        W = Wa + Wb,   δ = mb − ma,   m = ma + δ·Wb/W,
        C = Ca + Cb + (Wa·Wb/W) δδᵀ

    Every term is a sum of squares about a mean, so nothing cancels however
    far the data sit from zero or from each other.  The result is centred on
    its own mean (``shift`` = the mean, ``sx`` = 0).
    """
    if not a.W > 0 or not b.W > 0:
        keep, other = (b, a) if not a.W > 0 else (a, b)
        out = keep.centred()
        return GramStats(W=out.W + other.W, n=a.n + b.n, shift_x=out.shift_x, shift_y=out.shift_y, sx=out.sx,
                         sy=out.sy, xx=out.xx, xy=out.xy, yy=out.yy, xx_scale=out._scale())
    Wa, Wb = a.W, b.W
    W = Wa + Wb
    ma, mb = a.mean_x(), b.mean_x()
    ya, yb = a.mean_y(), b.mean_y()
    dx = mb - ma
    dy = yb - ya
    f = Wa * Wb / W
    mean = ma + dx * (Wb / W)
    ymean = ya + dy * (Wb / W)
    xx = a.centered_xx() + b.centered_xx() + f * np.outer(dx, dx)
    scale = a._scale() + b._scale() + f * dx * dx
    return GramStats(W=float(W), n=a.n + b.n, shift_x=mean, shift_y=float(ymean), sx=np.zeros_like(mean), sy=0.0,
                     xx=0.5 * (xx + xx.T), xy=a.centered_xy() + b.centered_xy() + f * dx * dy,
                     yy=float(a.centered_yy() + b.centered_yy() + f * dy * dy), xx_scale=scale)


def _chunk_rows(p: int) -> int:
    return max(1024, CHUNK_BYTES // (8 * max(p, 1)))


def _accumulate(X, y, w, rows, shift_x, shift_y, chunk, packed=False):
    """The statistics of ``rows`` (all when None) about the shift; with ``packed`` a tuple
    ``(GramStats without xx, xx's upper triangle in np.triu_indices order)``."""
    p = X.shape[1]
    W = 0.0
    sx = np.zeros(p)
    sy = 0.0
    # XᵀWX as (√w·x)ᵀ(√w·x) by BLAS ``syrk``: one triangle, half the work of a general product.
    # Weights below 0 have no square root; they are refused before any fit, but statistics of
    # such rows still come out right through the general product.
    upper = np.zeros((p, p), order="F")
    general = np.zeros((p, p))
    xy = np.zeros(p)
    yy = 0.0
    n = X.shape[0] if rows is None else rows.size
    for start in range(0, n, chunk):
        if rows is None:
            sl = slice(start, start + chunk)
            Xc = X[sl] - shift_x
            yc = y[sl] - shift_y
            wc = w[sl]
        else:
            idx = rows[start:start + chunk]
            if X.flags.f_contiguous:
                # Column by column: a row gather from column-ordered storage took twice as long
                # (10 ms against 4 ms for 10,000 rows × 100 columns, most of the pass).
                Xc = np.take(X.T, idx, axis=1).T
                Xc -= shift_x
            else:
                Xc = X[idx] - shift_x
            yc = y[idx] - shift_y
            wc = w[idx]
        if wc.size and wc.min() >= 0:
            sw = np.sqrt(wc)
            Xc *= sw[:, None]  # √w·(x - s), in place
            upper = _add_syrk(upper, Xc)
            sx += sw @ Xc
            xy += (sw * yc) @ Xc
        else:
            wX = Xc * wc[:, None]
            general += Xc.T @ wX
            sx += wX.sum(axis=0)
            xy += yc @ wX
        wy = wc * yc
        sy += wy.sum()
        yy += wy @ yc
        W += wc.sum()
    if packed:
        iu = np.triu_indices(p)
        tri = upper[iu] + 0.5 * (general + general.T)[iu]
        return GramStats(W=float(W), n=int(n), shift_x=shift_x, shift_y=float(shift_y), sx=sx, sy=float(sy),
                         xx=None, xy=xy, yy=float(yy), xx_scale=np.diag(upper) + np.diag(general)), tri
    xx = np.triu(upper) + np.triu(upper, 1).T + 0.5 * (general + general.T)
    return GramStats(W=float(W), n=int(n), shift_x=shift_x, shift_y=float(shift_y), sx=sx, sy=float(sy),
                     xx=xx, xy=xy, yy=float(yy), xx_scale=np.diag(xx).copy())


def _add_syrk(upper, Z):
    """``upper += ZᵀZ`` on the upper triangle (BLAS ``syrk``), reading ``Z`` in whichever order it is
    stored without copying it (a design's columns are usually stored one after another)."""
    from scipy.linalg import blas

    if 0 in Z.shape:  # no rows or no columns: nothing to add (and BLAS refuses empty arrays)
        return upper
    if Z.flags.f_contiguous:
        return blas.dsyrk(1.0, Z, beta=1.0, c=upper, trans=1, lower=0, overwrite_c=1)
    return blas.dsyrk(1.0, np.ascontiguousarray(Z).T, beta=1.0, c=upper, trans=0, lower=0, overwrite_c=1)


def _default_shift(X, y, w):
    W = w.sum()
    if not W > 0:
        raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
    return (w @ X) / W, float(w @ y) / W


def gram_stats(X, y, w=None, shift=None, chunk: Optional[int] = None, rows=None) -> GramStats:
    """Gather the weighted cross-products of every row in one pass.

    Parameters
    ----------
    X : ndarray (n, p)
    y : ndarray (n,)
    w : ndarray (n,), optional
        Row weights (ones by default).
    shift : (ndarray (p,), float), optional
        Reference point to subtract before accumulating; the weighted means by
        default.  Statistics meant to be added or subtracted must share it.
    chunk : int, optional
        Rows per block (default: about 8 MiB of rows).
    rows : ndarray of int, optional
        Only these rows (``n`` then counts them).

    Returns
    -------
    GramStats
    """
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.ones(X.shape[0]) if w is None else np.asarray(w, dtype=np.float64)
    shift_x, shift_y = _default_shift(X, y, w) if shift is None else shift
    return _accumulate(X, y, w, rows, np.asarray(shift_x, dtype=np.float64), float(shift_y),
                       chunk or _chunk_rows(X.shape[1]))


def per_fold(X, y, w, fold_ids, K: int, chunk: Optional[int] = None):
    """Held-out statistics of each fold, and of the whole design, in one pass.

    Parameters
    ----------
    X, y, w : arrays
        The design rows, target and weights.
    fold_ids : ndarray (n,) of int
        Fold of each row, 0..K-1.
    K : int
        Number of folds.

    Returns
    -------
    full : GramStats
        Every row (the sum of the folds).
    folds : list of GramStats
        Rows of fold k.  The training statistics of fold k are ``full - folds[k]``.
    """
    from regbench.models.ols import one_blas_thread

    with one_blas_thread():
        return _per_fold(X, y, w, fold_ids, K, chunk)


def _per_fold(X, y, w, fold_ids, K, chunk):
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    fold_ids = np.asarray(fold_ids)
    shift_x, shift_y = _default_shift(X, y, w)
    if chunk is None and w.size and w.min() >= 0:
        folds = _accumulate_folds(X, y, w, fold_ids, K, shift_x, shift_y)
    else:
        chunk = chunk or _chunk_rows(X.shape[1])
        order = np.argsort(fold_ids, kind="stable")
        bounds = np.searchsorted(fold_ids[order], np.arange(K + 1))
        folds = [_accumulate(X, y, w, order[bounds[k]:bounds[k + 1]], shift_x, shift_y, chunk) for k in range(K)]
    full = folds[0]
    for f in folds[1:]:
        full = full + f
    return full, folds


@dataclass(frozen=True)
class GroupStack:
    """Each group's weighted cross-products about one reference point, side by side.

    What grouped bootstrap refits add up with each group's draw count
    (:mod:`regbench.analysis.group_refits`).  ``xx`` holds the upper triangle of each
    group's ``Σ w (x − s)(x − s)ᵀ`` packed in ``np.triu_indices(p)`` order: half the
    memory of the full matrices and half the work of every sum over the groups.
    """

    shift_x: np.ndarray
    shift_y: float
    W: np.ndarray  # (G,)
    n: np.ndarray  # (G,)
    sx: np.ndarray  # (G, p)
    sy: np.ndarray  # (G,)
    xx: np.ndarray  # (G, p(p+1)/2)
    xy: np.ndarray  # (G, p)
    yy: np.ndarray  # (G,)
    scale: np.ndarray  # (G, p): the size of the sums behind each diagonal (GramStats.xx_scale)

    @property
    def p(self) -> int:
        return self.sx.shape[1]

    @classmethod
    def of(cls, parts) -> "GroupStack":
        """The stack of a sequence of GramStats sharing one shift."""
        parts = list(parts)
        p = parts[0].p
        iu = np.triu_indices(p)
        xx = np.empty((len(parts), iu[0].size))
        for g, st in enumerate(parts):
            xx[g] = st.xx[iu]
        return cls(shift_x=parts[0].shift_x, shift_y=float(parts[0].shift_y), W=np.array([s.W for s in parts]),
                   n=np.array([s.n for s in parts], dtype=np.float64), sx=np.stack([s.sx for s in parts]),
                   sy=np.array([s.sy for s in parts]), xx=xx, xy=np.stack([s.xy for s in parts]),
                   yy=np.array([s.yy for s in parts]), scale=np.stack([s._scale() for s in parts]))

    def unpack(self, tri: np.ndarray) -> np.ndarray:
        """The symmetric p×p matrix of a packed upper triangle (a sum of rows of ``xx``)."""
        p = self.p
        out = np.empty((p, p))
        flat, mirror = _packed_places(p)
        out.ravel()[flat] = tri
        out.ravel()[mirror] = tri
        return out


_PACKED = {}


def _packed_places(p: int):
    """Flat positions of the upper triangle in a p×p C-ordered matrix, and of its mirror image."""
    if p not in _PACKED:
        i, j = np.triu_indices(p)
        _PACKED.clear()  # one size at a time: a refit run works on one design
        _PACKED[p] = (i * p + j, j * p + i)
    return _PACKED[p]


def per_group(X, y, w, groups, G: int) -> GroupStack:
    """Each group's statistics about the whole design's weighted means, in one pass.

    The rows of one group are gathered and their upper triangle packed before the next group:
    no p×p matrix per group is kept whole (G of them would take G·p² numbers).
    """
    from regbench.models.ols import one_blas_thread

    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    groups = np.asarray(groups)
    n, p = X.shape
    shift_x, shift_y = _default_shift(X, y, w)
    order = np.argsort(groups, kind="stable")
    bounds = np.searchsorted(groups[order], np.arange(G + 1))
    chunk = _chunk_rows(p)
    xx = np.empty((G, p * (p + 1) // 2))
    stats = []
    with one_blas_thread():
        for g in range(G):
            st, xx[g] = _accumulate(X, y, w, order[bounds[g]:bounds[g + 1]], shift_x, shift_y, chunk, packed=True)
            stats.append(st)
    return GroupStack(shift_x=shift_x, shift_y=float(shift_y), W=np.array([s.W for s in stats]),
                      n=np.array([s.n for s in stats], dtype=np.float64), sx=np.stack([s.sx for s in stats]),
                      sy=np.array([s.sy for s in stats]), xx=xx, xy=np.stack([s.xy for s in stats]),
                      yy=np.array([s.yy for s in stats]), scale=np.stack([s.xx_scale for s in stats]))


#: Bytes of one block of rows in :func:`_accumulate_folds`: small enough that splitting it by
#: fold reads it from cache.
FOLD_CHUNK_BYTES = 2 ** 20
#: Rows of one fold per block at least, so each ``syrk`` does enough work per touch of its
#: p×p result.
FOLD_PIECE_ROWS = 256


def _accumulate_folds(X, y, w, fold_ids, K, shift_x, shift_y):
    """Every fold's statistics in one pass over consecutive blocks of rows (weights >= 0).

    Each block is shifted and scaled by √w once and then split by fold; gathering a fold's rows
    from the whole table instead read every row once per fold (the rows of a fold are spread
    over the table), which took longer than the products themselves.
    """
    n, p = X.shape
    chunk = max(K * FOLD_PIECE_ROWS, FOLD_CHUNK_BYTES // (8 * max(p, 1)))
    upper = [np.zeros((p, p), order="F") for _ in range(K)]
    sx = np.zeros((K, p))
    xy = np.zeros((K, p))
    W = np.zeros(K)
    sy = np.zeros(K)
    yy = np.zeros(K)
    counts = np.bincount(fold_ids, minlength=K)[:K]
    for start in range(0, n, chunk):
        sl = slice(start, start + chunk)
        Z = X[sl] - shift_x
        sw = np.sqrt(w[sl])
        Z *= sw[:, None]
        yc = y[sl] - shift_y
        wy = w[sl] * yc
        swy = sw * yc
        ids = fold_ids[sl]
        for k in range(K):
            at = np.flatnonzero(ids == k)
            if not at.size:
                continue
            Zk = np.take(Z.T, at, axis=1).T if Z.flags.f_contiguous else Z[at]
            upper[k] = _add_syrk(upper[k], Zk)
            sx[k] += sw[at] @ Zk
            xy[k] += swy[at] @ Zk
            W[k] += w[sl][at].sum()
            sy[k] += wy[at].sum()
            yy[k] += wy[at] @ yc[at]
    out = []
    for k in range(K):
        xx = np.triu(upper[k]) + np.triu(upper[k], 1).T
        out.append(GramStats(W=float(W[k]), n=int(counts[k]), shift_x=shift_x, shift_y=float(shift_y), sx=sx[k],
                             sy=float(sy[k]), xx=xx, xy=xy[k], yy=float(yy[k]), xx_scale=np.diag(xx).copy()))
    return out


class FoldAccumulator:
    """Per-fold statistics gathered block by block, merged as centred co-moments.

    Each block's rows of each fold are centred on their own weighted means
    (a two-pass sum within the block) and merged into the running statistics
    of their fold by :func:`merge`.  The result does not depend on how the
    rows were cut into blocks beyond round-off, and blocks may come from a
    file read in batches or from workers of a cluster (accumulators combine
    with :meth:`combine`).

    Parameters
    ----------
    p : int
        Number of predictors.
    K : int
        Number of folds (1 when only the whole is wanted).
    """

    def __init__(self, p: int, K: int = 1):
        self.p = int(p)
        self.K = int(K)
        self.folds = [None] * self.K

    def add(self, X, y, w, fold_ids=None) -> None:
        """Fold the rows of one block in."""
        X = np.asarray(X, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        w = np.asarray(w, dtype=np.float64)
        if X.shape[0] == 0:
            return
        chunk = _chunk_rows(self.p)
        if fold_ids is None or self.K == 1:
            groups = [(0, None)]
        else:
            fold_ids = np.asarray(fold_ids)
            order = np.argsort(fold_ids, kind="stable")
            bounds = np.searchsorted(fold_ids[order], np.arange(self.K + 1))
            groups = [(k, order[bounds[k]:bounds[k + 1]]) for k in range(self.K) if bounds[k + 1] > bounds[k]]
        for k, rows in groups:
            wk = w if rows is None else w[rows]
            Wk = wk.sum()
            if Wk > 0:
                Xk = X if rows is None else X[rows]
                yk = y if rows is None else y[rows]
                shift = ((wk @ Xk) / Wk, float(wk @ yk) / Wk)
            else:
                shift = (np.zeros(self.p), 0.0)
            st = _accumulate(X, y, w, rows, shift[0], shift[1], chunk)
            self.folds[k] = st if self.folds[k] is None else merge(self.folds[k], st)

    def combine(self, other: "FoldAccumulator") -> "FoldAccumulator":
        """The statistics of both accumulators' rows (e.g. from two workers)."""
        out = FoldAccumulator(self.p, self.K)
        for k in range(self.K):
            a, b = self.folds[k], other.folds[k]
            out.folds[k] = b if a is None else a if b is None else merge(a, b)
        return out

    def result(self):
        """``(full, folds)``, all about the whole's weighted means, as :func:`per_fold` returns them."""
        empty = GramStats(W=0.0, n=0, shift_x=np.zeros(self.p), shift_y=0.0, sx=np.zeros(self.p), sy=0.0,
                          xx=np.zeros((self.p, self.p)), xy=np.zeros(self.p), yy=0.0, xx_scale=np.zeros(self.p))
        parts = [f if f is not None else empty for f in self.folds]
        whole = parts[0]
        for f in parts[1:]:
            whole = merge(whole, f)
        if not whole.W > 0:
            raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
        sx, sy = whole.mean_x(), whole.mean_y()
        folds = [f.recentred(sx, sy) for f in parts]
        full = folds[0]
        for f in folds[1:]:
            full = full + f
        return full, folds


#: Largest condition number of a block (columns scaled to unit length) factored by
#: Cholesky QR; beyond it a Householder QR.  Cholesky QR twice is as accurate as
#: Householder QR while the condition number stays well below 1/√ε ≈ 7e7
#: (Yamamoto, Nakatsukasa, Yanagisawa & Fukaya 2015, "Roundoff error analysis of the
#: CholeskyQR2 algorithm"); 1e6 leaves a wide margin.
CHOLESKY_QR_MAX_COND = 1e6


def block_factor(Z: np.ndarray) -> np.ndarray:
    """The q×q upper-triangular R with ``RᵀR = ZᵀZ`` of a tall Fortran-ordered block, overwriting it.

    Cholesky QR twice (Gram, Cholesky, Q₁ = Z R₁⁻¹, then once more on Q₁) does
    the work in matrix products, about twenty times faster than LAPACK's
    Householder QR on tall blocks, where the Householder panels are bound by
    memory.  Blocks whose scaled condition number exceeds
    :data:`CHOLESKY_QR_MAX_COND` (aliased or nearly aliased columns, a constant
    column, fewer rows than columns) go to the Householder QR.  Either way the
    result has the accuracy of a QR of the rows, not that of the normal equations.
    """
    from scipy.linalg import blas, lapack

    from regbench.models.ols import r_factor

    m, q = Z.shape
    norms = np.sqrt(np.einsum("ij,ij->j", Z, Z))
    if m < 2 * q or not np.all(norms > 0) or not np.all(np.isfinite(norms)):
        return r_factor(Z)
    Z /= norms  # unit columns: the condition number left is the columns' own collinearity
    # ``syrk`` forms the upper triangle of ZᵀZ only, which is all the Cholesky factor reads.
    R1, info = lapack.dpotrf(blas.dsyrk(1.0, Z, trans=1, lower=0), lower=0, clean=1)
    if info == 0:
        rcond, info = lapack.dtrcon(R1)
    if info != 0 or not rcond * CHOLESKY_QR_MAX_COND > 1.0:
        return r_factor(Z) * norms
    Q1 = blas.dtrsm(1.0, R1, Z, side=1, lower=0, overwrite_b=1)  # Z R₁⁻¹ in place
    R2, info = lapack.dpotrf(blas.dsyrk(1.0, Q1, trans=1, lower=0), lower=0, clean=1)
    if info != 0:  # cannot happen below the bound; Q₁'s own QR is exact in any case
        R2 = r_factor(Q1)
    return (R2 @ R1) * norms


class FactorAccumulator:
    """The triangular factor of the weighted, centred rows, gathered block by block.

    Keeps ``W``, the weighted means of ``z = (x, y)`` and the upper-triangular
    ``R`` with ``RᵀR = Σ w (z − z̄)(z − z̄)ᵀ``.  A block is centred on its own
    means and factored; two factors merge as the factor of
    ``[Ra; Rb; √(Wa·Wb/W)·δᵀ]`` — the pairwise co-moment update of
    :func:`merge` carried out on square roots, so the accuracy is that of a
    QR of the rows (what OLS needs on badly conditioned columns), not that of
    the normal equations.
    """

    def __init__(self, p: int):
        self.p = int(p)
        self.n = 0
        self.W = 0.0
        self.mean = np.zeros(self.p + 1)
        self.R = np.zeros((self.p + 1, self.p + 1))

    def add(self, X, y, w) -> None:
        """Fold the rows of one block in (rows of weight 0 add nothing)."""
        w = np.asarray(w, dtype=np.float64)
        pos = w > 0
        m = int(pos.sum())
        if not m:
            return
        every = m == pos.shape[0]
        q = self.p + 1
        # One Fortran-ordered copy of the block, padded to q rows, factored in place:
        # the block's only temporary beyond LAPACK's workspace.
        Z = np.zeros((max(m, q), q), order="F")
        Z[:m, :self.p] = X if every else np.asarray(X)[pos]
        Z[:m, self.p] = y if every else np.asarray(y)[pos]
        if not every:
            w = w[pos]
        Wb = w.sum()
        mb = (w @ Z[:m]) / Wb
        sw = np.sqrt(w)
        for j in range(q):  # column by column: contiguous in Fortran order, no block-sized temporary
            col = Z[:m, j]
            col -= mb[j]
            col *= sw
        self._merge(m, float(Wb), mb, block_factor(Z))

    def _merge(self, n, Wb, mb, Rb) -> None:
        if self.W == 0:
            self.n, self.W, self.mean, self.R = n, Wb, mb, Rb
            return
        W = self.W + Wb
        d = mb - self.mean
        stack = np.vstack([self.R, Rb, np.sqrt(self.W * Wb / W) * d[None, :]])
        # numpy's QR here, not scipy's geqrf: on this stack of triangles the latter was measured
        # 10-100× slower in CPU time (0.04 s against 0.5 ms at 203 × 101), and a merge follows every block.
        self.R = np.linalg.qr(stack, mode="r")
        self.mean = self.mean + d * (Wb / W)
        self.W = W
        self.n += n

    def combine(self, other: "FactorAccumulator") -> "FactorAccumulator":
        """The factor of both accumulators' rows."""
        out = FactorAccumulator(self.p)
        out.n, out.W, out.mean, out.R = self.n, self.W, self.mean.copy(), self.R.copy()
        if other.W > 0:
            out._merge(other.n, other.W, other.mean, other.R)
        return out

    def factor(self) -> np.ndarray:
        """The (p+2)×(p+2) factor of ``sqrt(w/W)·[1, x, y]`` as :attr:`OLSResult.r_factor` holds it."""
        if not self.W > 0:
            raise ModelError("every weight is zero; at least one row must have a weight above 0")
        q = self.p + 1
        Rc = self.R / np.sqrt(self.W)
        # Row signs as LAPACK leaves them are arbitrary; a non-negative diagonal makes merged
        # factors comparable with one another.
        s = np.where(np.diag(Rc) < 0, -1.0, 1.0)
        Rc = Rc * s[:, None]
        ss = np.sum(Rc[:, :self.p] ** 2, axis=0)
        Rc[:, :self.p][:, ss == 0] = 0.0
        out = np.zeros((q + 1, q + 1))
        out[0, 0] = 1.0
        out[0, 1:] = self.mean
        out[1:, 1:] = Rc
        return out

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
        _same_shift(self, other)
        return GramStats(
            W=self.W + other.W, n=self.n + other.n, shift_x=self.shift_x, shift_y=self.shift_y,
            sx=self.sx + other.sx, sy=self.sy + other.sy, xx=self.xx + other.xx,
            xy=self.xy + other.xy, yy=self.yy + other.yy,
            xx_scale=self._scale() + other._scale(),
        )

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


def _same_shift(a: GramStats, b: GramStats) -> None:
    if a.shift_y != b.shift_y or not np.array_equal(a.shift_x, b.shift_x):
        raise ValueError("Gram statistics with different shifts cannot be combined")


def _chunk_rows(p: int) -> int:
    return max(1024, CHUNK_BYTES // (8 * max(p, 1)))


def _accumulate(X, y, w, rows, shift_x, shift_y, chunk):
    p = X.shape[1]
    W = 0.0
    sx = np.zeros(p)
    sy = 0.0
    xx = np.zeros((p, p))
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
            Xc = X[idx] - shift_x
            yc = y[idx] - shift_y
            wc = w[idx]
        wX = Xc * wc[:, None]
        xx += Xc.T @ wX  # one BLAS product per block
        sx += wX.sum(axis=0)
        xy += yc @ wX
        wy = wc * yc
        sy += wy.sum()
        yy += wy @ yc
        W += wc.sum()
    xx = 0.5 * (xx + xx.T)
    return GramStats(W=float(W), n=int(n), shift_x=shift_x, shift_y=float(shift_y), sx=sx, sy=float(sy),
                     xx=xx, xy=xy, yy=float(yy), xx_scale=np.diag(xx).copy())


def _default_shift(X, y, w):
    W = w.sum()
    if not W > 0:
        raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
    return (w @ X) / W, float(w @ y) / W


def gram_stats(X, y, w=None, shift=None, chunk: Optional[int] = None) -> GramStats:
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

    Returns
    -------
    GramStats
    """
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.ones(X.shape[0]) if w is None else np.asarray(w, dtype=np.float64)
    shift_x, shift_y = _default_shift(X, y, w) if shift is None else shift
    return _accumulate(X, y, w, None, np.asarray(shift_x, dtype=np.float64), float(shift_y),
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
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    fold_ids = np.asarray(fold_ids)
    shift_x, shift_y = _default_shift(X, y, w)
    chunk = chunk or _chunk_rows(X.shape[1])
    # Every row belongs to exactly one fold, so the K gathers together read each row once.
    order = np.argsort(fold_ids, kind="stable")
    bounds = np.searchsorted(fold_ids[order], np.arange(K + 1))
    folds = [_accumulate(X, y, w, order[bounds[k]:bounds[k + 1]], shift_x, shift_y, chunk) for k in range(K)]
    full = folds[0]
    for f in folds[1:]:
        full = full + f
    return full, folds

"""The correlation map: weighted Pearson correlation between every pair of design columns.

Computed here, below the window, so the window, the CLI and the report show the
same numbers.  Rows carry their weights (all 1 without a weight column).  On a
very large design a seeded sample of rows keeps the map quick; the result says
so.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Tuple

import numpy as np

from regbench.models.results import Result

#: Above this many rows the map is computed on a seeded sample of this many.
MAX_ROWS = 200_000


def weighted_correlation(X: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted Pearson correlation of the columns of ``X`` (rows weighted by ``w``).

    A column that is constant on the weighted rows has no correlation: its row
    and column are NaN.
    """
    X = np.asarray(X, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    w = w / w.sum()
    Xc = X - w @ X
    cov = (Xc * w[:, None]).T @ Xc
    sd = np.sqrt(np.diag(cov))
    sd = np.where(sd > 0, sd, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.clip(cov / np.outer(sd, sd), -1.0, 1.0)


@dataclass(frozen=True, eq=False)
class CorrelationMap(Result):
    """Weighted correlation between design columns.

    Attributes
    ----------
    columns : tuple of str
        Design columns, the order of both axes of ``matrix``.
    matrix : ndarray (p, p)
        Weighted Pearson correlation; NaN where a column is constant.
    n_rows : int
        Rows it was computed on.
    sampled : bool
        True when ``n_rows`` is a seeded sample of a larger design.
    """

    columns: Tuple[str, ...]
    matrix: np.ndarray
    n_rows: int
    sampled: bool

    def value(self, a: str, b: str) -> float:
        """Correlation of columns ``a`` and ``b``."""
        return float(self.matrix[self.index(a), self.index(b)])

    def to_dict(self) -> dict:
        m = self.matrix
        return {"columns": list(self.columns), "n_rows": int(self.n_rows), "sampled": bool(self.sampled),
                "matrix": [[float(v) if np.isfinite(v) else None for v in row] for row in m]}


def correlation_map(design, max_rows: int = MAX_ROWS, seed: int = 0) -> CorrelationMap:
    """The correlation map of a design's columns (see the module notes)."""
    X, w = design.X, design.weights
    sampled = design.n > max_rows
    if sampled:
        rows = np.sort(np.random.default_rng(seed).choice(design.n, max_rows, replace=False))
        X, w = X[rows], w[rows]
    return CorrelationMap(columns=tuple(design.columns), matrix=weighted_correlation(X, w), n_rows=int(X.shape[0]),
                          sampled=bool(sampled))

"""Category coding of the penalized families: every level alike.

The design codes a category against a reference level (one indicator per other level, the
reference level's effect carried by the intercept), which is what OLS needs.  A penalty on
those indicators would treat the reference level differently from the others, so renaming
the levels (which changes which one comes first) would change a penalized fit.  The
penalized families therefore fit one indicator per level, the reference level's included,
with the intercept unpenalized; every indicator is standardized like any column.  The
reference level's indicator is named like the others, ``COLUMN=LEVEL``, and is appended
after the design's columns, so a penalized model's first ``p`` coefficients line up with the
design's columns and the rest are the reference levels (one per category).

Its value on a row is ``1 − Σ`` the category's other indicators, so its cross-products are
linear in the design's own (``x_all = a + x·T``): no second pass over the rows is needed
(:meth:`LevelCoding.augment` transforms a :class:`~regbench.models.gram.GramStats`), and a
model fitted on all levels predicts from the design's columns through the same identity::

    b₀ + Σ_l β_l·[level = l]  =  (b₀ + β_ref) + Σ_{l ≠ ref} (β_l − β_ref)·[level = l]
"""

from __future__ import annotations

from dataclasses import replace
from typing import Optional

import numpy as np

from regbench.models.gram import GramStats
from regbench.models.results import to_design_coding


class LevelCoding:
    """The map from the design's reference coding to one indicator per level.

    Parameters
    ----------
    columns : sequence of str
        Design columns.
    references : sequence of (source, level, sibling columns)
        For each category: its table column, its reference level's text and the design
        columns of its other levels.
    """

    def __init__(self, columns, references=()):
        self.columns = tuple(columns)
        self.p = len(self.columns)
        self.groups = []  # (extra column name, source, sibling indices)
        for source, level, siblings in references:
            idx = tuple(self.columns.index(c) for c in siblings)
            self.groups.append((f"{source}={level}", source, idx))
        self.m = len(self.groups)
        self._map = None

    def _maps(self):
        # Built on first use: a design without categories never needs them, and on 1,000 columns
        # the p×(p+m) matrix costs a few milliseconds per coding (every stability refit makes some).
        if self._map is None:
            T = np.zeros((self.p, self.p + self.m))
            T[:, :self.p] = np.eye(self.p)
            a = np.zeros(self.p + self.m)
            for g, (_, _, idx) in enumerate(self.groups):
                T[list(idx), self.p + g] = -1.0
                a[self.p + g] = 1.0
            self._map = (T, a)
        return self._map

    @property
    def T(self) -> np.ndarray:
        """The map from design columns to columns on all levels, (p, p + m)."""
        return self._maps()[0]

    @property
    def a(self) -> np.ndarray:
        """The offset of that map (1 on each reference level's column)."""
        return self._maps()[1]

    @classmethod
    def of(cls, design) -> "LevelCoding":
        """The coding of ``design``'s categories (the identity when it has none)."""
        return cls(design.columns, getattr(design, "reference_levels", ()) or ())

    @property
    def active(self) -> bool:
        """True when the design has a category (otherwise every map is the identity)."""
        return self.m > 0

    @property
    def names(self) -> tuple:
        """Columns on all levels: the design's, then each category's reference level."""
        return self.columns + tuple(g[0] for g in self.groups)

    @property
    def reference_levels(self) -> tuple:
        """(reference column, its sibling columns) of each category, as a model carries them."""
        return tuple((name, tuple(self.columns[j] for j in idx)) for name, _, idx in self.groups)

    def sources(self, sources) -> tuple:
        """The table column of each column on all levels."""
        return tuple(sources) + tuple(g[1] for g in self.groups)

    def augment(self, stats: GramStats) -> GramStats:
        """The statistics of the design with one indicator per level (reference levels appended)."""
        if not self.active:
            return stats
        T = self.T
        scale = stats.xx_scale if stats.xx_scale is not None else np.abs(np.diag(stats.xx))
        return GramStats(
            W=stats.W, n=stats.n, shift_x=self.a + stats.shift_x @ T, shift_y=stats.shift_y,
            sx=stats.sx @ T, sy=stats.sy, xx=T.T @ stats.xx @ T, xy=stats.xy @ T, yy=stats.yy,
            xx_scale=(np.sqrt(np.clip(scale, 0.0, None)) @ np.abs(T)) ** 2,
        )

    def expand(self, X: np.ndarray) -> np.ndarray:
        """Rows of design columns → rows of the columns on all levels."""
        X = np.asarray(X, dtype=float)
        return X if not self.active else self.a + X @ self.T

    def to_design(self, coef, intercept):
        """Coefficients (…, p+m) and intercepts on all levels → the same predictor in the design's coding."""
        return to_design_coding(coef, intercept, self.p, [idx for _, _, idx in self.groups])

    def label(self, model):
        """A model fitted on all levels, told which of its columns are reference levels."""
        return replace(model, reference_levels=self.reference_levels) if self.active else model

    def path(self, path):
        """A path fitted on all levels, told which of its columns are reference levels."""
        return replace(path, reference_levels=self.reference_levels) if self.active else path

    def init(self, coef_std) -> Optional[np.ndarray]:
        """A warm start on all levels from standardized coefficients on all levels (else None)."""
        if coef_std is None:
            return None
        coef_std = np.asarray(coef_std, dtype=float)
        return coef_std if coef_std.shape[-1] == self.p + self.m else None

    def factors(self, factors):
        """Penalty factors on all levels: a reference level takes its category's factor."""
        if factors is None or not self.active:
            return factors
        extra = [float(np.asarray(factors)[idx[0]]) if idx else 1.0 for _, _, idx in self.groups]
        return np.concatenate([np.asarray(factors, dtype=float), extra])



def design_sd(design, results=None) -> np.ndarray:
    """Weighted SD of each design column on the rows fitted (from the fit's cross-products when kept)."""
    gram = getattr(results, "gram", None)
    return gram.sd_x() if isinstance(gram, GramStats) else design.standardized()[2]

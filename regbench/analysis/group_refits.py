"""Bootstrap refits from the cross-products of each group: p×p work per refit.

A grouped bootstrap draw takes whole groups with replacement, so the drawn
sample's weighted cross-products are the groups' own cross-products added up
with the number of times each group was drawn::

    Σ_drawn w x xᵀ = Σ_g c_g · (Σ_{rows of g} w x xᵀ)

One pass over the rows gathers the groups' statistics (about the whole
design's weighted means, so the re-weighted sums keep their digits, as the
fold statistics of cross-validation do); every refit after that costs
G·p² additions and the p×p solves of each model, however many rows there are.

OLS works on a factor of the re-weighted co-moments instead of the rows.  Its
column lengths carry round-off of about √ε of each column's size rather
than ε, so a column counts as reproduced by the columns kept before it when
what is left of it is within :data:`GRAM_RANK_TOL` of its size (exact
aliases, built from other columns by a few float operations, leave about
1e-8 here).  A refit whose kept columns are badly conditioned
(:data:`regbench.models.engine.GRAM_COND_LIMIT`, decided by :func:`regbench.models.engine.gram_solve`)
is solved on the rows instead.

A table read in batches has no rows at hand, only the groups' statistics its
pass kept (:class:`regbench.data.stream.GroupSums`): the refits are the same
sums and solves, and a badly conditioned refit is solved from the cross-products
(counted in :attr:`GroupRefits.from_cross_products`, and said by the stability
sentences), so its OLS coefficients carry about that condition number times the
round-off of the cross-products.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from regbench.errors import ModelError
from regbench.models.engine import alpha_for, families, gram_solve, problem_for, relaxation_for
from regbench.models.gram import GramStats, GroupStack, gram_stats, per_group
from regbench.models.coding import LevelCoding
from regbench.models.ols import default_rank_tol, fit_ols
from regbench.models.penalized import model_from_problem
from regbench.models.results import LinearModel

#: What is left of a column, relative to its size, below which a refit from cross-products
#: sets it aside (see the module docstring); the rows resolve down to ``rank_tol``.
GRAM_RANK_TOL = 1e-6
#: Memory of the summed cross-products of the draws made ready together.
BATCH_BYTES = 64 * 2**20


class GroupRefits:
    """Refit every model at fixed α on re-weighted group cross-products.

    Parameters
    ----------
    design : Design
        Must have groups.
    settings : FitSettings
    alphas : dict of str -> float
        α of each penalized family.
    sums : GroupSums, optional
        Each group's statistics over every row (a table read in batches, whose
        ``design`` holds only a sample of rows); the groups are then those of
        ``sums``, in its order, and no refit touches a row.
    """

    def __init__(self, design, settings, alphas: dict, relaxations=None, sums=None):
        if design.groups is None and sums is None:
            raise ModelError("refits from group cross-products need a group column")
        self.design = design
        self.settings = settings
        self.families = []
        for name, rho in families(settings):
            a = alpha_for(name, alphas, settings)
            self.families.append((name, float(rho), float(a), relaxation_for(settings, name, relaxations)))
        #: False when only the groups' statistics are at hand (``sums``): no refit can go to the rows.
        self.on_rows = sums is None
        #: Refits whose OLS was solved from cross-products although badly conditioned (no rows at hand).
        self.from_cross_products = 0
        if sums is None:
            self.n_groups = int(design.groups.max()) + 1
            stack = per_group(design.X, design.y, design.weights, design.groups, self.n_groups)
        else:
            self.n_groups = len(sums.stats)
            stack = GroupStack.of(sums.stats)
        self.stack = stack
        self.shift_x, self.shift_y = stack.shift_x, stack.shift_y
        self.W, self.n, self.sx, self.sy = stack.W, stack.n, stack.sx, stack.sy
        self.xx, self.xy, self.yy, self.scale = stack.xx, stack.xy, stack.yy, stack.scale
        if sums is not None:
            self.n_pos = np.asarray(sums.n_pos, dtype=np.float64)
            self.y_min = np.asarray(sums.y_min, dtype=np.float64)
            self.y_max = np.asarray(sums.y_max, dtype=np.float64)
        else:
            pos = design.weights > 0
            g = design.groups
            self.n_pos = np.bincount(g[pos], minlength=self.n_groups).astype(np.float64)
            self.y_min = np.full(self.n_groups, np.inf)
            self.y_max = np.full(self.n_groups, -np.inf)
            np.minimum.at(self.y_min, g[pos], design.y[pos])
            np.maximum.at(self.y_max, g[pos], design.y[pos])
        self.pin_idx = [design.columns.index(c) for c in dict.fromkeys(settings.pins) if c in design.columns]
        self._whole = {}  # each penalized family's standardized fit on the whole design (see _start)

    def draw_many(self, rng: np.random.Generator, k: int) -> list:
        """``k`` draws of group counts in a row (as ``k`` calls of ``group_counts`` would make them),
        each with its summed cross-products, made in one matrix product: ``[(counts, xx), …]``.

        One product for several draws reads the groups' G×p×p cross-products once rather than
        once per draw (the per-draw sum is bound by memory, not arithmetic).
        """
        from regbench.analysis.stability import group_counts  # stability imports this module

        C = np.stack([group_counts(self.n_groups, rng) for _ in range(int(k))])
        return list(zip(C, C @ self.xx))  # packed upper triangles (GroupStack)

    def batch(self, left: int) -> int:
        """Draws to sum in one product: at most :data:`BATCH_BYTES` of summed cross-products."""
        return int(max(1, min(int(left), 32, BATCH_BYTES // (8 * self.xx.shape[1] + 1))))

    def stats(self, counts: np.ndarray, xx: np.ndarray = None) -> GramStats:
        """The cross-products of a draw that takes group g ``counts[g]`` times (``xx``, its packed upper
        triangle, when summed already)."""
        c = np.asarray(counts, dtype=np.float64)
        xx = c @ self.xx if xx is None else xx
        return GramStats(W=float(c @ self.W), n=int(round(c @ self.n)), shift_x=self.shift_x, shift_y=self.shift_y,
                         sx=c @ self.sx, sy=float(c @ self.sy), xx=self.stack.unpack(xx), xy=c @ self.xy,
                         yy=float(c @ self.yy), xx_scale=c @ self.scale)

    def flat(self, counts: np.ndarray) -> bool:
        """True when every drawn row with weight has the same target value (or none is drawn)."""
        drawn = (np.asarray(counts) > 0) & (self.n_pos > 0)
        return not drawn.any() or self.y_max[drawn].max() == self.y_min[drawn].min()

    def refit(self, counts: np.ndarray, xx: np.ndarray = None) -> dict:
        """OLS and each penalized family on the draw; dict of name -> LinearModel, OLS first."""
        st = self.stats(counts, xx)
        if not st.W > 0:
            raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
        coding = LevelCoding.of(self.design)  # every level of a category alike, as in the fit
        problem = problem_for(st, self.design, self.settings)  # with the settings' penalty factors
        out = {"ols": self._ols(st, counts, problem)}
        for name, rho, a, gamma in self.families:
            out[name] = coding.label(model_from_problem(problem, name, rho, a, coding.names,
                                                        coef_init=self._start(name, rho, a), relaxation=gamma))
        return out

    def _start(self, name, rho, alpha):
        """Where each draw's solve of a family starts: the family's fit on the whole design.

        A draw's fit is a small change of it (the columns in use barely move), and the
        solver's optimum does not depend on where it starts.
        """
        if rho == 0.0:
            return None  # ridge is solved in closed form
        if name not in self._whole:
            coding = LevelCoding.of(self.design)
            problem = problem_for(self._whole_stats(), self.design, self.settings)
            self._whole[name] = model_from_problem(problem, name, rho, alpha, coding.names).coef_std
        return self._whole[name]

    def _whole_stats(self) -> GramStats:
        """The cross-products of the whole design (every group once)."""
        return self.stats(np.ones(self.n_groups))

    def _n_pos(self, counts) -> int:
        """Rows with weight above 0 in the draw (for the default rank tolerance)."""
        return int(round(np.asarray(counts) @ self.n_pos))

    def _ols(self, st: GramStats, counts, problem=None) -> LinearModel:
        design = self.design
        p = design.p
        if problem is not None and problem.G.shape[0] == p:
            # The penalized problem standardized these very statistics (no level columns appended).
            G, c, mean, sd = problem.G, problem.c, problem.mean, problem.sd
        else:
            G, c, mean, sd = st.standardized()
        size = np.sqrt(sd * sd + mean * mean)
        size = np.where(size > 0, size, 1.0)
        # Co-moments of the columns at unit RMS: G rescaled (a column with sd 0 is never walked).
        e = sd / size
        S = G * e[:, None] * e[None, :]
        n_pos = self._n_pos(counts)
        tol = default_rank_tol(n_pos, p) if self.settings.rank_tol is None else float(self.settings.rank_tol)
        order, L = _choice_and_factor(S, self.pin_idx, max(tol, GRAM_RANK_TOL), sd)
        coef = np.zeros(p)
        if order:
            # A Cholesky factor and its condition estimate decide the rule of GRAM_COND_LIMIT where it
            # is clear, the eigenvalues where it is not (engine.gram_solve).  When every live column
            # stays, the walk's factor of S in its order is G's up to the scaling e: no second factor.
            Gk = G if len(order) == p and order == list(range(p)) else G[np.ix_(order, order)]
            # (L/e)ᵀ, Fortran-ordered as LAPACK reads it: UᵀU = G in the walk's order.
            factor = None if L is None else (L / e[order][:, None]).T
            sol, well = gram_solve(Gk, c[order], need_ill=not self.on_rows, factor=factor)
            if not well:
                if self.on_rows:
                    return self._ols_on_rows(counts)
                self.from_cross_products += 1
            coef[order] = sol / sd[order]
        intercept = st.mean_y() - coef @ mean
        return LinearModel(name="ols", columns=tuple(design.columns), intercept=float(intercept), coef=coef,
                           coef_std=coef * sd)

    def _ols_on_rows(self, counts) -> LinearModel:
        d = self.design
        w = d.weights * np.asarray(counts, dtype=np.float64)[d.groups]
        return fit_ols(replace(d, weights=w), self.settings.pins, self.settings.rank_tol).model


#: Multiply-adds of one block of a single-row draw's pass (see :meth:`RowRefits.stats`).
ROW_BLOCK_WORK = 1e8


class RowRefits(GroupRefits):
    """Refit every model at fixed α on a draw of single rows, from the draw's cross-products.

    A draw of rows (no groups) changes every row's weight, so each refit takes one weighted
    pass over the rows (``XᵀWX``, a ``syrk``) and then the p×p solves of :class:`GroupRefits`:
    OLS from a factor of the cross-products (on the rows when its kept columns are badly
    conditioned, :data:`regbench.models.engine.GRAM_COND_LIMIT`), the penalized families as
    the fit solves them.  A refit of OLS on the rows instead factors the rows (a QR, several
    times the pass on a wide table).

    ``counts`` are per row (:func:`regbench.analysis.stability.resample_counts`).
    """

    def __init__(self, design, settings, alphas: dict, relaxations=None):
        self.design = design
        self.settings = settings
        self.families = [(name, float(rho), float(alpha_for(name, alphas, settings)),
                          relaxation_for(settings, name, relaxations)) for name, rho in families(settings)]
        self.on_rows = True
        self.from_cross_products = 0
        self.pin_idx = [design.columns.index(c) for c in dict.fromkeys(settings.pins) if c in design.columns]
        self._whole = {}
        w = design.weights
        W = float(w.sum())
        if not W > 0:
            raise ModelError("the rows being fitted have total weight 0; there is nothing to fit")
        # One reference point for every draw, the whole design's means, so each draw's sums keep their digits.
        self.shift = ((w @ design.X) / W, float(w @ design.y) / W)

    def stats(self, counts: np.ndarray, xx: np.ndarray = None) -> GramStats:
        d = self.design
        c = np.asarray(counts, dtype=np.float64)
        # Only the drawn rows enter (a row drawn 0 times adds nothing: about a third of them), in blocks
        # of about ROW_BLOCK_WORK multiply-adds: SciPy's ``syrk`` holds the interpreter lock for its whole
        # call, and a window's thread waits on it (a block of 1,024 rows of 1,199 columns held it 1 s
        # under load; 69 rows cost the same CPU over the pass).
        chunk = max(32, int(ROW_BLOCK_WORK // max(d.p * d.p, 1)))
        st = gram_stats(d.X, d.y, d.weights * c, shift=self.shift, chunk=chunk, rows=np.flatnonzero(c > 0))
        return replace(st, n=d.n)  # as the rows route counts them (every row of the design)

    def _whole_stats(self) -> GramStats:
        return self.stats(np.ones(self.design.n))

    def _n_pos(self, counts) -> int:
        return int(np.count_nonzero((np.asarray(counts) > 0) & (self.design.weights > 0)))

    def flat(self, counts: np.ndarray) -> bool:
        drawn = self.design.y[(np.asarray(counts) > 0) & (self.design.weights > 0)]
        return bool(drawn.size == 0 or np.ptp(drawn) == 0)

    def _ols_on_rows(self, counts) -> LinearModel:
        d = self.design
        return fit_ols(replace(d, weights=d.weights * np.asarray(counts, dtype=np.float64)), self.settings.pins,
                       self.settings.rank_tol).model


def ordered_choice(S: np.ndarray, pin_idx, tol: float, sd: np.ndarray) -> list:
    """Pins, then the design order: keep a column when what is left of it after the kept
    columns exceeds ``tol`` (lengths from the co-moments ``S`` of columns at unit RMS).

    The walk of :func:`regbench.models.ols.fit_ols` carried out on cross-products: the
    squared length left of column j is ``S_jj − S_jK S_KK⁻¹ S_Kj``, from a Cholesky factor
    of the kept block grown one column at a time.
    """
    return list(_choice_and_factor(S, pin_idx, tol, sd)[0])


def _choice_and_factor(S: np.ndarray, pin_idx, tol: float, sd: np.ndarray):
    """The kept columns in the walk's order (pins first), and the lower Cholesky factor of
    ``S`` on them in that order when every live column is kept (None otherwise)."""
    kept = _walk(S, pin_idx, tol, sd)
    if isinstance(kept, tuple):
        return kept
    return kept, None


def _walk(S, pin_idx, tol, sd):
    from scipy.linalg import solve_triangular

    p = S.shape[0]
    order = list(pin_idx) + [j for j in range(p) if j not in set(pin_idx)]
    live = [j for j in order if sd[j] != 0]
    if live:
        # When every column is kept, the walk is the Cholesky factorization of S in this order
        # (the length left of each column is its pivot): one LAPACK call instead of p solves.
        Sl = S if live == list(range(S.shape[0])) else S[np.ix_(live, live)]
        try:
            L = np.linalg.cholesky(Sl)
        except np.linalg.LinAlgError:
            L = None
        if L is not None and np.all(np.diag(L) ** 2 > tol * tol):
            return live, L
    L = np.zeros((p, p))
    kept = []
    for j in order:
        if sd[j] == 0:
            continue
        k = len(kept)
        if k:
            l = solve_triangular(L[:k, :k], S[kept, j], lower=True, check_finite=False)
            r2 = S[j, j] - l @ l
        else:
            l = np.zeros(0)
            r2 = S[j, j]
        if r2 > tol * tol:
            L[k, :k] = l
            L[k, k] = np.sqrt(r2)
            kept.append(j)
    return kept

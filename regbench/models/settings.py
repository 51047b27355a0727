"""The engine's settings: each declared once with its type, range, default and help text.

Numpy-free on purpose: the command line builds its options from these
declarations before anything heavy is imported.  See :mod:`regbench.models.spec`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional, Tuple

from regbench.errors import DataError
from regbench.models import spec
from regbench.models.spec import Choice, Flag, ListOf, Number, OrNone, PerColumn, Text, Whole, setting

#: How a penalized model's α is chosen: fixed by the settings, or by cross-validation.
ALPHA_RULES = ("fixed", "cv_min", "cv_1se")


@dataclass(frozen=True)
class FitSettings:
    """Engine settings, each declared once with its accepted values and help text.

    The declarations (:func:`regbench.models.spec.setting`) are the one source
    of every limit: the CLI options, the session, the project loader and the
    engine all check through :meth:`check`.  To add a setting, add one declared
    field here; ``to_dict``/``from_dict`` (``fit --json``, ``session.json``)
    follow from it.

    Attributes
    ----------
    folds : int
        Number of cross-validation folds (grouped when the design has groups).
    seed : int
        Seed for fold assignment.
    n_penalties : int
        Number of α values on each path.
    penalty_ratio : float
        Smallest α on the path as a share of the largest.
    l1_ratios : tuple of float
        L1 ratios for elastic net; the first is the model 'elastic_net', further
        ones are 'elastic_net_<ratio>'.
    alpha : float or None
        Fixed α for every penalized model instead of the CV choice.
    alpha_rule : {'cv_min', 'cv_1se'}
        Which CV choice to use when ``alpha`` is None.
    pins : tuple of str
        Columns OLS must keep when deciding what to set aside.
    rank_tol : float or None
        Relative rank tolerance for OLS (None: the engine's stated default).
    penalty_factors : tuple of (str, float)
        Penalty factor vⱼ ≥ 0 of a table column in every penalized model (1 when
        not listed; 0: unpenalized, always kept).  A categorical column's factor
        applies to all its indicator columns.
    relaxed : bool
        Also fit the relaxed lasso and relaxed elastic net ('relaxed_lasso',
        'relaxed_elastic_net'; see :mod:`regbench.models.relaxed`).
    relaxation : float or None
        Fixed relaxation γ in [0, 1] of the relaxed families instead of the CV
        choice; setting it also fits them.
    range_tolerance : float or None
        Ranges over near-best models: every model whose weighted training error is at
        most ``1 + range_tolerance`` times the best (0.01 = within 1 %).  None: within
        one standard error of the lowest cross-validated error, as a share of it.
        It does not change any fit, so it is not part of a fit's identity.
    """

    folds: int = setting(5, Whole(2, 1000, unit="folds", purpose="cross-validation"),
                         "cross-validation folds", flag="--folds")
    seed: int = setting(0, Whole(0, 2**63 - 1), "seed for folds and random draws", flag="--seed")
    n_penalties: int = setting(100, Whole(2, 10_000, unit="α values", purpose="a path"),
                               "α values on each path", flag="--penalties")
    # The low end keeps the smallest α a normal float: below it the path's grid underflows to 0.
    penalty_ratio: float = setting(1e-3, Number(1e-12, 1.0, low_closed=True,
                                                hint="the smallest α as a share of the largest, e.g. 0.001"),
                                   "smallest α on each path as a share of the largest")
    l1_ratios: Tuple[float, ...] = setting(
        (0.5,), ListOf(Number(0.0, 1.0, hint="ridge (0) and lasso (1) are always fitted"), "L1 ratio",
                       min_len=1, max_len=20, unique=True),
        "elastic-net L1 ratio(s), comma-separated", flag="--l1-ratio")
    alpha: Optional[float] = setting(None, OrNone(Number(0.0), "the CV choice"),
                                     "fix α for ridge, lasso and elastic net instead of the CV choice",
                                     flag="--alpha")
    alpha_rule: str = setting("cv_min", Choice(ALPHA_RULES[1:]),
                              "CV choice of α: the minimum or the one-standard-error rule", flag="--alpha-rule")
    pins: Tuple[str, ...] = setting((), ListOf(Text(), "column name"),
                                    "comma-separated columns OLS must keep when it sets columns aside", flag="--pin")
    rank_tol: Optional[float] = setting(None, OrNone(Number(0.0, 1.0), "the engine's default"),
                                        "relative rank tolerance for OLS")
    penalty_factors: Tuple[Tuple[str, float], ...] = setting(
        (), PerColumn(Number(0.0, 1e6, low_closed=True, high_closed=True,
                             hint="0 leaves the column unpenalized (always kept), 1 is the default")),
        "penalty factor of a column in every penalized model (0: unpenalized, always kept; 2: penalized "
        "twice as hard); repeat for more columns", flag="--penalty-factor")
    relaxed: bool = setting(False, Flag(), "also fit the relaxed lasso and relaxed elastic net (a refit on the "
                            "columns each selected, relaxation chosen by cross-validation)", flag="--relaxed")
    relaxation: Optional[float] = setting(
        None, OrNone(Number(0.0, 1.0, low_closed=True, high_closed=True,
                            hint="0 is the penalized fit, 1 the unpenalized refit on its selected columns"),
                     "the CV choice"),
        "fix the relaxation of the relaxed lasso and elastic net (0: the penalized fit, 1: the unpenalized "
        "refit on the columns it selected) instead of the CV choice; implies --relaxed", flag="--relaxation")
    range_tolerance: Optional[float] = setting(
        None, OrNone(Number(0.0, 10.0, high_closed=True,
                            hint="a share of the best training error, e.g. 0.01 for within 1 %"),
                     "one standard error of the lowest CV error"),
        "ranges over near-best models: every model whose training error (for a yes/no outcome the log-loss, "
        "through its quadratic approximation) is within this share of the best (0.01: within one per cent; "
        "default: one standard error of the lowest CV error)",
        flag="--range-tolerance")

    def to_dict(self) -> dict:
        """Plain JSON values of every setting, in declaration order."""
        out = spec.to_dict(self)
        # Written only when set, so settings without them (and their cache keys) stay as before.
        if not self.penalty_factors:
            out.pop("penalty_factors", None)
        if not self.relaxed:
            out.pop("relaxed", None)
        if self.relaxation is None:
            out.pop("relaxation", None)
        if self.range_tolerance is None:
            out.pop("range_tolerance", None)
        return out

    @property
    def fits_relaxed(self) -> bool:
        """Whether the relaxed families are fitted."""
        return bool(self.relaxed) or self.relaxation is not None

    @classmethod
    def from_dict(cls, d: dict) -> "FitSettings":
        """Settings from plain values; missing keys take their defaults (no range check)."""
        return spec.from_dict(cls, d)

    def problems(self) -> list:
        """(field, problem) for every setting out of range; empty when all are fine."""
        return spec.problems(type(self), self)

    def check(self, error=None, label=spec.label_setting) -> "FitSettings":
        """Raise ``error`` (default DataError) naming the first setting out of range; return self."""
        spec.check(type(self), self, error or DataError, label)
        return self

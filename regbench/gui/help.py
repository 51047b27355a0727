"""The words the window uses, defined once, and the cautions that go with them."""

from __future__ import annotations

from PySide6 import QtWidgets

from regbench.data.identifiers import GROUPS_RULE

TERMS = (
    ("α (penalty)", "How hard a penalized model pulls its coefficients towards zero. Every penalized "
     "model minimises (1/(2W))·Σ wᵢ(yᵢ − b₀ − xᵢβ)² + α·Σⱼ vⱼ(ρ|βⱼ| + (1−ρ)/2·βⱼ²) on predictors "
     "standardized by their weighted mean and SD (W is the sum of the weights; vⱼ is the column's "
     "penalty factor, 1 unless set). α = 0 is OLS; "
     "a large α leaves only the intercept. Paths are drawn against log10 α."),
    ("Penalty factor", "How hard one column is penalized compared with the others, in every penalized "
     "model: 1 by default, 2 twice as hard, 0 not at all, so the column is always kept (a treatment or a "
     "known driver that must stay in while the rest is shrunk). It does not change OLS; OLS's pin only "
     "decides which of several overlapping columns OLS keeps."),
    ("Relaxed lasso / elastic net", "A refit without penalty on the columns the lasso (or elastic net) "
     "selected, blended with the penalized fit by the relaxation γ: 0 is the penalized fit, 1 the "
     "unpenalized refit on the selected columns; γ is chosen by the same cross-validation as α."),
    ("Solver converged", "Every penalized fit carries its duality gap, a bound on how far its objective is "
     "above the exact optimum; a fit whose gap is above the tolerance is marked NOT CONVERGED and its "
     "coefficients are not the exact optimum."),
    ("L1 ratio (ρ)", "The mix of the two penalties: ρ = 0 is ridge (squares only, keeps every column), "
     "ρ = 1 is lasso (absolute values only, sets columns to exactly zero), in between is elastic net."),
    ("Chosen α", "The α each penalized model is shown at. By default the one with the lowest "
     "held-out error ('lowest error' on the figure), or the largest α whose error is within one standard "
     "error of that lowest ('simplest within 1 SE': simpler, usually almost as good). In 'Fits differ · "
     "penalty', drag the α handle, type a value, or step along the grid with ← → to choose your own."),
    ("Columns used", "How many columns a penalized model gives a coefficient other than 0 at an α; the strip "
     "under the paths shows it along α."),
    ("Row counts (weights)", "A column saying how many times each row counts (\"each row counts … times\" in "
     "the sentence at the top); with none, every row counts once."),
    ("Held-out groups", "A column whose values name groups (glasshouses, batches, sites); cross-validation "
     "and the stability refits keep every row of a group on the same side (\"hold out whole … groups\"). "
     "A table opens with such a column chosen when one qualifies: " + GROUPS_RULE + "."),
    ("As categories", "Whole-number codes (1, 2, 3 for three varieties) read as categories: each value gets "
     "its own indicator column instead of one slope. The column list suggests it for whole numbers with "
     "few different values."),
    ("Set aside", "A column OLS leaves out because the columns it kept already reproduce it exactly "
     "(or up to round-off), such as a mean next to the values averaged or one temperature in two "
     "units. The window shows the combination that reproduces it and which other column could "
     "have been set aside instead; any of those can be pinned as the one to keep."),
    ("VIF", "Variance inflation factor: how many times larger a coefficient's variance is because "
     "other columns predict that column (1 / (1 − R²) of that column on the others). Above 10 is "
     "commonly read as strong overlap — a rule of thumb, not a test."),
    ("Condition index", "For the column-scaled design, the ratio of its largest singular value to each "
     "smaller one. A large index (above 30 by common practice) with two or more columns holding "
     "most of its variance proportion marks a near-dependency among those columns."),
    ("Agreement", "How close two models' predictions are to each other — root mean square and largest "
     "difference, correlation, mean difference with limits of agreement — judged beside each "
     "model's own error, on the training rows and on held-out rows."),
    ("Stress test", "The fitted models stay as they are while one input is damaged (shuffled, noised, "
     "frozen, rescaled, partly replaced with wild values; columns of categories are only shuffled, frozen "
     "or emptied); the panel shows how far each model's predictions move: the RMS shift, and the rows "
     "moved (the percentage of predictions that shift by more than the tolerance). A model that spreads "
     "weight over overlapping columns moves differently from one that relies on a single column."),
    ("Stability", "The models are refitted on bootstrap resamples of the rows (whole groups when a "
     "group column is set): how often each column is selected by lasso and elastic net, how often "
     "OLS sets it aside, and how much its coefficient varies."),
    ("Equally good models", "Every linear model whose training error is within a tolerance of the best "
     "one (by default one standard error of the lowest cross-validated error, as a share of it). For least "
     "squares they fill an ellipsoid around OLS, so the smallest and largest coefficient of each column, "
     "and of each row's prediction, are exact. A range across zero means the data do not settle the "
     "sign; a column in an exact dependency has no bound at all. A range says what the data cannot "
     "tell apart, not which story is true."),
    ("Importance", "For one model and one column: how much, in mean square, the model's predictions would "
     "change if that column were replaced by an independent copy of itself (2·β²·variance of the "
     "column); for OLS exactly how much its error would grow."),
    ("Yes/no outcome", "A target with exactly two values (0/1, yes/no, true/false, any two labels). The "
     "models are logistic: unpenalized, ridge, lasso and elastic net, each minimising (1/W)·Σ wᵢ ℓ(yᵢ, pᵢ) + "
     "α·(ρ‖β‖₁ + (1−ρ)/2·‖β‖²) with ℓ the log-loss, and their predictions are probabilities of the value that "
     "counts as yes. The choice beside the target says which value that is, or treats the target as a "
     "number instead."),
    ("Calibration", "Whether a probability means what it says: of the rows given 0.3, about three in ten "
     "should be yes. The reliability curve is an isotonic regression of the outcome on the probability "
     "(Dimitriadis, Gneiting & Jordan 2021); the calibration slope is 1 when the probabilities are neither "
     "too extreme (below 1) nor too timid (above 1) (Van Calster et al. 2019)."),
    ("Brier score", "The mean squared difference between probability and outcome (lower is better), split "
     "into miscalibration − discrimination + uncertainty; the uncertainty is what predicting the observed "
     "share for every row would score."),
    ("ROC, AUC", "The ROC curve plots, for every threshold, the share of yes rows flagged (sensitivity) "
     "against the share of no rows flagged (1 − specificity); the AUC is the chance that a random yes row "
     "gets a higher probability than a random no row."),
    ("Threshold", "The probability at or above which a row is flagged. The tool recommends none: the "
     "table shows what each threshold flags and misses, and what a 0.5 cut does (for a rare outcome it "
     "flags almost nobody). The person who acts on the scores records the one they chose, with a note; "
     "the stress test then counts the rows whose probability crosses it."),
    ("No rebalancing", "The classes are never reweighted to look equally common, and there is no option "
     "for it: rebalancing distorts the probabilities without improving how well they rank rows (van den "
     "Goorbergh et al. 2022, JAMIA). To flag more rows of a rare outcome, choose a lower threshold instead."),
    ("Cross-validation by group", "Held-out error computed with all rows of one group (for example one "
     "glasshouse) on the same side of the split, so a model is judged on groups it has not seen — "
     "the situation it will meet in use."),
)

CAUTIONS = (
    "Associations are not causes: a coefficient says how predictions change with a column in this "
    "table, not what would happen if you changed that quantity.",
    "Judge models on held-out groups, not on the rows they were fitted to.",
    "A risk score is not a decision: the person who acts on it chooses the threshold.",
    "A model is only as good as its inputs: a wrong unit, a stuck sensor or a coding change in one "
    "column moves predictions whatever the fit statistics say — the stress test shows how much.",
)


def help_html(panels=None) -> str:
    """The help text; ``panels`` are (menu name, question) pairs, by default the window's own."""
    if panels is None:
        # The window imports this module for its help view: imported here to break the cycle.
        from regbench.gui.window import _panel_classes

        panels = [(cls.nav, cls.title) for cls in _panel_classes()]
    rows = "".join(f"<dt><b>{t}</b></dt><dd>{d}</dd>" for t, d in TERMS)
    cautions = "".join(f"<li>{c}</li>" for c in CAUTIONS)
    views = "".join(f"<tr><td><b>{n}</b></td><td>{t}</td></tr>" for n, t in panels)
    return (
        "<h2>The panels</h2><p>Named here as in the list on the left and the View menu.</p>"
        f"<table cellpadding='3'>{views}</table>"
        "<h2>Words used in this window</h2>"
        f"<dl>{rows}</dl>"
        "<h2>Cautions</h2>"
        f"<ul>{cautions}</ul>"
        "<h2>Keys</h2><p>Ctrl+1 … Ctrl+9 switch panels, Ctrl+R refits, Ctrl+Z undoes the last change, "
        "Ctrl+S saves, Ctrl+O opens a table or project; tables and projects can also be dropped on the window.</p>"
    )


class HelpView(QtWidgets.QTextBrowser):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.setOpenExternalLinks(False)
        self.setHtml(help_html())

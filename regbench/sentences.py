"""Plain-text renderings for people: why OLS set a column aside, the CLI's fit summary, stress tables
and project inspection.

Built from :mod:`regbench.formatting` (numbers, the missing-number mark, word
lists) so the command line says things the way the window and the report do.
Sentences that belong to one result (why a column was set aside, what a stress
test moved) are made where the result is made and carried on it; this module
lays them out.
"""

from __future__ import annotations

import json
import math
import shlex
from typing import Optional

import numpy as np

from regbench.formatting import MISSING, join_words, number_text, plain_number, rough_number, sentence_number as fmt
from regbench.models.results import SetAside, model_columns, model_label

#: Where a project file keeps its arrays (regbench/project/FORMAT.md).
_RESULTS_DIR = "results/"


# -- How far models miss the target and differ from each other (the agreement sentences) ----------------
# On a yes/no outcome the predictions are probabilities: their own error is said as a Brier score (the
# mean squared error of the probabilities, as the fit-quality and calibration sentences give it) and a
# difference between two models as a difference in probability.


def miss_words(target: str, who: str, errors, units: str = "", binary: bool = False) -> str:
    """How far ``who`` ('it', 'each', 'both' or 'they') misses ``target``.

    ``errors`` holds one root-mean-square error (two for 'they'): said as such for a
    number, as its square, the Brier score, for a yes/no outcome.
    """
    u = f" {units}" if units and not binary else ""
    if binary:
        b = [fmt(e ** 2) for e in errors]
        return {"it": f"its probabilities of {target} have a Brier score of {b[0]}",
                "each": f"each has a Brier score of {b[0]} on {target}",
                "both": f"both have a Brier score of {b[0]} on {target}",
                "they": f"their Brier scores on {target} are {b[0]} and {b[-1]}"}[who]
    e = [fmt(v) for v in errors]
    return {"it": f"it misses {target} by {e[0]}{u} RMS",
            "each": f"each misses {target} by {e[0]}{u}",
            "both": f"both miss {target} by {e[0]}{u}",
            "they": f"they miss {target} by {e[0]} and {e[-1]}{u}"}[who]


def gap_words(size: float, units: str = "", binary: bool = False, rms: bool = True) -> str:
    """A difference between two models' predictions: '0.12 kg RMS', or '0.05 in probability (RMS)'."""
    if binary:
        return f"{fmt(size)} in probability" + (" (RMS)" if rms else "")
    return f"{fmt(size)}{f' {units}' if units else ''}" + (" RMS" if rms else "")


def own_error_words(binary: bool = False) -> str:
    """What a difference is a share of: the smaller model's own error."""
    return "the smaller root Brier score" if binary else "the smaller error"


def _summary_number(v) -> str:
    """A number in the fit summary's table: four significant digits, :data:`MISSING` when absent."""
    if v is None or not math.isfinite(v):
        return MISSING
    if v == 0:
        return "0"
    return f"{v:.4g}"


def se_kind_sentence(design, o) -> str:
    """Which standard errors the summary and the JSON carry."""
    if getattr(o, "cluster_std_errors", None) is not None:
        return (f"Standard errors: classical (rows independent) and, beside them, cluster-robust by "
                f"{design.groups_column} ({o.n_clusters} groups; small-sample factor G/(G−1)·(N−1)/(N−K)); "
                "when rows of a group share influences, read the cluster-robust ones.")
    return "Standard errors: classical (rows independent); set a group column for cluster-robust ones."


def combination_text(sa: SetAside) -> str:
    """``'32 + 1.8 × day_temp_c'``: the intercept (when not negligible) and the weighted terms."""
    parts = []
    scale = max([abs(sa.intercept)] + [abs(c) for c in sa.combination.values()] + [1e-300])
    if sa.combination:
        show_icpt = abs(sa.intercept) > 1e-9 * max(abs(sa.intercept) + sa.residual, 1.0) and \
            abs(sa.intercept) > 1e-12 * scale
    else:
        show_icpt = True
    terms = []
    if show_icpt:
        terms.append((sa.intercept, None))
    terms.extend((c, name) for name, c in sa.combination.items())
    for i, (c, name) in enumerate(terms):
        mag = plain_number(abs(c))
        body = mag if name is None else (name if mag == "1" else f"{mag} × {name}")
        if i == 0:
            parts.append(("−" if c < 0 else "") + body)
        else:
            parts.append(("− " if c < 0 else "+ ") + body)
    return " ".join(parts)


def set_aside_sentence(sa: SetAside) -> str:
    """One plain sentence saying why ``sa.column`` was set aside and what could replace it."""
    reason = getattr(sa, "reason", "combination")
    if reason == "too_few_rows":
        return (f"{sa.column} was set aside because there are too few rows, not because of what it holds: "
                f"the intercept and {sa.kept_count} kept columns already fit all {sa.rows} rows exactly, so the "
                f"data cannot tell what {sa.column} adds. More rows than columns, or a penalized model, "
                "would be needed to weigh it.")
    if not sa.combination:
        if sa.exact:
            return (f"{sa.column} was set aside: it is constant ({plain_number(sa.intercept)}) on every "
                    "row with weight, so the intercept already carries it.")
        return (f"{sa.column} was set aside: it is almost constant ({plain_number(sa.intercept)}, "
                f"varying by {rough_number(sa.residual)} RMS), so the intercept nearly carries it.")
    if reason == "category" and sa.category:
        how = "takes one value per" if sa.exact else "almost takes one value per"
        return (f"{sa.column} {how} {sa.category}, so the {sa.category} categories reproduce it; "
                f"its effect cannot be told apart from theirs, so it was set aside.")
    alts = join_words(sa.alternatives, "or")
    expr = combination_text(sa)
    if sa.exact:
        return (f"{sa.column} was set aside: it equals {expr} exactly (up to the rounding of the stored "
                f"numbers); keeping it instead of {alts} gives the same predictions.")
    share = 100.0 * sa.relative_residual
    return (f"{sa.column} was set aside: it almost equals {expr} (the two differ by {rough_number(sa.residual)} RMS, "
            f"{rough_number(share)}% of its spread, within the chosen rank tolerance); keeping it instead of {alts} "
            "gives almost the same predictions.")


#: The advice on a column that labels groups when single rows were held out (the CLI adds its flag).
GROUPS_ADVICE = "hold its groups out whole"


def groups_hint(design, table) -> Optional[str]:
    """One sentence when single rows were held out although a text column of ``table`` labels groups of
    rows (the window's starting rule, :data:`regbench.data.identifiers.GROUPS_RULE`); else None."""
    if table is None or design.groups_column is not None:
        return None
    from regbench.data.identifiers import group_label_column

    g = group_label_column(table, skip=(design.target, design.weights_column, design.no_count_column))
    if g is None:
        return None
    return (f"The column {g} labels {table.columns[g].distinct} groups of rows, and cross-validation held out "
            "single rows; rows of one group tend to be alike, so scores on single rows flatter the models: "
            f"{GROUPS_ADVICE} to judge them on groups they have not seen")


def fit_summary_text(design, results, classification=None, table=None) -> str:
    """A plain-text summary of the fit, in the order a reader asks about it.

    ``classification`` (a yes/no outcome's calibration and discrimination) adds how good
    the probabilities are.  ``table``, the table the design was built from, names a row the
    way the table does (its identifier column) where a sentence points at one.
    """
    binary = getattr(results, "outcome", "numeric") == "binary"
    lines = _summary_data_lines(design)
    hint = groups_hint(design, table)
    if hint is not None:
        lines.extend(["", "Held-out rows", "  " + hint])
    lines.append("")
    lines.extend(_summary_overlap_lines(results))
    lines.append("")
    lines.extend(_summary_coefficient_lines(results))
    lines.append("")
    if binary:
        lines.extend(_logistic_lines(design, results))
        if classification is not None:
            lines.extend(_probability_lines(classification))
    else:
        lines.extend(_ols_lines(design, results.ols))
    lines.extend(_summary_penalty_lines(design, results, binary))
    lines.append("")
    lines.extend(_summary_range_lines(design, results, table))
    lines.append("")
    lines.extend(_summary_closing_lines(design, binary))
    return "\n".join(lines)


def _summary_data_lines(design) -> list:
    """Which rows and columns the fit used, and how the reader read the columns."""
    lines = []
    extra = []
    if design.weights_column:
        if getattr(design, "counts", False):
            extra.append(f"each row counts as {design.weights_column} observations "
                         f"({design.observations():,.0f} in all)")
        else:
            extra.append(f"rows weighted by {design.weights_column} (precision weights: one observation per row)")
    if design.groups_column:
        extra.append(f"{len(design.group_labels)} groups in {design.groups_column}")
    head = f"Target {design.target}: {design.n} rows used, {len(design.excluded)} left out"
    lines.append(head + (f"; {', '.join(extra)}" if extra else "") + ".")
    if design.excluded:
        lines.append("")
        lines.append("Rows left out")
        # The JSON output lists every row; a summary stays readable.
        for e in design.excluded[:20]:
            lines.append(f"  row {e.row}, {e.column}: {e.reason}")
        if len(design.excluded) > 20:
            lines.append(f"  … and {len(design.excluded) - 20} more (see the JSON output)")
    if design.unusable:
        lines.append("")
        lines.append("Columns not used")
        for u in design.unusable:
            lines.append(f"  {u.column}: {u.reason}")
    if design.column_notes:
        lines.append("")
        lines.append("How columns were read")
        for c, note, _ in design.column_notes:
            lines.append(f"  {c}: {note}")
    return lines


def _summary_overlap_lines(results) -> list:
    """The columns OLS set aside and the overlap diagnostics, as sentences."""
    lines = ["What overlaps"]
    if results.ols.set_aside:
        for sa in results.ols.set_aside:
            lines.append(f"  • {set_aside_sentence(sa)}")
    for s in results.diagnostics.sentences:
        lines.append(f"  • {s}")
    if not results.ols.set_aside and not results.diagnostics.sentences:
        lines.append("  • No strong overlap between the predictors was found.")
    return lines


def _summary_coefficient_lines(results) -> list:
    """One row per design column, one column per model, in the table's units."""
    names = list(results.models())
    models = results.models()
    labels = [model_label(n) for n in names]
    set_aside = {sa.column for sa in results.ols.set_aside}
    # Penalized fits weigh every level of a category: their reference levels follow the design's columns.
    columns = model_columns(results.columns, models.values())
    width = max([len("(intercept)")] + [len(c) for c in columns]) + 2
    colw = max(12, max(len(l) for l in labels) + 2)
    lines = ["Coefficients in the table's units (– : not used by that model"
             + ("; reference: the level OLS measures the others against" if len(columns) > len(results.columns)
                else "") + ")"]
    lines.append(" " * (width + 2) + "".join(l.rjust(colw) for l in labels))
    lines.append("  " + "(intercept)".ljust(width) + "".join(_summary_number(models[n].intercept).rjust(colw) for n in names))
    for c in columns:
        cells = []
        for n in names:
            if n in ("ols", "logistic") and c in set_aside:
                cells.append("set aside".rjust(colw))
            elif c not in models[n].columns:
                cells.append("reference".rjust(colw))
            else:
                v = models[n].coefficient(c)
                cells.append(("–" if v == 0.0 else _summary_number(v)).rjust(colw))
        lines.append("  " + c.ljust(width) + "".join(cells))
    lines.append("  " + "columns used".ljust(width) + "".join(str(int(models[n].used.sum())).rjust(colw) for n in names))
    return lines


def _summary_penalty_lines(design, results, binary: bool) -> list:
    """Each penalized fit's α, how it was chosen and its held-out error, and the penalty factors."""
    k = results.settings.folds
    kind = "grouped " if design.groups is not None else ""
    lines = [f"Penalties (α), {k}-fold {kind}cross-validation:"]
    rules = {"fixed": "fixed by the settings", "cv_min": "lowest CV error", "cv_1se": "largest α within one SE of the lowest"}
    for name, pf in results.penalized.items():
        cv_txt = ""
        if pf.cv is not None:
            i = int(np.argmin(np.abs(np.log(pf.cv.alphas) - np.log(pf.alpha))))
            cv_txt = (f", held-out log-loss {_summary_number(pf.cv.mean[i])} (at the nearest grid α)" if binary else
                      f", held-out RMSE {_summary_number(math.sqrt(max(pf.cv.mean[i], 0.0)))} (at the nearest grid α)")
            if getattr(pf.cv, "at_edge", False):
                cv_txt += ("; CAUTION: the lowest CV error is at the smallest α tried, so a smaller α may "
                           "predict better")
        relax = "" if pf.relaxation is None else f", relaxation {_summary_number(pf.relaxation)}"
        lines.append(f"  {model_label(name)}: α {_summary_number(pf.alpha)} ({rules.get(pf.alpha_rule, pf.alpha_rule)}), "
                     f"L1 ratio {_summary_number(pf.l1_ratio)}{relax}{cv_txt}")
        if pf.convergence is not None and not pf.convergence.converged:
            lines.append("    " + pf.convergence.sentence())
    if results.settings.penalty_factors:
        lines.append("  Penalty factors: "
                     + ", ".join(f"{c} {_summary_number(v)}" for c, v in results.settings.penalty_factors)
                     + " (0: unpenalized, always kept); every other column 1.")
    return lines


def _summary_range_lines(design, results, table=None) -> list:
    """How far equally good models differ, or why that cannot be computed for this fit."""
    # The engine's results carry sentences from this module, so the layouts import the layers above it
    # here; the row names' module loads pandas, which `inspect` does not need.
    from regbench.analysis.ranges import compute_ranges, ranges_unavailable
    from regbench.data.identifiers import with_row_names

    why = ranges_unavailable(results)
    if why is not None:
        return ["How far equally good models differ: " + why]
    rg = compute_ranges(design, results, results.settings.range_tolerance)
    approx = " — quadratic approximation" if rg.approximation == "quadratic" else ""
    lines = [f"How far equally good models differ (tolerance {number_text(100 * rg.tolerance, 2)} %: "
             f"{rg.tolerance_note}{approx})"]
    for s in rg.sentences:
        lines.append(f"  • {with_row_names(s, table)}")
    for t in rg.trades:
        lines.append(f"  • {t['sentence']}")
    return lines


def _summary_closing_lines(design, binary: bool) -> list:
    """The objective the penalties minimize and the cautions every summary carries."""
    # The export layer sits above this module (see _summary_range_lines).
    from regbench.models.export import OBJECTIVE, OBJECTIVE_BINARY

    lines = ["Penalty objective: " + (OBJECTIVE_BINARY if binary else OBJECTIVE) + "."]
    if binary:
        lines.append("Predictions are probabilities of '" + str(design.levels[1]) + "'. A risk score is not a "
                     "decision: the person who acts on it chooses the threshold.")
    lines.append("These are associations, not causes; judge models on held-out groups; "
                 "a model is only as good as its inputs.")
    return lines


def _ols_lines(design, o) -> list:
    """The numeric target's OLS fit-quality lines."""
    counts = getattr(design, "counts", False)
    sd_note = (f" for a row of weight 1 (rows are weighted by {design.weights_column})"
               if design.weighted and not counts else "")
    out = [f"OLS: R² {_summary_number(o.r_squared)}, adjusted R² {_summary_number(o.adj_r_squared)}, "
           f"residual SD {_summary_number(o.residual_sd)}{sd_note}, "
           f"{_summary_number(o.df_resid)} residual degrees of freedom."]
    if getattr(o, "inference_note", ""):
        out.append(f"  {o.inference_note}")
    out.append("  " + se_kind_sentence(design, o))
    return out


def _logistic_lines(design, results) -> list:
    """The yes/no outcome's summary lines: levels, separation, fit quality, the observed share."""
    lr = results.logistic
    W = float(design.weights.sum())
    share = float(design.weights @ design.y) / W
    if design.no_count_column:
        swap = "to swap them, exchange the --yes-count and --no-count columns"
    else:
        swap = f"to swap them, pass --yes-level {shlex.quote(str(design.levels[0]))}"
    out = [f"Yes/no outcome: '{design.levels[1]}' counts as yes, '{design.levels[0]}' as no "
           f"(observed share of yes {share:.4g}; {swap}; --outcome numeric fits the target as a number)."]
    if lr.separation is not None:
        out.append(lr.separation.sentence)
    else:
        mean_p = float(design.weights @ lr.model.predict(design.X)) / W
        out.append(f"Logistic: log-likelihood {_summary_number(lr.log_likelihood)}, McFadden pseudo-R² "
                   f"{_summary_number(lr.pseudo_r_squared)}; mean predicted probability {mean_p:.4g} "
                   "(equals the observed share: the free intercept guarantees it).")
    return out


def _probability_lines(cl) -> list:
    """How good a yes/no outcome's probabilities are, per model, on held-out rows when there are some."""
    split = "held_out" if cl.calibration.get("held_out") else "training"
    where = "held-out rows" if split == "held_out" else "training rows"
    out = [f"Probabilities on {where}: Brier score (lower is better), calibration slope (1 is ideal), AUC:"]
    for k in cl.models:
        if k not in cl.calibration[split]:
            continue
        c, d = cl.calibration[split][k], cl.discrimination[split][k]
        out.append(f"  {model_label(k)}: Brier {_summary_number(c.brier)}, slope {_summary_number(c.slope)}, "
                   f"AUC {_summary_number(d.auc)}")
    out.extend(f"  {s}" for s in cl.sentences)
    return out


def stress_text(design, res) -> str:
    """The stress test of one column as a table and its sentences (``regbench stress``)."""
    strength = "" if res.strength is None else f", strength {fmt(res.strength)}"
    lines = [f"Stress test on {design.target}: {res.kind} {res.column}{strength}, seed {res.config.seed}; "
             f"tolerance {fmt(res.tolerance)}", ""]
    head = f"{'model':<28}{'RMS shift':>12}{'mean shift':>12}{'rows moved':>12}{'error before':>14}{'error after':>13}"
    lines.append(head)
    for k in res.models:
        s = res.shifts[k]
        lines.append(f"{model_label(k):<28}{fmt(s.shift_rmse):>12}{fmt(s.mean_shift):>12}{s.moved_share:>12.0%}"
                     f"{fmt(s.error_clean):>14}{fmt(s.error_damaged):>13}")
    lines.append("")
    lines.extend(res.sentences)
    return "\n".join(lines)


def ranking_text(design, rk) -> str:
    """Every column damaged in turn, ranked per model, and the sentences (``regbench stress --all-columns``)."""
    lines = [f"Stress ranking on {design.target}: {rk.kind} each column in turn (seed {rk.seed}); shift RMS per model",
             ""]
    width = max(len(c) for c in rk.columns) + 2
    lines.append(f"{'column':<{width}}" + "".join(f"{model_label(k)[:14]:>16}" for k in rk.models))
    for j, c in enumerate(rk.columns):
        lines.append(f"{c:<{width}}" + "".join(f"{fmt(rk.shift_rmse[i, j]):>16}" for i in range(len(rk.models))))
    lines.append("")
    lines.extend(rk.sentences)
    return "\n".join(lines)


def inspect_text(info: dict) -> str:
    """Plain-text rendering of :func:`inspect_project` (a damaged session.json shows as damaged, never fails)."""
    from regbench.errors import one_line

    def show(v, limit=200):
        return one_line(v if isinstance(v, str) else json.dumps(v, ensure_ascii=False, default=str))[:limit]

    rows, cols = info.get("table_rows"), info.get("table_columns")
    lines = [
        f"project      {show(info['path'])}",
        f"format       {info['format']} version {info['format_version']} (made by regbench {show(info['app_version'])})",
        f"created      {show(info['created'])}",
        f"saved        {show(info['saved'])}",
        f"table        {show(rows)} rows × {show(cols)} columns, sha256 {show(info['table_sha256'])[:16]}…",
        f"hash check   {info['hash_check']}",
    ]
    tf = info.get("table_file")
    if isinstance(tf, dict):
        lines.insert(-1, f"rows from    {show(tf.get('path'))} ({show(tf.get('rows_used'))} usable rows; the table "
                         f"above is {'a seeded sample of them' if tf.get('sampled') else 'every one of them'})")
    roles = info.get("roles")
    if isinstance(roles, dict) and roles:
        preds = roles.get("predictors")
        preds = preds if isinstance(preds, list) and preds else ["(every other usable column)"]
        lines.append(f"target       {show(roles.get('target'))}")
        lines.append(f"predictors   {show(', '.join(map(str, preds)))}")
        if isinstance(roles.get("categorical"), list) and roles["categorical"]:
            lines.append(f"categorical  {show(', '.join(map(str, roles['categorical'])))}")
        lines.append(f"weights      {show(roles.get('weights') or '(none)')}")
        lines.append(f"groups       {show(roles.get('groups') or '(none)')}")
        if roles.get("outcome") or roles.get("positive_level") or roles.get("no_count"):
            kind = roles.get("outcome") or "decided from the target"
            yes = f"; yes = {show(roles['positive_level'])}" if roles.get("positive_level") else ""
            nc = f"; no counts in {show(roles['no_count'])}" if roles.get("no_count") else ""
            lines.append(f"outcome      {show(kind)}{yes}{nc}")
        thr = info.get("threshold")
        if isinstance(thr, dict):
            lines.append(f"threshold    {show(thr.get('value'))} — {show(thr.get('note') or '(no note)')}")
    elif roles is not None:
        lines.append(f"roles        (damaged: {show(roles, 60)})")
    s = info.get("settings")
    if isinstance(s, dict) and s:
        lines.append("settings     " + show(", ".join(f"{k}={show(v, 60)}" for k, v in s.items()), 400))
    elif s is not None:
        lines.append(f"settings     (damaged: {show(s, 60)})")
    lines.append(f"stress tests {show(info.get('stress_tests', 0))}; bootstrap refits {show(info.get('bootstrap'))}")
    lines.append(f"cached results {'present' if info['cached_results'] else 'absent'}"
                 f" ({info['cached_arrays']} arrays)")
    lines.append("members:")
    arrays = [e for e in info["members"] if e["name"].startswith(_RESULTS_DIR)]
    for e in info["members"]:
        if e in arrays:
            continue
        check = show(info["member_checks"].get(e["name"], ""), 400)
        lines.append(f"  {show(e['name'], 60):<28} {e['size']:>12,d} bytes  {check}")
    if arrays:
        failed = [e["name"] for e in arrays if info["member_checks"].get(e["name"]) != "ok"]
        lines.append(f"  {_RESULTS_DIR + '*.npy':<28} {sum(e['size'] for e in arrays):>12,d} bytes  "
                     f"{len(arrays)} arrays, " + (f"failed: {show(', '.join(failed), 400)}" if failed else "all ok"))
    return "\n".join(lines)


def row_sample_sentence(sample_rows: int, rows_used: int, seed: int, sampled: bool, route: str = "streamed") -> str:
    """The one sentence a table read in batches carries on screen and in the report: which rows the
    row-level views use (rows, seed, of how many) and that every fitted number uses all of them."""
    where = "on a Dask cluster" if route == "cluster" else "in batches"
    if not sampled:
        return (f"The table was read {where}; every one of its {rows_used:,} usable rows is at hand, so row-level "
                "views use every row.")
    return (f"The table was read {where}: every fitted number uses all {rows_used:,} usable rows, while row-level "
            f"views (scatter plots, residuals, per-row stress) use a seeded sample of {sample_rows:,} of them "
            f"(seed {seed}).")


#: What a table read in batches cannot show when the row-level views hold a sample, one line each.
NOT_ON_SAMPLE = {
    "heldout": "Held-out predictions are not shown: each fold's refit needs that fold's cross-products over every "
               "row, and only a sample of rows is at hand; the cross-validation errors use every row.",
    "stability": "Stability is not computed: without a group column each refit draws single rows, and only a "
                 "sample of rows is at hand; name a group column (whole groups are refitted from their "
                 "cross-products over every row) or read the table in memory (a larger memory budget) to see it.",
}

"""The HTML report: one self-contained file, sections phrased as a stakeholder's questions.

No network, no scripts: charts are inline SVG built here, the style sheet is
inline and prints cleanly (each question starts a new page).  Every piece of
text that came from the user or the table is escaped.
"""

from __future__ import annotations

import platform
import re
from datetime import datetime, timezone
from html import escape

import numpy as np

from regbench import __version__
from regbench.batches import budget_words
from regbench.data.identifiers import row_label_column, row_names, with_row_names
from regbench.formatting import MISSING, join_words, number_text, percent
from regbench.models.coding import design_sd
from regbench.models.results import aligned, model_columns, model_label, unpenalized
from regbench.palette import model_colour
from regbench.report import svg

#: Section ids and headings, in the order the report shows them.
SECTIONS = (
    ("question", "What are we asking, and of which rows?"),
    ("overlap", "What overlaps in this table?"),
    ("fits", "How do the fits differ?"),
    ("quality", "Does any of them fit?"),
    ("agreement", "Do they predict alike?"),
    ("stress", "What breaks when one input goes bad?"),
    ("stability", "How sure are we?"),
    ("ranges", "How far can equally good models differ?"),
    ("notes", "What did the analyst note?"),
    ("reproduce", "How can someone reproduce this?"),
    ("cautions", "What should a reader keep in mind?"),
)

CAUTIONS = (
    "Associations are not causes: a coefficient says how the prediction moves with a column in this table, "
    "not what would happen if someone changed that input.",
    "Judge a model on held-out groups: the error on the rows a model was fitted on flatters it, most of all "
    "when rows of one group resemble each other.",
    "A model is only as good as its inputs: a column that drifts, is recalibrated or fails in production "
    "moves every model that leans on it — the stress test above shows by how much.",
    "Where columns overlap, the split of weight between them is not identified by the data; different fits "
    "can predict alike while telling different stories about which input matters.",
)

CSS = """
:root { --ink:#1d2329; --muted:#5b6670; --line:#d5dbe0; --accent:#1f5f8b; --soft:#f3f6f8; }
* { box-sizing: border-box; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: var(--ink);
       max-width: 980px; margin: 0 auto; padding: 24px 28px 60px; }
header.top { border-bottom: 3px solid var(--accent); margin-bottom: 18px; padding-bottom: 8px; }
header.top h1 { font-size: 26px; margin: 0 0 4px; }
header.top p { margin: 0; color: var(--muted); }
nav.toc ol { columns: 2; margin: 6px 0 18px; padding-left: 22px; }
nav.toc a { color: var(--accent); text-decoration: none; }
section { margin-top: 34px; }
section > h2 { font-size: 21px; border-left: 6px solid var(--accent); padding-left: 10px; margin-bottom: 6px; }
h3 { font-size: 16px; margin: 20px 0 6px; }
p.answer { background: var(--soft); border-radius: 4px; padding: 8px 12px; margin: 6px 0; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 13px; }
th, td { border-bottom: 1px solid var(--line); padding: 3px 8px; text-align: right; vertical-align: top; }
th:first-child, td:first-child { text-align: left; }
td.t, th.t { text-align: left; }
thead th { background: var(--soft); border-bottom: 2px solid var(--line); }
td.zero { color: #9aa3ab; }
td.neg { color: #8c2d19; }
.muted { color: var(--muted); }
p.warn { color: #8c2d19; font-weight: 600; }
p.notice { border-left: 4px solid var(--accent); padding: 4px 10px; margin: 6px 0; }
figure { margin: 10px 0 16px; }
figure figcaption { font-size: 12px; color: var(--muted); }
svg.chart { max-width: 100%; height: auto; }
svg .ct { font: 600 13px system-ui, sans-serif; fill: #1d2329; }
svg .tk { font: 11px system-ui, sans-serif; fill: #444; }
svg .al { font: 12px system-ui, sans-serif; fill: #333; }
svg .lg { font: 11px system-ui, sans-serif; fill: #333; }
pre.notes { white-space: pre-wrap; font: inherit; background: var(--soft); padding: 10px 12px; border-radius: 4px; }
pre.cmd { white-space: pre-wrap; overflow-wrap: anywhere; font: 12px ui-monospace, "DejaVu Sans Mono", monospace;
          background: var(--soft); padding: 8px 12px; border-radius: 4px; }
.scroll { overflow-x: auto; }
@media print {
  body { max-width: none; padding: 0; font-size: 11pt; }
  nav.toc { display: none; }
  section { break-before: page; page-break-before: always; margin-top: 0; }
  section:first-of-type { break-before: auto; page-break-before: auto; }
  figure, table { break-inside: avoid; page-break-inside: avoid; }
  .scroll { overflow: visible; }
  a { color: inherit; text-decoration: none; }
}
"""


# -- small helpers -------------------------------------------------------------------------

def e(x) -> str:
    return escape(str(x), quote=True)


def num(x, digits: int = 4) -> str:
    if x is None:
        return MISSING
    try:
        v = float(x)
    except (TypeError, ValueError):
        return e(x)
    return number_text(v, digits, unicode_minus=True)


pct = percent


def table(headers, rows) -> str:
    """An HTML table; cells are escaped unless given as ('html', markup) or ('cls', class, text).

    A column whose cells are all text (not numbers) is left-aligned, numbers right-aligned.
    ``headers`` None leaves out the header row.
    """
    rows = [tuple(r) for r in rows]
    ncol = max([len(headers or ())] + [len(r) for r in rows])
    text_col = []
    for j in range(ncol):
        cells = [r[j] for r in rows if j < len(r)]
        text_col.append(j == 0 or any(isinstance(c, str) and not _numeric_text(c) for c in cells))
    out = ['<div class="scroll"><table>']
    if headers:
        out.append("<thead><tr>")
        out += [f'<th{" class=t" if text_col[i] else ""}>{e(h)}</th>' for i, h in enumerate(headers)]
        out.append("</tr></thead>")
    out.append("<tbody>")
    for row in rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            if isinstance(cell, tuple) and cell and cell[0] == "html":
                out.append(f"<td>{cell[1]}</td>")
            elif isinstance(cell, tuple) and cell and cell[0] == "cls":
                out.append(f'<td class="{cell[1]}">{e(cell[2])}</td>')
            else:
                out.append(f'<td{" class=t" if text_col[i] else ""}>{e(cell)}</td>')
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _numeric_text(s: str) -> bool:
    return s == MISSING or bool(re.fullmatch(r"[−-]?(\d[\d.]*(e[−-]?\d+)?%?|∞)", s))


def sentences(items) -> str:
    return "".join(f'<p class="answer">{e(s)}</p>' for s in (items or ()))


def figure(svg_markup: str, caption: str) -> str:
    return f"<figure>{svg_markup}<figcaption>{e(caption)}</figcaption></figure>"


def coef_cell(v) -> tuple:
    v = float(v)
    if v == 0.0:
        return ("cls", "zero", "0")
    return ("cls", "neg" if v < 0 else "", num(v))


# -- sections ------------------------------------------------------------------------------

def _question(session) -> str:
    d, r = session.design, session.roles
    preds = list(dict.fromkeys(d.sources))
    used, left_out = _rows_counted(session)
    parts = [f'<p class="answer">Which inputs predict <b>{e(d.target)}</b>, and which model of it can we trust? '
             f'{used} of the table\'s {d.n_table_rows} rows are used; {left_out} '
             f'{"is" if left_out == 1 else "are"} left out (listed below).</p>'] + _rows_notice(session)
    info = [("Table", session.table.source or "(in memory)"), ("Target", d.target),
            ("Predictors", ", ".join(preds)), ("Design columns", f"{d.p} (categories coded one column per level "
                                                                   "beside the first; the penalized fits add the "
                                                                   "first level and weigh every level alike)"),
            ("Categorical marks", ", ".join(r.categorical) or "none"),
            ("Row weights", ("none (every row counts once)" if not r.weights else
                             f"{r.weights}: counts (a row stands for that many identical observations)"
                             if getattr(d, "counts", False) else
                             f"{r.weights}: precision weights (one observation per row, of unequal quality)")),
            ("Held-out groups", f"{r.groups} ({len(d.group_labels)} groups)" if r.groups else "none")]
    if budget_words(session.rows):
        info.append(("Reading the rows", budget_words(session.rows)))
    parts.append(table(None, info))
    parts.append("<h3>Rows left out, and why</h3>")
    if d.excluded:
        parts.append(table(["Table row", "Column", "Reason"], [(str(x.row), x.column, x.reason) for x in d.excluded]))
    else:
        parts.append("<p>No row was left out.</p>")
    parts.append("<h3>Columns that could not be used</h3>")
    if d.unusable:
        parts.append(table(["Column", "Reason"], [(u.column, u.reason) for u in d.unusable]))
    else:
        parts.append("<p>Every chosen predictor carries usable information.</p>")
    if d.column_notes:
        parts.append("<h3>How columns were read</h3>")
        parts.append(table(["Column", "How it was read"], [(c, note) for c, note, _ in d.column_notes]))
    return "".join(parts)


def _overlap(session) -> str:
    res = session.results
    if res is None:
        return "<p>The models have not been fitted.</p>"
    ols, dg = res.ols, res.diagnostics
    parts = []
    if ols.set_aside:
        who = "The logistic model" if getattr(res, "outcome", "numeric") == "binary" else "OLS"
        parts.append(f'<p class="answer">{who} set {len(ols.set_aside)} column{"s" if len(ols.set_aside) != 1 else ""} '
                     "aside because the kept columns already reproduce them:</p><ul>")
        if who != "OLS" and res.logistic is not None and res.logistic.separation is not None:
            parts.insert(0, f'<p class="answer">{e(res.logistic.separation.sentence)}</p>')
        parts += [f"<li>{e(sa.sentence())}</li>" for sa in ols.set_aside]
        parts.append("</ul>")
    else:
        parts.append('<p class="answer">OLS kept every column: none is an exact combination of the others.</p>')
    parts.append(sentences(dg.sentences))
    if dg.near_dependencies:
        parts.append("<h3>Strongly collinear columns</h3>")
        parts.append(table(["Column", "VIF", "Explained by", "R²"],
                           [(nd.column, num(nd.vif), ", ".join(nd.explained_by), num(nd.r_squared))
                            for nd in dg.near_dependencies]))
    parts.append("<h3>Variance inflation of the kept columns</h3>")
    parts.append(table(["Column", "VIF"], [(c, num(v)) for c, v in zip(dg.columns, dg.vif)]))
    parts.append('<p class="muted">A VIF above 10 is commonly read as serious collinearity (common practice, '
                 "no single source).</p>")
    parts.append("<h3>Condition indices</h3>")
    rows = []
    vp = np.asarray(dg.variance_proportions)
    for i, ci in enumerate(dg.condition_indices):
        high = [f"{t} ({pct(vp[i, j])})" for j, t in enumerate(dg.terms) if vp.ndim == 2 and vp[i, j] > 0.5]
        rows.append((str(i + 1), num(ci), ", ".join(high) or MISSING))
    parts.append(table(["Dimension", "Condition index", "Terms with over half their variance here"], rows))
    parts.append('<p class="muted">A condition index above 30 with two or more terms over half their variance '
                 "marks a damaging near-dependency (Belsley, Kuh &amp; Welsch, 1980).</p>")
    return "".join(parts)


def _fits(session) -> str:
    res = session.results
    if res is None:
        return "<p>The models have not been fitted.</p>"
    models = session.models()
    alphas = session.alphas()
    parts = [sentences(getattr(session.structure(), "sentences", ()))]
    for name, pf in res.penalized.items():
        label = model_label(name)
        chosen = alphas.get(name, pf.alpha)
        how = "set by hand" if name in session.chosen_alpha else {"cv_min": "lowest CV error",
                                                                  "cv_1se": "one-standard-error rule",
                                                                  "fixed": "fixed in the settings"}.get(pf.alpha_rule, pf.alpha_rule)
        relax = "" if pf.relaxation is None else f", relaxation γ = {num(pf.relaxation)}"
        parts.append(f"<h3>{e(label)}: chosen α = {num(chosen)} ({e(how)}){e(relax)}</h3>")
        if pf.relaxation is not None:
            parts.append('<p class="muted">' + e(
                f"A refit without penalty on the columns {model_label(name.replace('relaxed_', '')).lower()} "
                f"selected at each α, blended with it: coefficients = (1 − γ)·penalized + γ·refit; "
                "γ = 0 is the penalized fit, γ = 1 the unpenalized refit (Meinshausen 2007).") + "</p>")
        parts.append(_convergence(pf, models.get(name)))
        cv = pf.cv
        caption = ("Top: each column's standardized coefficient as the penalty weakens from left to right, "
                   "labelled at its end; middle: how many columns the model uses; bottom: held-out error "
                   "with a band of ± one standard error. The handle marks the chosen α, with the model's "
                   "coefficients there beside it.")
        if cv is not None:
            caption += (f" {cv.n_folds} {'grouped ' if cv.grouped else ''}folds; lowest error at "
                        f"α = {num(cv.alpha_min)}, simplest within one SE at α = {num(cv.alpha_1se)}.")
        parts.append(figure(svg.penalty_figure(session, name), caption))
        if cv is not None and getattr(cv, "at_edge", False):
            parts.append('<p class="answer"><b>At the edge of the grid:</b> the lowest cross-validated error is at '
                         f"the smallest α tried ({num(cv.alpha_min)}); a smaller α might predict better, so "
                         "the chosen α is a bound, not a minimum.</p>")
    parts.append("<h3>Coefficients side by side (original units)</h3>")
    names = list(models)
    rows = [("(intercept)", *[num(models[n].intercept) for n in names])]
    aside = set(res.ols.columns[j] for j in np.flatnonzero(res.ols.set_aside_mask))
    # Penalized fits weigh every level of a category: their reference levels follow the design's columns.
    columns = model_columns(res.columns, models.values())
    extra = columns[len(res.columns):]
    for c in columns:
        rows.append((c, *[("cls", "zero", "set aside") if n == "ols" and c in aside else
                          ("cls", "zero", "reference") if c not in models[n].columns else
                          coef_cell(models[n].coefficient(c)) for n in names]))
    parts.append(table(["Column", *[model_label(n) + (f" α={num(models[n].alpha, 3)}" if models[n].alpha else "")
                                    + (f" γ={num(models[n].relaxation, 2)}" if models[n].relaxation is not None else "")
                                    + (" (NOT CONVERGED)" if models[n].converged is False else "")
                                    for n in names]], rows))
    parts.append('<p class="muted">"set aside" means OLS has no coefficient for the column (the kept columns '
                 "reproduce it); a grey 0 means a lasso or elastic net does not select it at this α.</p>")
    if extra:
        parts.append('<p class="muted">' + e(
            f"{join_words(extra)}: the reference level{'s' if len(extra) > 1 else ''} of "
            f"{'their categories' if len(extra) > 1 else 'its category'}. OLS measures the other levels against "
            f"{'them' if len(extra) > 1 else 'it'} (its intercept carries {'them' if len(extra) > 1 else 'it'}); "
            "ridge, lasso and elastic net give every level its own coefficient, so renaming or reordering the "
            "levels changes none of their predictions.") + "</p>")
    groups = [(model_label(n), aligned(models[n], columns, standardized=True)) for n in names]
    parts.append(figure(svg.bar_chart(list(columns), groups, title="Standardized coefficients by model",
                                      ylabel="coefficient × column SD", colours=[model_colour(n) for n in names]),
                        "Standardized so columns in different units compare."))
    parts.append(_ols_inference(session))
    return "".join(parts)


def _ols_inference(session) -> str:
    """OLS standard errors, classical and (with a group column) cluster-robust, with what they mean."""
    res, d = session.results, session.design
    o = getattr(res, "ols", None)
    if o is None or getattr(o, "std_errors", None) is None or getattr(res, "outcome", "numeric") == "binary":
        return ""  # a yes/no outcome's inference is the logistic model's
    cl = getattr(o, "cluster_std_errors", None)
    parts = ["<h3>OLS standard errors</h3>"]
    if cl is not None:
        parts.append('<p class="answer">' + e(
            f"Beside the classical standard errors, which take every row as independent, the table gives "
            f"cluster-robust ones by {d.groups_column} ({o.n_clusters} groups). Rows of one group often share "
            "influences the columns do not record (the same bed, batch or site), so their errors move together "
            "and the classical figures claim more certainty than the data hold. Prefer the cluster-robust "
            "standard errors when rows of a group may resemble each other; with few groups (fewer than about "
            "30–50, common practice) they are themselves rough.") + "</p>")
    else:
        parts.append('<p class="muted">Classical standard errors: every row is taken as independent. When rows '
                     "come in groups that share influences (the same bed, batch or site), set a group column: "
                     "the report then adds cluster-robust standard errors by group.</p>")
    if getattr(o, "inference_note", ""):
        parts.append(f'<p class="warn">{e(o.inference_note)}</p>')
    head = ["Column", "Coefficient", "Standard error"] + (["Cluster-robust SE"] if cl is not None else []) + [
        "t", "p-value"]
    aside = np.asarray(o.set_aside_mask)
    rows = [("(intercept)", num(o.intercept), num(o.intercept_se))
            + ((num(getattr(o, "cluster_intercept_se", float("nan"))),) if cl is not None else ()) + (MISSING, MISSING)]
    for j, c in enumerate(o.columns):
        if aside[j]:
            rows.append((c, ("cls", "zero", "set aside"), MISSING, *([MISSING] if cl is not None else []), MISSING, MISSING))
            continue
        rows.append((c, num(o.coef[j]), num(o.std_errors[j]), *([num(cl[j])] if cl is not None else []),
                     num(o.t_values[j]), num(o.p_values[j])))
    parts.append(table(head, rows))
    if cl is not None:
        parts.append('<p class="muted">Cluster-robust standard errors with the small-sample factor '
                     "G/(G−1)·(N−1)/(N−K); t and p-values are the classical ones.</p>")
    return "".join(parts)


def _convergence(pf, model) -> str:
    """The solver's certificate for one family; a fit that stopped short is flagged, never passed over."""
    conv = pf.convergence
    lines = []
    if conv is not None:
        lines.append((conv.converged, conv.sentence()))
    if model is not None and model.converged is False and model is not pf.model:
        lines.append((False, f"NOT CONVERGED at the chosen α: duality gap {num(model.gap, 2)} of the variance of y."))
    return "".join(f'<p class="{"muted" if ok else "warn"}">{e(text)}</p>' for ok, text in lines)


def _agreement(session) -> str:
    ag = session.agreement()
    if ag is None:
        return "<p>The models have not been fitted.</p>"
    parts = [sentences(ag.sentences)]
    own = ag.own_error
    binary = getattr(ag, "scale", "value") == "probability"
    if binary:
        parts.append("<h3>Each model's own error: root Brier score (weighted RMS of p − y) and log-loss</h3>")
        parts.append(table(["Model", "Root Brier, fitted rows", "Root Brier, held-out rows", "Log-loss, fitted rows",
                            "Log-loss, held-out rows"],
                           [(model_label(n), num(own[n].get("training")), num(own[n].get("held_out")),
                             num(ag.log_loss[n].get("training")), num(ag.log_loss[n].get("held_out")))
                            for n in ag.models]))
    else:
        parts.append("<h3>Each model's own error (weighted RMSE against the target)</h3>")
        parts.append(table(["Model", "On the rows it was fitted on", "On held-out rows"],
                           [(model_label(n), num(own[n].get("training")), num(own[n].get("held_out")))
                            for n in ag.models]))
    scales = [("", ag.pairs)] + ([(" (log-odds)", ag.log_odds_pairs)] if binary else [])
    if binary:
        scales[0] = (" (probabilities)", ag.pairs)
    for scale, pairs in scales:
        for split, title in (("held_out", "Between models, on held-out rows"),
                             ("training", "Between models, on the fitted rows")):
            rows = [(f"{model_label(p.a)} vs {model_label(p.b)}", num(p.rmse), num(p.max_abs), num(p.corr, 5),
                     num(p.mean_diff), f"{num(p.loa_low)} to {num(p.loa_high)}") for p in pairs if p.split == split]
            if rows:
                parts.append(f"<h3>{e(title + scale)}</h3>")
                parts.append(table(["Pair", "RMSE of difference", "Largest difference", "Correlation",
                                    "Mean difference", "95% limits of agreement"], rows))
    return "".join(parts)


def _quality(session) -> str:
    q = session.fit_quality()
    if q is None:
        return "<p>The models have not been fitted.</p>"
    parts = [sentences(q.sentences)]
    held = any(f.split == "held_out" for f in q.fits)
    heads = ["Model", "RMSE, fitted rows", "R², fitted rows"] + (["RMSE, held out", "R², held out",
                                                                   "Mean residual, held out"] if held else [])
    rows = []
    for n in q.models:
        t, h = q.fit(n, "training"), q.fit(n, "held_out")
        rows.append((model_label(n), num(t.rmse), num(t.r_squared))
                    + ((num(h.rmse), num(h.r_squared), num(h.mean_residual)) if held and h else ()))
    parts.append(table(heads, rows))
    if q.groups:
        d = session.design
        labels = list(dict.fromkeys(g.group for g in q.groups))
        by = {(g.model, g.group): g for g in q.groups}
        parts.append(f"<h3>{'Held-out' if q.group_split == 'held_out' else 'Fitted'} error (RMSE) by "
                     f"{e(d.groups_column)}</h3>")
        parts.append(table([d.groups_column, "Rows", *[model_label(n) for n in q.models]],
                           [(g, str(by[(q.models[0], g)].rows), *[num(by[(n, g)].rmse) if (n, g) in by else ""
                                                                 for n in q.models]) for g in labels]))
    return "".join(parts)


def _ranges(session) -> str:
    from regbench.analysis.ranges import KIND_HELDOUT, approximation_note, ranges_unavailable, tolerance_phrase

    rg = session.ranges() if session.results is not None else None
    if rg is None:
        why = ranges_unavailable(session.results) if session.results is not None else None
        return ("<p>The models have not been fitted.</p>" if session.results is None else
                f"<p>{e(why or 'Ranges over near-best models are not available for this fit.')}</p>")
    binary = rg.outcome == "binary"
    kind = ("the held-out default" if rg.tolerance_kind == KIND_HELDOUT else "set in the settings")
    label = "<p><strong>Quadratic approximation.</strong></p>" if rg.approximation == "quadratic" else ""
    parts = [label, f"<p>Not just four fits: every linear model {e(tolerance_phrase(rg))} — {e(kind)}; "
             f"{e(rg.tolerance_note)}. {e(approximation_note(rg))}</p>",
             sentences([with_row_names(t, session.table) for t in rg.sentences]),
             sentences([t["sentence"] for t in rg.trades])]
    marks = [(model_label(n), n, _std_coef(session, n)) for n in rg.models]
    scale = "standardized log-odds coefficient" if binary else "standardized coefficient"
    parts.append(figure(svg.range_bars(rg.columns, rg.low_std, rg.high_std, marks,
                                       title="Coefficient of each column over every near-best model",
                                       xlabel=f"{scale} (per SD of the column)"),
                        "Each band runs from the smallest to the largest coefficient any near-best model gives the "
                        "column; a band across zero means the data do not settle the sign. Marks show where the "
                        "fitted models sit. Dashed rows have no bound: the column trades weight with others."))
    parts.extend(_ranges_columns(rg))
    word = "log-loss" if binary else "error"
    parts.append("<h3>Where the fitted models sit</h3>")
    parts.append(table(["Model", f"Training {word} above the best", "Inside the set"],
                       [(model_label(n), pct(m.excess), "yes" if m.inside else "no") for n, m in rg.models.items()]))
    parts.extend(_ranges_rows(rg, session.table))
    parts.append('<p class="muted">A range says what the data cannot tell apart, not which story is true: '
                 "associations are not causes, and a model is only as good as its inputs.</p>")
    return "".join(parts)


def _ranges_columns(rg) -> list:
    """The per-column table of the ranges section and what its importance means."""
    binary = rg.outcome == "binary"

    def imp(v):  # least squares: a share of the best error; yes/no: the log-odds' mean square
        return num(v, 3) if binary else pct(v / rg.best_error)

    rows = []
    for j, c in enumerate(rg.columns):
        if rg.bounded[j]:
            span, std = f"{num(rg.low[j])} to {num(rg.high[j])}", f"{num(rg.low_std[j], 3)} to {num(rg.high_std[j], 3)}"
            sign = "settled" if rg.sign_settled[j] else "not settled"
            rows.append((c, span, std, sign, f"{imp(rg.importance_low[j])} to {imp(rg.importance_high[j])}"))
        else:
            rows.append((c, "no bound", "no bound", "not settled", f"{imp(rg.importance_low[j])} to no bound"))
    units = "Log-odds coefficient" if binary else "Coefficient (table's units)"
    what = "Importance (log-odds moved, mean square)" if binary else "Importance (share of the best error)"
    out = ["<h3>Per column</h3>", table(["Column", units, "Standardized", "Sign", what], rows)]
    if binary:
        out.append('<p class="muted">Importance of a column for one model: how much, in mean square, its log-odds '
                   "would move if that column were replaced by an independent copy of itself (2·β²·variance), "
                   "smallest and largest over the near-best models.</p>")
    else:
        out.append('<p class="muted">Importance of a column for one model: how much its error would grow if that '
                   "column were replaced by an independent copy of itself (its model reliance). Shown as a share of "
                   "the best training error, smallest and largest over the near-best models; a value below zero "
                   "means some near-best model leans on the column the wrong way, so swapping it for noise would "
                   "lower its error.</p>")
    return out


def _ranges_rows(rg, data=None) -> list:
    """The rows where equally good models disagree most (probabilities for a yes/no outcome), each named
    as the table names it (its identifier column, as in the window) when one names every row."""
    if not rg.widest:
        return []
    binary = rg.outcome == "binary"
    label = row_label_column(data) if data is not None else None   # ``data``: the session's table
    names = row_names(data, [d["row"] for d in rg.widest], column=label) if label else None
    rows = []
    for k, d in enumerate(rg.widest):
        if names is not None:
            d = {**d, "row": f"{names[k]} (row {d['row']})"}
        unusual = "; ".join(f"{c} {num(v)} ({'+' if z > 0 else '−'}{num(abs(z), 2)} SD)" for c, v, z in d["unusual"])
        if binary:
            rows.append((str(d["row"]), num(d["p_centre"], 3), f"{num(d['p_low'], 3)} to {num(d['p_high'], 3)}",
                         num(d["p_width"], 3), f"{num(d['low'])} to {num(d['high'])}", unusual or "nothing unusual"))
        else:
            rows.append((str(d["row"]), num(d["centre"]), f"{num(d['low'])} to {num(d['high'])}", num(d["width"]),
                         unusual or "nothing unusual"))
    if binary:
        heads = [label or "Row", f"Logistic probability of {rg.target}", "Range over near-best models", "Width",
                 "Log-odds range", "Unusual values"]
        _, lo, hi = rg.probabilities()
        w = hi - lo
        what = "the width of the probability range"
    else:
        heads = [label or "Row", f"OLS prediction of {rg.target}", "Range over near-best models", "Width",
                 "Unusual values"]
        w = 2 * rg.row_half
        what = "the width"
    return ["<h3>Rows where equally good models disagree most</h3>", table(heads, rows),
            f"<p>Over all {w.size} rows {what} is {num(float(np.median(w)))} at the median and "
            f"{num(float(w.max()))} at most.</p>"]


def _std_coef(session, name):
    m = session.models().get(name)
    if m is None:
        return np.full(len(session.design.columns), np.nan)
    # A fit on every level of a category sits in the ranges as the same predictor on the design's columns.
    return m.on_design(design_sd(session.design, session.results)).coef_std


def _stress(session) -> str:
    configs = session.stress_configs
    if not configs:
        return "<p>No stress test was set up.</p>"
    if session.results is None:
        return "<p>The models have not been fitted.</p>"
    parts = []
    for res in session.stress_results():
        cfg = res.config
        strength = "" if res.strength is None else f", strength {num(res.strength)}"
        parts.append(f"<h3>{e(res.column)}: {e(res.kind)}{e(strength)}</h3>")
        parts.append(sentences(res.sentences))
        rows = []
        for n in res.models:
            s = res.shifts[n]
            rows.append((model_label(n), "yes" if s.uses_column else "no", num(s.shift_rmse), num(s.mean_shift),
                         pct(s.moved_share), num(s.error_clean), num(s.error_damaged)))
        parts.append(table(["Model", f"Uses {res.column}", "RMS shift", "Mean shift",
                            f"Rows moved > {num(res.tolerance)}", "Error before", "Error after"], rows))
        del cfg
    for sw in session.stress_sweeps():
        series = [(model_label(n), sw.strengths, sw.shift_rmse[n]) for n in sw.models]
        parts.append(figure(svg.line_chart(series, title=f"{sw.column}: {sw.kind} at increasing strength",
                                           xlabel=f"{sw.kind} strength", ylabel="RMS shift of predictions",
                                           colours=[model_colour(n) for n in sw.models]),
                            "How far each model's predictions move as the damage grows; a flat line at 0 "
                            "means the model does not use the column."))
        parts.append(sentences(sw.sentences))
    return "".join(parts)


def _rows_counted(session) -> tuple:
    """(rows used, rows left out) over the whole table, also when it was read in batches."""
    st = session.streamed
    if st is not None:
        return st.rows_used, st.excluded_total
    return session.design.n, len(session.design.excluded)


def _rows_notice(session) -> list:
    """The one sentence on which rows the row-level views use, and what a row sample cannot show; before
    it, the sentence on a column that labels groups when single rows were held out."""
    from regbench.sentences import groups_hint

    hint = groups_hint(session.design, session.table) if session.streamed is None else None
    out = [] if hint is None else [f'<p class="notice" id="groups-hint">{e(hint)}.</p>']
    note = session.row_sample_note
    if note is None:
        return out
    # Stability's line stands in its own section.
    return out + [f'<p class="notice" id="row-sample">{e(note)}</p>'] + [
        f'<p class="notice">{e(line)}</p>' for k, line in session.sample_limits().items() if k != "stability"]


def _stability(session) -> str:
    st = session.stability
    if st is None and "stability" in session.sample_limits():
        return f'<p class="notice">{e(session.sample_limits()["stability"])}</p>'
    if st is None:
        return "<p>No stability check was run (bootstrap count 0).</p>"
    parts = []
    if not session.stability_current:
        parts.append('<p class="muted">These refits used an earlier choice of α; run the check again to update them.</p>')
    parts.append(sentences(st.sentences))
    how = "whole groups resampled" if st.grouped else "rows resampled"
    parts.append(f"<p>{st.n_boot} bootstrap refits ({e(how)}, seed {st.seed}), each model at a fixed α: "
                 + e(", ".join(f"{model_label(k)} {num(v)}" for k, v in st.alphas.items())) + ".</p>")
    sel = [m for m in st.models if m in st.selected_freq and m not in ("ols", "logistic", "ridge")]
    parts.append("<h3>How often each column is set aside or selected</h3>")
    rows = [(c, pct(st.set_aside_freq[j]), *[pct(st.selected_freq[m][j]) for m in sel])
            for j, c in enumerate(st.columns)]
    parts.append(table(["Column", "Set aside by OLS" if unpenalized(st.models) == "ols" else "Set aside by the logistic model", *[f"Selected by {model_label(m).lower()}" for m in sel]], rows))
    if sel:
        parts.append(figure(svg.bar_chart(list(st.columns), [(model_label(m), st.selected_freq[m]) for m in sel],
                                          title="Share of refits in which a column is selected",
                                          ylabel="share of refits (1 = every refit)",
                                          colours=[model_colour(m) for m in sel]),
                            "A column selected in about half the refits is a toss-up between overlapping columns."))
    parts.append("<h3>How far each coefficient moves (5–95% of refits, original units)</h3>")
    models = [m for m in st.models if m in st.coef_q05]
    rows = []
    for j, c in enumerate(st.columns):
        cells = []
        for m in models:
            lo, hi = float(st.coef_q05[m][j]), float(st.coef_q95[m][j])
            cells.append(("cls", "zero", "0") if lo == 0.0 and hi == 0.0 else f"{num(lo)} to {num(hi)}")
        rows.append((c, *cells))
    parts.append(table(["Column", *[model_label(m) for m in models]], rows))
    parts.append('<p class="muted">A range that includes 0 means the data do not settle even the sign of that '
                 "coefficient.</p>")
    return "".join(parts)


def _notes(session) -> str:
    if not session.notes.strip():
        return '<p class="muted">No notes.</p>'
    return f'<pre class="notes">{e(session.notes)}</pre>'


def _versions() -> list:
    out = [("regbench", __version__), ("Python", platform.python_version())]
    for mod in ("numpy", "scipy", "pandas", "sklearn", "statsmodels", "pyarrow"):
        try:
            m = __import__(mod)
            out.append(("scikit-learn" if mod == "sklearn" else mod, getattr(m, "__version__", "?")))
        except ImportError:
            out.append((mod, "not installed"))
    return out


def _reproduce(session) -> str:
    s = session.settings
    rows = [("Folds", f"{s.folds}{' (grouped by ' + session.roles.groups + ')' if session.roles.groups else ''}"),
            ("Seed", str(s.seed)), ("α values per path", str(s.n_penalties)),
            ("Smallest α / largest α", num(s.penalty_ratio)), ("Elastic-net L1 ratios", ", ".join(f"{r:g}" for r in s.l1_ratios)),
            ("α choice", "fixed α = " + num(s.alpha) if s.alpha is not None else s.alpha_rule),
            ("Columns OLS must keep", ", ".join(s.pins) or "none"),
            ("Relaxed lasso and elastic net", ("relaxation fixed at " + num(s.relaxation)) if s.relaxation is not None
             else "relaxation by cross-validation" if s.relaxed else "not fitted"),
            ("Penalty factors (penalized models)", ", ".join(f"{c} {num(v)}" for c, v in s.penalty_factors)
             or "1 for every column"),
            ("OLS rank tolerance", "engine default" if s.rank_tol is None else num(s.rank_tol)),
            ("Range tolerance", "one standard error of the lowest CV error" if s.range_tolerance is None
             else f"within {num(100 * s.range_tolerance, 3)} % of the best training error"),
            ("α set by hand", ", ".join(f"{model_label(k)} {num(v)}" for k, v in session.chosen_alpha.items()) or "none"),
            ("Extra fits", ", ".join(f"{x['name']} ({model_label(x['family'])}, α {num(x['alpha'])})"
                                      for x in session.extra_fits) or "none"),
            ("Bootstrap refits", str(session.bootstrap)),
            ("Table content SHA-256", session.table_hash),
            ("Project file", session.path or "(not saved)")]
    objective = ("(1/W)·Σ wᵢ ℓ(yᵢ, pᵢ) + α·(ρ‖β‖₁ + (1−ρ)/2·‖β‖²) with ℓ the log-loss and the intercept "
                 "unpenalized (scikit-learn's C = 1/(α·W))"
                 if getattr(session.design, "outcome", "numeric") == "binary"
                 else "(1/(2W))·Σ wᵢ(yᵢ − b₀ − xᵢβ)² + α·(ρ‖β‖₁ + (1−ρ)/2·‖β‖²)")
    parts = [f"<p>To fit the same models again from the table:</p><pre class=\"cmd\">{e(_command(session))}</pre>",
             "<p>Penalized models minimise (1/(2W))·Σ wᵢ(yᵢ − b₀ − xᵢβ)² + α·Σⱼ vⱼ(ρ|βⱼ| + (1−ρ)/2·βⱼ²) on "
             "weighted-standardized columns (W = Σ wᵢ; vⱼ the column's penalty factor, 1 unless set); "
             "ρ = 0 is ridge, ρ = 1 lasso. Coefficients are shown in "
             "the table's units unless marked standardized.</p>",
             table(["Setting", "Value"], rows), "<h3>Software</h3>", table(["Package", "Version"], _versions())]
    return "".join(parts)


def _command(session) -> str:
    """The ``regbench new`` command line that refits this session from its table."""
    import shlex

    r, s = session.roles, session.settings
    args = ["regbench", "new", session.table.source or "TABLE", "--target", r.target]
    if r.predictors:
        args += ["--predictors", ",".join(r.predictors)]
    if r.categorical:
        args += ["--categorical", ",".join(r.categorical)]
    if r.weights:
        args += ["--weights", r.weights]
    if r.groups:
        args += ["--groups", r.groups]
    if getattr(r, "no_count", None):
        args[3:5] = ["--yes-count", r.target]
        args += ["--no-count", r.no_count]
    elif getattr(session.design, "outcome", "numeric") == "binary":
        args += ["--outcome", "binary", "--yes-level", str(session.design.levels[1])]
    elif getattr(r, "outcome", None) == "numeric":
        args += ["--outcome", "numeric"]
    args += ["--folds", str(s.folds), "--seed", str(s.seed), "--penalties", str(s.n_penalties),
             "--l1-ratio", ",".join(f"{x:g}" for x in s.l1_ratios), "--alpha-rule", s.alpha_rule]
    if s.alpha is not None:
        args += ["--alpha", repr(float(s.alpha))]
    if s.pins:
        args += ["--pin", ",".join(s.pins)]
    for d in getattr(r, "derived", ()):
        args += ["--derive", d.spec]
    for name, alpha in sorted(session.chosen_alpha.items()):
        args += ["--chosen-alpha", f"{name}={float(alpha)!r}"]
    for c, v in s.penalty_factors:
        args += ["--penalty-factor", f"{c}={v:g}"]
    if s.relaxation is not None:
        args += ["--relaxation", f"{s.relaxation:g}"]
    elif s.relaxed:
        args += ["--relaxed"]
    if s.range_tolerance is not None:
        args += ["--range-tolerance", repr(float(s.range_tolerance))]
    if session.rows.memory_budget is not None:
        args += ["--memory-budget", str(int(session.rows.memory_budget))]
    if session.rows.cluster is not None:
        args += ["--cluster", session.rows.cluster]
    args += ["--bootstrap", str(session.bootstrap), "-o", "project.regbench"]
    return " ".join(shlex.quote(a) for a in args)


def _cautions(session) -> str:
    items = list(CAUTIONS)
    if getattr(session.design, "outcome", "numeric") == "binary":
        from regbench.report.outcome import CAUTION

        items.append(CAUTION)
    return "<ul>" + "".join(f"<li>{e(c)}</li>" for c in items) + "</ul>"


def _outcome(session):
    from regbench.report.outcome import section

    return section(session, e, num, pct, table, sentences, figure)


_BUILDERS = {"question": _question, "overlap": _overlap, "fits": _fits, "quality": _quality, "agreement": _agreement,
             "ranges": _ranges,
             "stress": _stress, "stability": _stability, "notes": _notes, "reproduce": _reproduce,
             "cautions": _cautions, "outcome": _outcome}


def report_html(session, title: str = None) -> str:
    """The whole report as one HTML string."""
    title = title or f"regbench report: {session.design.target}"
    when = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    body = [f'<header class="top"><h1>{e(title)}</h1><p>Made by regbench {e(__version__)} on {e(when)}'
            f'{" from " + e(session.path) if session.path else ""}.</p></header>',
            None]
    shown = []
    sections = list(SECTIONS)
    if getattr(session.design, "outcome", "numeric") == "binary":
        from regbench.report.outcome import HEADING

        # A yes/no outcome adds the probabilities section after the fit quality.
        at = [sid for sid, _ in sections].index("quality") + 1 if "quality" in dict(sections) else 3
        sections.insert(at, ("outcome", HEADING))
    for sid, heading in sections:
        html = _BUILDERS[sid](session)
        if html is None:  # a section that does not apply to this kind of target
            continue
        shown.append((sid, heading))
        body.append(f'<section id="{sid}"><h2>{e(heading)}</h2>{html}</section>')
    body[1] = ('<nav class="toc"><ol>' + "".join(f'<li><a href="#{sid}">{e(h)}</a></li>' for sid, h in shown)
               + "</ol></nav>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{e(title)}</title><style>{CSS}</style></head><body>" + "".join(body) + "</body></html>\n")


def render_report(session, path) -> None:
    """Write the report for ``session`` to ``path`` atomically (UTF-8 HTML)."""
    from regbench.project.atomic import atomic_write_bytes

    atomic_write_bytes(path, report_html(session).encode("utf-8"))

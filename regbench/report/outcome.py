"""The report's section for a yes/no outcome: how good the probabilities are, and the threshold.

Built from :class:`regbench.analysis.calibration.Classification`; shown only when the
target is a yes/no outcome.  The report recommends no threshold: it shows what each
threshold flags and misses, and the one the person recorded, with their note.
"""

from __future__ import annotations

import numpy as np

from regbench.formatting import MISSING
from regbench.models.results import model_label
from regbench.report import svg

HEADING = "How good are the probabilities, and what does a threshold do?"

CAUTION = ("A risk score is not a decision: the person who acts on it chooses the threshold. The classes were "
           "not rebalanced; reweighting them distorts the probabilities without improving how well they rank "
           "rows (van den Goorbergh et al. 2022) — choose a threshold instead.")


def section(session, e, num, pct, table, sentences, figure) -> str:
    """HTML of the section, or None for a numeric target (the helpers come from the report module)."""
    if getattr(session.design, "outcome", "numeric") != "binary":
        return None
    cl = session.classification()
    if cl is None:
        return "<p>The models have not been fitted.</p>"
    d = session.design
    parts = [f'<p class="answer">Predictions are probabilities that a row is \'{e(d.levels[1])}\' '
             f"(the other value, '{e(d.levels[0])}', counts as no). Observed share of "
             f"'{e(d.levels[1])}': {pct(cl.observed_share)}.</p>", sentences(cl.sentences)]
    split = "held_out" if cl.calibration["held_out"] else "training"
    where = "held-out rows" if split == "held_out" else "the fitted rows"
    parts.append(f"<h3>Calibration on {where}</h3>")
    rows = []
    for k in cl.models:
        c = cl.calibration[split][k]
        t = cl.calibration["training"][k]
        rows.append((model_label(k), num(c.brier), num(c.miscalibration), num(c.discrimination), num(c.uncertainty),
                     num(c.intercept), num(c.slope), num(c.log_loss), pct(t.mean_probability)))
    parts.append(table(["Model", "Brier score", "Miscalibration", "Discrimination", "Uncertainty",
                        "Calibration intercept", "Calibration slope", "Log-loss",
                        "Mean probability (fitted rows)"], rows))
    parts.append('<p class="muted">Brier = miscalibration − discrimination + uncertainty (the CORP split of '
                 "Dimitriadis, Gneiting &amp; Jordan 2021). A calibration slope below 1 means probabilities that "
                 "are too extreme, above 1 too timid; the intercept is the log-odds shift the probabilities need "
                 "on average (Van Calster et al. 2019). On the fitted rows the mean probability equals the "
                 "observed share: the free intercept guarantees it.</p>")
    series = [(model_label(k), cl.calibration[split][k].curve_p, cl.calibration[split][k].curve_observed)
              for k in cl.models]
    series.append(("perfect calibration", np.array([0.0, 1.0]), np.array([0.0, 1.0])))
    parts.append(figure(svg.line_chart(series, title=f"Reliability on {where}", xlabel="predicted probability",
                                       ylabel="observed share (isotonic)"),
                        "Isotonic regression of the outcome on the predicted probability; on the diagonal, a "
                        "probability of 0.3 means '" + d.levels[1] + "' three times in ten."))
    parts.append(f"<h3>Discrimination on {where}</h3>")
    parts.append(table(["Model", "AUC (training rows)", "AUC (held-out rows)"],
                       [(model_label(k), num(cl.discrimination["training"][k].auc),
                         num(cl.discrimination["held_out"][k].auc) if k in cl.discrimination["held_out"] else MISSING)
                        for k in cl.models]))
    roc = [(model_label(k), cl.discrimination[split][k].roc_fpr, cl.discrimination[split][k].roc_tpr)
           for k in cl.models]
    roc.append(("chance", np.array([0.0, 1.0]), np.array([0.0, 1.0])))
    parts.append(figure(svg.line_chart(roc, title=f"ROC curves on {where}", xlabel="1 − specificity",
                                       ylabel="sensitivity"),
                        "Each point is one threshold: the share of 'yes' rows flagged against the share of 'no' "
                        "rows flagged."))
    k0 = cl.models[0]
    dis = cl.discrimination[split][k0]
    thr = session.threshold
    parts.append(f"<h3>Threshold trade-off ({e(model_label(k0))}, {where})</h3>")
    if thr is not None:
        parts.append(f'<p class="answer">Recorded threshold: {num(thr["value"])}'
                     + (f" — note: {e(thr['note'])}" if thr.get("note") else "") + "</p>")
    else:
        parts.append('<p class="answer">No threshold has been recorded. The table shows what each would flag; '
                     "the person who acts on the scores chooses one.</p>")
    trows = []
    for t, a, b, f in zip(dis.thresholds, dis.sensitivity, dis.specificity, dis.flagged):
        mark = " (recorded)" if thr is not None and abs(t - thr["value"]) < 1e-12 else ""
        trows.append((num(t) + mark, pct(a), pct(b), pct(f)))
    parts.append(table(["Threshold", "Sensitivity", "Specificity", "Share flagged"], trows))
    parts.append(f'<p class="muted">{e(CAUTION)}</p>')
    return "".join(parts)

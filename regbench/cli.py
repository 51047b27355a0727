"""The headless front door: ``regbench fit | stress | new | inspect | report | bench | open | snapshot``.

Every number the GUI shows can be produced here from the same table or project
file.  A problem a person can fix ends the command with status 2 and one line
on stderr naming it (no traceback).
"""

from __future__ import annotations

import argparse
import json
import shlex
import sys
from typing import Optional, Sequence

from regbench import __version__
from regbench.errors import RegbenchError

EXIT_OK = 0
EXIT_USAGE = 2


def _csv_list(text: Optional[str]) -> tuple:
    if not text:
        return ()
    return tuple(s.strip() for s in text.split(",") if s.strip())


def _float_list(text: Optional[str], flag: str = "--l1-ratio") -> tuple:
    out = []
    for s in _csv_list(text):
        try:
            out.append(float(s))
        except ValueError:
            raise RegbenchError(f"{flag}: '{s}' is not a number; give comma-separated numbers, e.g. 0.5,0.9") from None
    return tuple(out)


def _add_table_options(p: argparse.ArgumentParser, table: bool = True) -> None:
    if table:
        p.add_argument("table", help="CSV, TSV, XLSX or Parquet file")
    p.add_argument("--target", help="column to predict (with --yes-count: not needed)")
    p.add_argument("--outcome", choices=("numeric", "binary"),
                   help="kind of target: numeric, or binary (yes/no); default: binary when the target has exactly "
                        "two distinct values. Yes/no outcomes are never rebalanced: reweighting the classes "
                        "distorts the probabilities without improving discrimination (van den Goorbergh et al. "
                        "2022); choose a threshold instead")
    p.add_argument("--yes-level", help="for a yes/no outcome, the target value that counts as yes "
                                       "(default: the larger number, or a value reading as yes)")
    p.add_argument("--yes-count", help="aggregated yes/no rows: column of each row's yes count (use with --no-count)")
    p.add_argument("--no-count", help="aggregated yes/no rows: column of each row's no count (use with --yes-count)")
    p.add_argument("--predictors", help="comma-separated predictor columns (default: every other usable column)")
    p.add_argument("--categorical", help="comma-separated numeric columns to treat as category codes")
    p.add_argument("--weights", help="column of row weights (what they mean: --weights-kind)")
    p.add_argument("--weights-kind", choices=("precision", "counts"), default="precision",
                   help="counts: a row stands for that many identical observations (inference as if each row were "
                        "written out that many times); precision: one observation per row, measured with precision "
                        "proportional to its weight (default)")
    p.add_argument("--groups", help="column whose groups stay together in held-out checks")
    p.add_argument("--encoding", help="text encoding of a CSV/TSV file (default UTF-8)")
    p.add_argument("--sheet", help="Excel sheet (default: the first)")
    p.add_argument("--decimal", choices=(".", ","), default=".",
                   help="decimal mark of numbers written in text cells (default '.'; ',' for 3,5)")
    p.add_argument("--thousands", choices=(",", ".", " ", "'"),
                   help="thousands separator to remove from numbers written in text cells (default: none)")
    _add_settings_options(p)
    _add_row_options(p)
    p.add_argument("--derive", action="append", default=[], metavar="OP:COLUMN",
                   help="add a derived column, repeatable: log:C, log1p:C, sqrt:C, square:C, standardize:C "
                        "or product:C1,C2; it is named e.g. log(C) or C1*C2 and joins listed predictors")


def _add_settings_options(p: argparse.ArgumentParser) -> None:
    """One option per declared FitSettings field that has a flag; limits and help come from the declaration."""
    from regbench.models import spec
    from regbench.models.settings import FitSettings

    for name, (declared, default) in spec.specs(FitSettings).items():
        if declared.flag is None:
            continue
        rule = declared.rule
        kwargs = {"dest": name, "help": declared.help, "metavar": declared.flag[2:].upper().replace("-", "_")}
        if isinstance(rule, spec.Whole):
            kwargs.update(type=int, default=default)
        elif isinstance(rule, spec.OrNone) and isinstance(rule.rule, spec.Number):
            kwargs.update(type=float, default=default)
        elif isinstance(rule, spec.Number):
            kwargs.update(type=float, default=default)
        elif isinstance(rule, spec.Choice):
            kwargs.update(choices=rule.choices, default=default, metavar=None)
        elif isinstance(rule, spec.Flag):
            kwargs.update(action="store_true", default=default)
            kwargs.pop("metavar")
        elif isinstance(rule, spec.PerColumn):
            kwargs.update(action="append", default=[], metavar="COL=VALUE")
        elif isinstance(rule, spec.ListOf):
            kwargs.update(default=",".join(f"{v:g}" if isinstance(v, float) else str(v) for v in default) or None)
        if kwargs.get("default") not in (None, [], False):
            kwargs["help"] += f" (default {kwargs['default']})"
        p.add_argument(declared.flag, **kwargs)


def _add_row_options(p: argparse.ArgumentParser) -> None:
    """--memory-budget and --cluster, their help from the declaration (models/spec.py RowSource)."""
    from regbench.models import spec

    declared = spec.specs(spec.RowSource)
    p.add_argument(declared["memory_budget"][0].flag, dest="memory_budget", metavar="SIZE",
                   help=declared["memory_budget"][0].help + " (default: $REGBENCH_MEMORY_BUDGET, else no limit)")
    p.add_argument(declared["cluster"][0].flag, dest="cluster", metavar="ADDRESS",
                   help=declared["cluster"][0].help)


def _json_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", metavar="PATH", help="write the result as JSON to PATH, or - for standard output")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="regbench",
        description="Compare OLS, ridge, lasso and elastic net on tables whose predictors overlap.",
    )
    parser.add_argument("--version", action="version", version=f"regbench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("fit", help="fit OLS, ridge, lasso and elastic net; print a summary or JSON")
    _add_table_options(p)
    _json_option(p)

    p = sub.add_parser("stress", help="damage one input column and measure how each model's predictions move")
    _add_table_options(p)
    p.add_argument("--column", help="predictor column to damage (omit with --all-columns)")
    p.add_argument("--all-columns", action="store_true", help="damage every predictor in turn and rank them")
    p.add_argument("--kind", required=True, choices=("shuffle", "noise", "constant", "rescale", "wild", "missing"),
                   help="how the column is damaged (analysis/stress.py STRESS_KINDS; listed here so --help needs no numpy)")
    p.add_argument("--strength", type=float, help="kind-specific strength (noise: SDs; rescale: factor; wild: share)")
    p.add_argument("--tolerance", type=float, help="a prediction 'moved' when it shifts by more than this (default: 0.1 × target SD)")
    _json_option(p)

    p = sub.add_parser("new", help="fit everything on a table and save a project file")
    _add_table_options(p)
    p.add_argument("-o", "--output", required=True, help="project file to write (.regbench)")
    p.add_argument("--bootstrap", type=int, default=200, help="stability refits (default 200; 0 to skip)")
    p.add_argument("--chosen-alpha", action="append", default=[], metavar="MODEL=ALPHA",
                   help="show a penalized model at an α chosen by hand instead of the cross-validated one, "
                        "repeatable, e.g. ridge=0.5 (the window's α handle)")

    p = sub.add_parser("inspect", help="show what a project file holds and check its table hash")
    p.add_argument("project")
    _json_option(p)

    p = sub.add_parser("report", help="render a project as a self-contained HTML report")
    p.add_argument("project")
    p.add_argument("-o", "--output", required=True, help="HTML file to write")

    p = sub.add_parser("bench", help="time regbench against the scripted statsmodels/scikit-learn route")
    p.add_argument("--rows", type=int, default=100_000)
    p.add_argument("--cols", type=int, default=100)
    p.add_argument("--quick", action="store_true", help="a small run to check the benchmark works")
    p.add_argument("--targets", action="store_true",
                   help="print each one-pass target as a ratio: stability cost, start-up, big tables")
    p.add_argument("--big", action="store_true",
                   help="with --targets: also the 3M and 10M row tables (about 10 GB of disk, several minutes)")
    p.add_argument("--pairs", type=int, default=3, help="paired runs per ratio (default 3)")
    p.add_argument("--only", metavar="NAMES",
                   help="with --targets: only these, comma-separated (stability, startup, headline, read_csv, "
                        "read_parquet, open_project, wide_rows, memory_1m, stream_3m, stream_10m)")
    p.add_argument("--wide", action="store_true",
                   help="only the wide case: 200 rows × 2,000 sensors, regbench against the scripted route")
    p.add_argument("--logistic", action="store_true",
                   help="the yes/no benchmark: logistic paths against statsmodels Logit and LogisticRegressionCV")

    p = sub.add_parser("open", help="open a table or project in the desktop window")
    p.add_argument("path", nargs="?")

    p = sub.add_parser("snapshot", help="render every panel of a project's window to PNG files")
    p.add_argument("project")
    p.add_argument("--out", required=True, help="folder for the PNG files")
    return parser


def settings_from_args(args):
    """FitSettings from the command line, checked against the declared limits (message names the flag)."""
    from regbench.models import spec
    from regbench.models.settings import FitSettings

    values = {}
    for name, (declared, default) in spec.specs(FitSettings).items():
        if declared.flag is None or not hasattr(args, name):
            continue
        v = getattr(args, name)
        if isinstance(declared.rule, spec.PerColumn):
            v = _per_column(v, declared.flag)
        elif isinstance(declared.rule, spec.ListOf):
            each = declared.rule.each
            v = _float_list(v, declared.flag) if isinstance(each, spec.Number) else _csv_list(v)
            if not v and declared.rule.min_len:
                v = default
        values[name] = v
    spec.check(FitSettings, values, RegbenchError, spec.label_flag)
    return FitSettings.from_dict(values)


def _per_column(items, flag: str) -> tuple:
    """``COL=VALUE`` options -> ((column, value), ...); the column name may itself hold '='."""
    out = {}
    for item in items or ():
        col, sep, val = str(item).rpartition("=")
        col = col.strip()
        try:
            v = float(val)
        except ValueError:
            v = None
        if not sep or not col or v is None:
            raise RegbenchError(f"{flag}: '{item}' is not COLUMN=VALUE with a number (e.g. {flag} dose=0)")
        if col in out:
            raise RegbenchError(f"{flag}: '{col}' is given twice; give each column once")
        out[col] = v
    return tuple(out.items())


def roles_from_args(args):
    from regbench.data import Roles

    from regbench.data.derive import parse_derive

    target, no_count = args.target, getattr(args, "no_count", None)
    yes_count = getattr(args, "yes_count", None)
    if (yes_count is None) != (no_count is None):
        raise RegbenchError("--yes-count and --no-count go together: give both count columns, or neither")
    if yes_count is not None:
        if target is not None and target != yes_count:
            raise RegbenchError("--target and --yes-count name different columns; with count columns give "
                                "--yes-count and --no-count only")
        target = yes_count
    if target is None:
        raise RegbenchError("--target is required: name the column to predict (or give --yes-count and --no-count)")
    derived = tuple(parse_derive(t) for t in getattr(args, "derive", None) or ())
    predictors = _csv_list(args.predictors)
    if predictors:
        used = {target, args.weights, args.groups, no_count, *predictors}
        predictors += tuple(d.name for d in derived if d.name not in used)
    return Roles(
        target=target, predictors=predictors, categorical=_csv_list(args.categorical),
        weights=args.weights, groups=args.groups, derived=derived, weights_kind=args.weights_kind, outcome=getattr(args, "outcome", None),
        positive_level=getattr(args, "yes_level", None), no_count=no_count,
    )


def load_design(args):
    from regbench.data import build_design, read_table

    table = read_table(args.table, **_read_options(args))
    return table, build_design(table, roles_from_args(args))


def _read_options(args) -> dict:
    return {"encoding": args.encoding, "sheet": args.sheet, "decimal": args.decimal, "thousands": args.thousands}


#: The core's neutral advice, with the flag that does it on the command line.
_HINTS = (
    ("choose the file's real text encoding", " (--encoding NAME)"),
    ("or choose its text encoding", " (--encoding NAME)"),
    ("read the file with a decimal comma", " (--decimal ,)"),
    ("read the file with ',' as the thousands separator", " (--thousands ,)"),
    ("choose the sheet", " (--sheet NAME)"),
)


def _with_flags(text: str) -> str:
    for phrase, flag in _HINTS:
        at = text.find(phrase)
        if at >= 0 and flag not in text:
            end = at + len(phrase)
            if text.startswith(" (", end) and text.find(")", end) > 0:  # after the phrase's own example
                end = text.find(")", end) + 1
            text = text[:end] + flag + text[end:]
    return text


#: The core's neutral advice on a column left out by default, said with the flag that uses it.
_NAME_IT = ("name it among the predictors", "name it in --predictors")


def _with_groups_flag(text: str, design, table) -> str:
    """``text`` with the flag that holds out the groups a column labels, after the core's advice."""
    from regbench.data.identifiers import group_label_column
    from regbench.sentences import GROUPS_ADVICE

    if GROUPS_ADVICE not in text:
        return text
    g = group_label_column(table, skip=(design.target, design.weights_column, design.no_count_column))
    return text.replace(GROUPS_ADVICE, f"{GROUPS_ADVICE} (--groups {shlex.quote(g)})", 1) if g else text


def _columns_left_out(design, out) -> None:
    """One line per column the default choice of inputs left out as an identifier, and how to use it."""
    for u in design.unusable:
        if u.rule == "identifier":
            out.write(f"column '{u.column}' left out: {u.reason.replace(*_NAME_IT)}\n")


def write_json(obj, where: Optional[str]) -> None:
    text = json.dumps(obj, indent=2, allow_nan=False, default=_json_default)
    if where in (None, "-"):
        sys.stdout.write(text + "\n")
    else:
        from regbench.project.atomic import atomic_write_bytes

        atomic_write_bytes(where, (text + "\n").encode("utf-8"))


def _json_default(o):
    import numpy as np

    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    raise TypeError(f"cannot write {type(o).__name__} as JSON")


def _progress_to_stderr(done: int, total: int, message: str) -> None:
    if sys.stderr.isatty():
        sys.stderr.write(f"\r[{done}/{total}] {message[:60]:<60}")
        if done >= total:
            sys.stderr.write("\n")


def rows_from_args(args):
    """The RowSource of ``--memory-budget`` (or $REGBENCH_MEMORY_BUDGET) and ``--cluster``, checked."""
    from regbench.data.stream import memory_budget_from_env, parse_size
    from regbench.models import spec

    budget = parse_size(args.memory_budget) if getattr(args, "memory_budget", None) else memory_budget_from_env()
    values = {"memory_budget": budget, "cluster": getattr(args, "cluster", None)}
    spec.check(spec.RowSource, values, RegbenchError, spec.label_flag)
    return spec.RowSource.from_dict(values)


def _out_of_memory_route(args):
    """``(budget, cluster)`` when the table is to be read in batches or on a cluster, else None."""
    from regbench.batches import needs_batches

    rows = rows_from_args(args)
    if needs_batches(args.table, rows):
        return rows.memory_budget, rows.cluster
    return None


def _refuse_read_options(args) -> None:
    if (getattr(args, "encoding", None) or getattr(args, "sheet", None) or getattr(args, "decimal", ".") != "."
            or getattr(args, "thousands", None)):
        raise RegbenchError("--encoding, --sheet, --decimal and --thousands apply to tables read in memory; the "
                            "streamed route reads UTF-8 CSV with '.' decimals and Parquet")


def _stream_fit(args, settings, budget, cluster):
    from regbench.data.stream import stream_fit

    _refuse_read_options(args)
    if cluster:
        from regbench.cluster import cluster_fit

        return cluster_fit(args.table, roles_from_args(args), settings, address=cluster, memory_budget=budget,
                           progress=_progress_to_stderr)
    return stream_fit(args.table, roles_from_args(args), settings, memory_budget=budget,
                      progress=_progress_to_stderr)


def cmd_fit(args) -> int:
    settings = settings_from_args(args)
    from regbench.models.export import fit_to_json
    from regbench.sentences import fit_summary_text

    route = _out_of_memory_route(args)
    if route is not None:
        _refuse_yes_no_streamed(args, None)
        streamed = _stream_fit(args, settings, *route)
        design, results = streamed.design, streamed.results
        _refuse_yes_no_streamed(args, design)
        if args.json:
            out = fit_to_json(design, results)
            out.update(streamed.notes())
            out["rows"] = {"memory_budget": route[0], "cluster": route[1]}
            write_json(out, args.json)
        else:
            note = streamed.notes()["row_sample"]["note"]
            sys.stdout.write(fit_summary_text(design, results).replace(
                f"{design.n} rows used", f"{streamed.rows_used} rows used", 1) + f"\n({note})\n")
        return EXIT_OK
    table, design = load_design(args)
    from regbench.models.engine import fit_all

    results = fit_all(design, settings, progress=_progress_to_stderr)
    classification = _classify(design, results) if design.outcome == "binary" else None
    if args.json:
        write_json(fit_to_json(design, results, classification), args.json)
        _columns_left_out(design, sys.stderr)   # after the result, so a failed write stays one line
    else:
        # The summary's "Columns not used" names each left-out column; here with the flag.
        text = fit_summary_text(design, results, classification, table).replace(*_NAME_IT)
        sys.stdout.write(_with_groups_flag(text, design, table) + "\n")
    return EXIT_OK


def _classify(design, results):
    """Calibration and discrimination of every model of a yes/no outcome, on training and held-out rows."""
    from regbench.analysis.calibration import assess
    from regbench.models.engine import heldout_predictions

    models = results.models()
    return assess(design, models, heldout_predictions(design, results, models))


def _refuse_yes_no_streamed(args, design) -> None:
    """Yes/no outcomes are fitted with the rows in memory; say so in one line instead of fitting a line.

    Before the streamed pass (``design`` None) the roles decide; after it, a target whose sampled rows
    hold exactly two values is taken as yes/no unless ``--outcome numeric`` was given.
    """
    import numpy as np

    how = ("raise --memory-budget so the table is read in memory, or pass --outcome numeric to fit the target "
           "as a number")
    if design is None:
        if getattr(args, "outcome", None) == "binary" or getattr(args, "no_count", None):
            raise RegbenchError(f"{args.table}: yes/no outcomes are fitted with the rows in memory, not on the "
                                f"streamed or cluster route; {how.split(', or ')[0]}")
        return
    if getattr(args, "outcome", None) is None and np.unique(design.y[np.isfinite(design.y)]).size == 2:
        raise RegbenchError(f"{args.table}: target '{design.target}' holds two distinct values (a yes/no outcome), "
                            f"which is fitted with the rows in memory, not on the streamed or cluster route; {how}")


def cmd_stress(args) -> int:
    from regbench.analysis.stress import stress_command

    settings = settings_from_args(args)
    route = _out_of_memory_route(args)
    if route is not None:
        return _stress_streamed(args, settings, route)
    _, design = load_design(args)
    out = stress_command(design, settings, column=args.column, all_columns=args.all_columns,
                         kind=args.kind, strength=args.strength, seed=args.seed, tolerance=args.tolerance,
                         progress=_progress_to_stderr)
    if args.json:
        write_json(out["json"], args.json)
    else:
        from regbench.sentences import ranking_text, stress_text

        text = ranking_text(design, out["result"]) if args.all_columns else stress_text(design, out["result"])
        sys.stdout.write(text + "\n")
    _columns_left_out(design, sys.stderr)
    return EXIT_OK


def _stress_streamed(args, settings, route) -> int:
    """``stress`` on a table read in batches: fits from every row; figures over every row where the damage has
    a closed form in the cross-products (rescale, constant), per-row figures on the seeded sample, labelled."""
    from regbench.analysis.stress import StressConfig, stress_on_models
    from regbench.analysis.stress_stats import all_rows_figures
    from regbench.sentences import ranking_text, row_sample_sentence, stress_text

    streamed = _stream_fit(args, settings, *route)
    design, results = streamed.design, streamed.results
    _refuse_yes_no_streamed(args, design)
    models = results.models()
    out = stress_on_models(design, models, column=args.column, all_columns=args.all_columns, kind=args.kind,
                           strength=args.strength, seed=args.seed, tolerance=args.tolerance,
                           progress=_progress_to_stderr)
    note = row_sample_sentence(design.n, streamed.rows_used, settings.seed, streamed.sampled, streamed.route)
    js = dict(out["json"], route=streamed.route, rows_used=int(streamed.rows_used),
              row_sample={"sampled": bool(streamed.sampled), "rows": int(design.n), "seed": int(settings.seed),
                          "note": note})
    columns = [args.column] if args.column else list(dict.fromkeys(design.sources))
    every = {}
    for col in columns:
        figs = all_rows_figures(results.gram, design.columns, models,
                                StressConfig(col, args.kind, args.strength, args.seed, args.tolerance), design=design)
        if figs is not None:
            every[col] = figs
    if every:
        js["all_rows"] = every
    if args.json:
        write_json(js, args.json)
    else:
        text = ranking_text(design, out["result"]) if args.all_columns else stress_text(design, out["result"])
        label = "on the seeded row sample" if streamed.sampled else "on every row"
        lines = [f"Per-row figures below are {label}.", text]
        if every:
            lines.append(_all_rows_text(every))
        lines.append(f"({note})")
        sys.stdout.write("\n".join(lines) + "\n")
    return EXIT_OK


def _all_rows_text(every: dict) -> str:
    """The closed-form figures over every row, one line per column and model."""
    from regbench.formatting import number_text

    lines = ["Over every row, from the cross-products (shift RMSE, mean shift, error before -> after):"]
    for col, figs in every.items():
        for name, f in figs.items():
            lines.append(f"  {col}  {name}: {number_text(f['shift_rmse'])}, {number_text(f['mean_shift'])}, "
                         f"{number_text(f['error_clean'])} -> {number_text(f['error_damaged'])}")
    return "\n".join(lines)


def cmd_new(args) -> int:
    from regbench.session import Session
    from regbench.project import save_project

    settings = settings_from_args(args)
    rows = rows_from_args(args)
    if _out_of_memory_route(args) is not None:
        _refuse_read_options(args)
        _refuse_yes_no_streamed(args, None)
        session = Session.from_batches(args.table, roles_from_args(args), settings, rows,
                                       progress=_progress_to_stderr)
        _refuse_yes_no_streamed(args, session.design)
    else:
        session = Session.from_table_file(args.table, roles_from_args(args), settings, **_read_options(args))
        if not rows.is_default:
            session.set_rows(rows)
    for text in args.chosen_alpha:
        name, sep, value = text.partition("=")
        try:
            alpha = float(value)
        except ValueError:
            alpha = None
        if not sep or alpha is None:
            raise RegbenchError(f"--chosen-alpha: '{text}' is not MODEL=ALPHA; e.g. ridge=0.5")
        session.set_alpha(name.strip(), alpha)
    session.compute(progress=_progress_to_stderr, bootstrap=args.bootstrap)
    session.clear_history()
    save_project(session, args.output)
    if session.streamed is not None:
        st = session.streamed
        sys.stdout.write(f"saved {args.output}: {st.rows_used} rows used, {st.excluded_total} excluded; the project "
                         f"refers to {session.source}, which it reads again on opening\n")
        sys.stdout.write(f"  {session.row_sample_note}\n")
        for line in session.sample_limits().values():
            sys.stdout.write(f"  {line}\n")
        return EXIT_OK
    sys.stdout.write(f"saved {args.output}: {session.design.n} rows used, {len(session.design.excluded)} excluded\n")
    for column, note, _ in getattr(session.design, "column_notes", ()):
        sys.stdout.write(f"  column '{column}': {note}\n")
    _columns_left_out(session.design, sys.stdout)
    from regbench.sentences import groups_hint

    hint = groups_hint(session.design, session.table)
    if hint is not None:
        sys.stdout.write("  " + _with_groups_flag(hint, session.design, session.table) + "\n")
    return EXIT_OK


def cmd_inspect(args) -> int:
    from regbench.project import inspect_project
    from regbench.sentences import inspect_text

    info = inspect_project(args.project)
    if args.json:
        write_json(info, args.json)
    else:
        sys.stdout.write(inspect_text(info) + "\n")
    return EXIT_OK


def cmd_report(args) -> int:
    from regbench.project import load_project
    from regbench.report import render_report

    session = load_project(args.project, progress=_progress_to_stderr)
    if session.cache_note:
        sys.stderr.write(f"regbench report: {session.cache_note}\n")
    render_report(session, args.output)
    sys.stdout.write(f"wrote {args.output}\n")
    return EXIT_OK


def cmd_bench(args) -> int:
    import importlib.util

    # The scripted route the benchmark times regbench against is built on statsmodels (the `bench` extra).
    if importlib.util.find_spec("statsmodels") is None:
        raise RegbenchError("regbench bench times regbench against a scripted statsmodels route, and statsmodels is "
                            "not installed; install it with: pip install 'regbench[bench]'")
    from regbench.bench import main as bench_main

    if args.targets:
        from regbench.bench import targets

        return targets(big=args.big, pairs=args.pairs, only=args.only.split(",") if args.only else None)
    if getattr(args, "logistic", False):
        from regbench.bench import logistic_main

        return logistic_main(rows=args.rows, cols=args.cols, quick=args.quick)

    return bench_main(rows=args.rows, cols=args.cols, quick=args.quick, wide=args.wide)


def cmd_open(args) -> int:
    from regbench.gui.app import run

    return run(args.path)


def cmd_snapshot(args) -> int:
    from regbench.gui.snapshot import snapshot

    paths = snapshot(args.project, args.out, say=lambda line: sys.stderr.write(f"regbench snapshot: {line}\n"))
    for p in paths:
        sys.stdout.write(f"{p}\n")
    return EXIT_OK


COMMANDS = {
    "fit": cmd_fit, "stress": cmd_stress, "new": cmd_new, "inspect": cmd_inspect, "report": cmd_report,
    "bench": cmd_bench, "open": cmd_open, "snapshot": cmd_snapshot,
}


#: Headless commands whose numeric work runs with one BLAS thread.
ONE_BLAS_THREAD = ("fit", "stress", "new", "report", "inspect")


def main(argv: Optional[Sequence[str]] = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        return cmd_open(argparse.Namespace(path=None))
    try:
        if args.command in ONE_BLAS_THREAD:
            from regbench.models.ols import one_blas_thread

            # Many short BLAS calls on shared cores wait on each other's threads (see ols.py).
            with one_blas_thread():
                return COMMANDS[args.command](args)
        return COMMANDS[args.command](args)
    except RegbenchError as exc:
        sys.stderr.write(f"regbench {args.command}: {_with_flags(str(exc)).replace(*_NAME_IT)}\n")
        return EXIT_USAGE
    except KeyboardInterrupt:
        sys.stderr.write(f"regbench {args.command}: interrupted\n")
        return 130
    except MemoryError:
        sys.stderr.write(f"regbench {args.command}: ran out of memory; use a smaller table or fewer α values, "
                         "folds or refits\n")
        return EXIT_USAGE
    except OSError as exc:  # a file the command reads or writes: name it, no traceback
        where = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        sys.stderr.write(f"regbench {args.command}: cannot read or write{where}: {exc.strerror or exc}; "
                         "check the path, its permissions and the free space\n")
        return EXIT_USAGE

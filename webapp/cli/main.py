"""The ``ordinate`` command: serve the dashboard, or analyse and project from the shell.

Bad input ends with exit status 2 and one plain sentence on stderr; a traceback
is never shown for a problem with the user's data or options.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from webapp import __version__
from webapp.analysis.errors import OrdinateError

EXIT_BAD_INPUT = 2
SHOWN_TABLE_ROWS = 15
SHOWN_FLAGGED = 20

# The analysis speaks of dashboard controls; at the shell the same advice names the option.
_CLI_WORDS = (
    ("Choose mean or iterative filling of missing values instead of leaving samples out.",
     "Use --missing mean or --missing iterative instead of leaving samples out."),
    ("Choose mean or iterative filling to keep them.", "Use --missing mean or --missing iterative to keep them."),
    ("Leave them out of the analysis.", "Leave them out with --exclude-columns."),
    ("Include more numeric columns.", "Exclude fewer columns (--exclude-columns)."),
    ("Choose another transform for this variable or fix the values.",
     "Give this variable another --transform, or fix the values."),
    ("Leave such samples out, or change the spectral settings.",
     "Leave such samples out (--exclude-samples), or change --ranges, --row-correction or --savgol."),
)


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    try:
        return args.run(args)
    except OrdinateError as error:
        print(f"ordinate: {in_cli_words(str(error))}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as error:
        print(f"ordinate: cannot read or write a file: {error.strerror or error} ({error.filename}).", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        return 130


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="ordinate", description="Principal component analysis a team can share.")
    parser.add_argument("--version", action="version", version=f"ordinate {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    _add_analyze(commands)
    _add_project(commands)
    _add_serve(commands)
    _add_report(commands)
    _add_datasets(commands)
    from webapp.cli.monitor import add_monitor_commands

    add_monitor_commands(commands, _add_data_dir)
    return parser


def _add_analyze(commands) -> None:
    cmd = commands.add_parser("analyze", help="fit PCA to a CSV/TSV file and print the variance table")
    cmd.add_argument("data", type=Path, help="CSV or TSV file of samples (rows) by variables (columns); "
                     "with --engine dask also a Parquet file, a directory of Parquet parts or a quoted glob of CSV parts")
    _add_layout(cmd)
    cmd.add_argument("--ranges", metavar="LO-HI,...",
                     help="keep only these ranges of the variable axis, e.g. 1100-1700,2000-2400 "
                          "(needs column names that are positions; default: the whole axis)")
    cmd.add_argument("--row-correction", choices=("snv", "msc", "none"), default="none",
                     help="correct each sample's spectrum: snv (standard normal variate) or msc "
                          "(multiplicative scatter correction against the mean spectrum); default none")
    cmd.add_argument("--savgol", metavar="WINDOW,ORDER,DERIV",
                     help="Savitzky–Golay filter along the axis after row correction, e.g. 15,2,1: odd window, "
                          "polynomial order, derivative 0-2 (default: no filter)")
    cmd.add_argument("--scaling", choices=("none", "unit", "pareto", "range"), default="unit",
                     help="scaling of each variable after centring: unit (autoscaling, default), pareto, range or none")
    cmd.add_argument("--centring", "--centering", dest="centring", choices=("mean", "none"), default="mean",
                     help="centring of each variable: mean (default) or none")
    cmd.add_argument("--components", default="auto", help="number of components K, or 'auto' (default)")
    cmd.add_argument("--label-column", dest="id_column", metavar="COLUMN",
                     help="the label column: the column holding sample labels (default: detected, else row numbers)")
    cmd.add_argument("--id-column", dest="id_column", help=argparse.SUPPRESS)  # the former name, still accepted
    cmd.add_argument("--group-column", metavar="COLUMN",
                     help="column of groups; reported for reference, not used in the fit (default: none)")
    cmd.add_argument("--exclude-columns", nargs="+", default=(), metavar="C",
                     help="numeric columns to leave out of the model (default: none)")
    cmd.add_argument("--exclude-samples", nargs="+", default=(), metavar="S",
                     help="samples to leave out, by sample label (default: none)")
    cmd.add_argument("--transform", action="append", default=[], metavar="VAR=T",
                     help="per-variable transform (log10, ln, log1p, sqrt); repeatable (default: none)")
    cmd.add_argument("--missing", choices=("drop", "mean", "iterative"), default="drop",
                     help="missing values: drop (skip incomplete samples, default), mean (fill with the mean) "
                          "or iterative (fill by iterative PCA)")
    cmd.add_argument("--confidence", type=float, default=0.95, help="confidence for T² and Q limits (default 0.95)")
    cmd.add_argument("--json", type=Path, metavar="OUT", help="write the full results as JSON (default: print the table only)")
    cmd.add_argument("--model", type=Path, metavar="OUT", help="save the reference model for `ordinate project` (default: not saved)")
    cmd.add_argument("--engine", choices=("memory", "dask"), default="memory",
                     help="memory (default): the whole table in this process; dask: long data, part by part on a Dask cluster")
    cmd.add_argument("--scheduler", metavar="ADDRESS",
                     help="with --engine dask: address of an existing Dask scheduler (default: start a local cluster)")
    cmd.add_argument("--workers", type=int, metavar="N",
                     help="with --engine dask: worker processes of the local cluster (default: one per core, at most 4)")
    cmd.set_defaults(run=_run_analyze)


def _add_project(commands) -> None:
    cmd = commands.add_parser("project", help="score new samples against a saved reference model")
    cmd.add_argument("model", type=Path, help="model JSON written by `ordinate analyze --model`")
    cmd.add_argument("data", type=Path, help="CSV or TSV file of new samples")
    _add_layout(cmd)
    cmd.add_argument("--confidence", type=float, help="confidence for T² and Q limits (default: the model's)")
    cmd.add_argument("--json", type=Path, metavar="OUT", help="write scores, T² and Q as JSON (default: print them only)")
    cmd.add_argument("--csv", type=Path, metavar="OUT",
                     help="write per-sample scores, T², Q, both limits and flags as CSV, safe to open in a "
                          "spreadsheet (default: not written)")
    cmd.set_defaults(run=_run_project)


def _add_layout(cmd) -> None:
    cmd.add_argument("--rows-are", choices=("samples", "variables"), default="samples",
                     help="samples (default): one sample per row; variables: one variable per row, the first "
                          "column naming the variables and the header naming the samples")


def _add_data_dir(cmd) -> None:
    cmd.add_argument("--data-dir", type=Path, default=Path(".ordinate-data"), metavar="DIR",
                     help="where Ordinate keeps datasets, saved views and its cache (default .ordinate-data)")


def _add_serve(commands) -> None:
    cmd = commands.add_parser("serve", help="start the dashboard")
    cmd.add_argument("--host", default="127.0.0.1",
                     help="address to listen on (default 127.0.0.1: this machine only; a network address needs an access key)")
    cmd.add_argument("--port", type=int, default=8050, help="port to listen on (default 8050)")
    _add_data_dir(cmd)
    cmd.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    cmd.add_argument("--max-upload-mb", type=float, help="largest accepted upload in MB (default 200)")
    cmd.add_argument("--access-key-file", type=Path, metavar="FILE",
                     help="file holding the team access key (default: $ORDINATE_ACCESS_KEY)")
    cmd.add_argument("--no-access-key", action="store_true",
                     help="serve a network address without an access key (not recommended; default: a key is required)")
    cmd.set_defaults(run=_run_serve)


def _add_report(commands) -> None:
    cmd = commands.add_parser("report", help="write the self-contained HTML report of a saved view")
    cmd.add_argument("view_id", help="the saved view's code (the part of its short link after /v/)")
    _add_data_dir(cmd)
    cmd.add_argument("--out", type=Path, required=True, metavar="FILE", help="HTML file to write")
    cmd.set_defaults(run=_run_report)


def _add_datasets(commands) -> None:
    cmd = commands.add_parser("datasets", help="list or delete stored datasets (for administrators)")
    actions = cmd.add_subparsers(dest="action", required=True)
    listing = actions.add_parser("list", help="every stored dataset, oldest first")
    _add_data_dir(listing)
    listing.set_defaults(run=lambda args: _admin().list_main(args.data_dir))
    delete = actions.add_parser("delete", help="delete a dataset with its saved views and cached results")
    delete.add_argument("token", help="the dataset code (the part after ds= in a view link)")
    _add_data_dir(delete)
    delete.add_argument("--yes", action="store_true", help="really delete (default: only say what would go)")
    delete.set_defaults(run=lambda args: _admin().delete_main(args.data_dir, args.token, confirmed=args.yes))


def _admin():
    from webapp.cli import admin

    return admin


def _run_report(args) -> int:
    from webapp.web.report import report_main

    return report_main(args.data_dir, args.view_id, args.out)


def _refuse_for_dask(args) -> None:
    spectral = [flag for flag, used in (("--rows-are variables", getattr(args, "rows_are", "samples") == "variables"),
                                        ("--ranges", args.ranges), ("--row-correction", args.row_correction != "none"),
                                        ("--savgol", args.savgol)) if used]
    if spectral:
        raise OrdinateError(f"{', '.join(spectral)} work with the in-memory engine only (long data are not spectra); "
                            "leave out --engine dask.")


def _run_analyze(args) -> int:
    if args.engine == "dask":
        _refuse_for_dask(args)
        return _run_analyze_long(args)
    if args.scheduler or args.workers is not None:
        raise OrdinateError("--scheduler and --workers apply to the Dask engine only; add --engine dask.")
    from webapp.analysis.model_io import model_from_analysis
    from webapp.analysis.pipeline import analyse, analysis_report
    from webapp.analysis.spectra import parse_ranges

    table = _read(args)
    recipe = _recipe_from_options(args, table, ranges=parse_ranges(args.ranges) if args.ranges else (),
                                  row_correction=args.row_correction, savgol=_parse_savgol(args.savgol))
    analysis = analyse(table, recipe, args.components, args.confidence)
    report = analysis_report(analysis, table)
    return _write_analysis(args, report, lambda: model_from_analysis(analysis))


def _run_analyze_long(args) -> int:
    from types import SimpleNamespace

    from webapp.distributed.cluster import dask_client
    from webapp.distributed.engine import analyse_long, source_id_column
    from webapp.distributed.report import long_model, long_report
    from webapp.distributed.sources import open_source

    source = open_source(str(args.data))
    # The recipe helpers read the columns of a table; the first rows of the first part stand for it.
    columns = SimpleNamespace(frame=source.head, numeric_columns=source.numeric_columns,
                              id_column=source_id_column(source, args.id_column))
    recipe = _recipe_from_options(args, columns)
    with dask_client(args.scheduler, args.workers) as client:
        analysis = analyse_long(source, recipe, client, components=args.components, confidence=args.confidence)
    report = long_report(analysis)
    engine_line = (f"Dask engine: {report['n_samples']} samples from {report['parts']} part(s) in {report['partitions']} "
          f"partition(s); parallel analysis on {report['parallel_analysis_rows']} of them"
          f"{' (a uniform random sample)' if report['parallel_analysis_rows'] < report['n_samples'] else ''}.")
    return _write_analysis(args, report, lambda: long_model(analysis), engine_line)


def _recipe_from_options(args, table, **spectral):
    """The recipe the analyze options describe, checked against the columns of ``table``."""
    from webapp.analysis.recipe import Recipe

    _check_column(table, args.group_column, "group")
    return Recipe(
        variables=_chosen_variables(table, args.exclude_columns, args.id_column),
        excluded_samples=tuple(args.exclude_samples),
        transforms=_parse_transforms(args.transform, table),
        missing=args.missing,
        centring=args.centring,
        scaling=args.scaling,
        id_column=args.id_column,
        **spectral,
    )


def _write_analysis(args, report: dict, model, extra_line: str | None = None) -> int:
    """Print the table, then write the JSON report and the model file if asked, and say so."""
    from webapp.analysis.model_io import save_model

    if args.group_column:
        report["group_column"] = args.group_column
    print(format_variance_table(report))
    if extra_line:
        print(extra_line)
    if args.json:
        args.json.write_text(json.dumps(report, indent=1, ensure_ascii=False), encoding="utf-8")
        print(f"Wrote the JSON report to {args.json}.")
    if args.model:
        save_model(model(), args.model)
        print(f"Wrote the reference model to {args.model} (score new samples with `ordinate project`).")
    return 0


def _run_project(args) -> int:
    from webapp.analysis.model_io import load_model, project_table, projection_report

    model = load_model(args.model)
    projection = project_table(model, _read(args), args.confidence)
    report = projection_report(model, projection)
    print(format_projection(report))
    if args.json:
        args.json.write_text(json.dumps(report, indent=1, ensure_ascii=False), encoding="utf-8")
        print(f"Wrote the JSON report to {args.json}.")
    if args.csv:
        from webapp.web.exports import projection_frame, to_safe_csv

        confidence = model.confidence if args.confidence is None else args.confidence
        args.csv.write_text(to_safe_csv(projection_frame(projection, confidence)), encoding="utf-8")
        print(f"Wrote the CSV table to {args.csv}.")
    return 0


def _run_serve(args) -> int:
    from webapp.web.access import AccessConfigError, access_policy, key_file_warning, resolve_access_key
    from webapp.web.server import serve

    try:
        policy = access_policy(args.host, resolve_access_key(args.access_key_file), args.no_access_key)
    except AccessConfigError as error:
        print(f"ordinate: {error}", file=sys.stderr)
        return EXIT_BAD_INPUT
    if args.access_key_file and (warning := key_file_warning(args.access_key_file)):
        print(f"ordinate: {warning}", file=sys.stderr)
    if policy.warning:
        print(policy.warning, file=sys.stderr)
    return serve(host=args.host, port=args.port, data_dir=args.data_dir, workers=args.workers,
                 max_upload_mb=args.max_upload_mb, access_key=policy.access_key)


# --- helpers -----------------------------------------------------------------


def _read(args):
    from webapp.analysis.ingest import read_table, transpose_table

    table = read_table(args.data)
    if args.rows_are == "variables":
        table = transpose_table(table, f"'{args.data.name}'")
    return table


def _parse_savgol(text: str | None) -> tuple[int, int, int] | None:
    if text is None:
        return None
    parts = [part.strip() for part in text.split(",")]
    if len(parts) != 3 or not all(part.isdigit() for part in parts):
        raise OrdinateError(
            f"Write --savgol as WINDOW,ORDER,DERIV, three whole numbers such as 15,2,1; got '{text}'."
        )
    return tuple(int(part) for part in parts)


def _check_column(table, column: str | None, role: str) -> None:
    if column is not None and column not in table.frame.columns:
        raise OrdinateError(f"The {role} column '{column}' is not in the data.")


def _chosen_variables(table, excluded, id_column) -> tuple[str, ...] | None:
    if not excluded:
        return None
    unknown = [c for c in excluded if c not in table.frame.columns]
    if unknown:
        raise OrdinateError(f"Cannot exclude column(s) not in the data: {', '.join(unknown)}.")
    id_column = id_column or table.id_column
    return tuple(c for c in table.numeric_columns if c not in excluded and c != id_column)


def _parse_transforms(items: list[str], table) -> tuple[tuple[str, str], ...]:
    pairs = []
    for item in items:
        variable, sep, transform = item.rpartition("=")
        if not sep or not variable:
            raise OrdinateError(f"Write a transform as VARIABLE=TRANSFORM (for example 'Viscosity=log10'); got '{item}'.")
        pairs.append((variable, transform))
    unknown = [variable for variable, _ in pairs if variable not in table.numeric_columns]
    if unknown:
        raise OrdinateError(
            f"Cannot transform variable(s) not among the numeric columns of the data: {', '.join(unknown)}."
        )
    return tuple(pairs)


def in_cli_words(note: str) -> str:
    for dashboard, shell in _CLI_WORDS:
        note = note.replace(dashboard, shell)
    return note


def _flagged_line(kind: str, labels: list[str]) -> list[str]:
    if not labels:
        return []
    shown = ", ".join(labels[:SHOWN_FLAGGED])
    more = f" and {len(labels) - SHOWN_FLAGGED} more (see --json)" if len(labels) > SHOWN_FLAGGED else ""
    return [f"  above the {kind} limit: {shown}{more}"]


def format_variance_table(report: dict) -> str:
    rules = report["component_rules"]
    lines = [
        f"{report['n_samples']} samples x {report['n_variables']} variables; "
        f"eigenvalues of the covariance of the preprocessed data (n - 1 denominator).",
        f"{'Component':>9}  {'Eigenvalue':>12}  {'Explained (%)':>13}  {'Cumulative (%)':>14}",  # the page's words
    ]
    shown = min(len(report["eigenvalues"]), max(SHOWN_TABLE_ROWS, report["components"]))
    for a in range(shown):
        marker = "  <- K" if a + 1 == report["components"] else ""
        lines.append(
            f"{'PC' + str(a + 1):>9}  {report['eigenvalues'][a]:>12.4f}  "
            f"{100 * report['explained_variance_ratio'][a]:>13.2f}  {100 * report['cumulative_explained'][a]:>14.2f}{marker}"
        )
    if shown < len(report["eigenvalues"]):
        lines.append(f"  ... {len(report['eigenvalues']) - shown} more in the JSON output")
    parallel = rules["parallel_analysis"]
    lines.append(
        f"Components to keep: Kaiser rule {rules['kaiser']}, broken stick {rules['broken_stick']}, "
        f"parallel analysis {parallel if parallel is not None else 'not run'}, "
        f"{100 * rules['cumulative_threshold']:.0f} % cumulative {rules['cumulative']}."
    )
    lines.append(f"Recommended: {report['recommended_components']} ({report['recommendation_rule']}); "
                 f"K used: {report['components']}.")
    lines.append(
        f"At {100 * report['confidence']:g} % confidence: "
        f"{report.get('t2_flagged_count', len(report['t2_flagged']))} sample(s) above the T² limit, "
        f"{report.get('q_flagged_count', len(report['q_flagged']))} above the Q limit. "
        "Flags are statistical evidence, not a release decision."
    )
    lines += _flagged_line("T²", report["t2_flagged"]) + _flagged_line("Q", report["q_flagged"])
    lines += [f"Note: {in_cli_words(w)}" for w in report["warnings"]]
    return "\n".join(lines)


def format_projection(report: dict) -> str:
    lines = [
        f"{len(report['samples'])} new sample(s) scored on {report['components']} component(s).",
        f"{'sample':<20}  {'T²':>10}  {'Q':>10}  flag",
    ]
    for label, t2, q in zip(report["samples"], report["t2"], report["q"]):
        flags = [name for name, over in (("T²", t2 > report["t2_limit"]), ("Q", q > report["q_limit"])) if over]
        lines.append(f"{label[:20]:<20}  {t2:>10.3f}  {q:>10.3f}  {' '.join(flags)}")
    lines.append(f"Limits: T² {report['t2_limit']:.3f} (new-sample form), Q {report['q_limit']:.3f}.")
    lines.append("Flags are statistical evidence under the model's assumptions; follow your validated release procedure.")
    lines += [f"Note: {in_cli_words(w)}" for w in report["warnings"]]
    return "\n".join(lines)


if __name__ == "__main__":
    sys.exit(main())

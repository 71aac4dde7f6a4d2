"""Downloads of a view: result tables as CSV, the reference model as JSON, the report.

Every export is computed from a view's state (the same query string as the
page's address), through the cached compute layer, so a download shows exactly
the numbers of the view it came from and never refits what is cached.

CSV files (see ``docs/exports.md`` for every column):

* ``scores.csv``: one row per sample in the model; ``Sample``, the colouring
  column when the view colours by one, then ``PC1`` .. ``PCm``;
* ``loadings.csv``: one row per variable; ``Variable``, ``PC1`` .. ``PCm``;
* ``variance.csv``: one row per component; eigenvalue, explained and
  cumulative percentages and what each component-number rule says;
* ``diagnostics.csv``: one row per sample; T², Q, their limits and flags at
  the view's K and confidence.

m is every component the fit computed, at most :data:`MAX_EXPORT_COMPONENTS`.

Formula injection (OWASP, "CSV Injection"; ASVS 5.0 requirement 1.2.10):
spreadsheet programs run a cell whose text starts with ``=``, ``+``, ``-`` or
``@`` as a formula, and sample labels and column names come from users'
files. :func:`escape_csv_cell` prefixes such text with a single quote, which
makes spreadsheets show it as text; numbers are left alone. The exact rule is
in :func:`escape_csv_cell`.
"""

from __future__ import annotations

import csv
import io
import json
import logging
import math
import numbers
from typing import Any

import flask
import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import model_from_analysis, model_to_dict
from webapp.analysis.pipeline import Analysis
from webapp.figures import variance_table_rows
from webapp.figures.variance import TABLE_COLUMNS
from webapp.state import NO_COLOUR, ViewState, parse_query
from webapp.web.filenames import dataset_stem, safe_filename

__all__ = [
    "CSV_KINDS",
    "EXPORT_FILES",
    "FORMULA_TRIGGERS",
    "MAX_EXPORT_COMPONENTS",
    "MAX_VARIANCE_ROWS",
    "UTF8_BOM",
    "escape_csv_cell",
    "to_safe_csv",
    "safe_filename",
    "scores_frame",
    "loadings_frame",
    "variance_frame",
    "diagnostics_frame",
    "export_csv",
    "export_model_json",
    "projection_frame",
    "register_export_routes",
]

log = logging.getLogger(__name__)

MAX_EXPORT_COMPONENTS = 100  # columns of scores and loadings; ViewState.MAX_PC is the same bound
MAX_VARIANCE_ROWS = 1000  # as many eigenvalues as `ordinate analyze --json` reports
CSV_KINDS: tuple[str, ...] = ("scores", "loadings", "variance", "diagnostics", "batch")
#: The file names served under ``/export/``.
EXPORT_FILES: tuple[str, ...] = (*(f"{kind}.csv" for kind in CSV_KINDS), "model.json")

#: Prepended to every CSV: without it Excel reads UTF-8 files as the local
#: code page and mangles names such as "T²" or "Viskosität".
UTF8_BOM = "\ufeff"

#: First characters that make a spreadsheet read text as a formula or that can
#: hide a formula (OWASP: = + - @ tab carriage return; ASVS 1.2.10 adds NUL;
#: line feed is added for the same reason as carriage return).
FORMULA_TRIGGERS = frozenset("=+-@\t\r\n\0")
#: The formula characters, also in their full-width forms (U+FF1D, U+FF0B,
#: U+FF0D, U+FF20), which some East Asian spreadsheet set-ups accept; checked
#: after leading whitespace too, because some importers trim it.
_FORMULA_STARTS = frozenset("=+-@\uff1d\uff0b\uff0d\uff20")
_QUOTE = "'"

_NOT_FOUND_MESSAGE = (
    "No dataset with this dataset code is on this server. It may have been deleted; "
    "ask the person who shared the link for a new one."
)
_NO_VIEW_MESSAGE = "No saved view with this short link is on this server. It may have been deleted."
_UNKNOWN_KIND_MESSAGE = "There is no such download. Available: " + ", ".join(EXPORT_FILES) + "."
_SERVER_PROBLEM_MESSAGE = (
    "The download could not be prepared because of a problem on the server. "
    "Please try again or tell the administrator."
)


# --------------------------------------------------------------------------------------
# Safe CSV
# --------------------------------------------------------------------------------------


def escape_csv_cell(value: Any) -> Any:
    """A cell value that a spreadsheet will not run as a formula.

    Only text (Python ``str``) is changed, and only when

    * its first character is one of ``=`` ``+`` ``-`` ``@``, tab, carriage
      return, line feed or NUL, or
    * its first character after leading whitespace is ``=`` ``+`` ``-`` ``@``
      (or their full-width forms ＝ ＋ － ＠);

    it is then returned with a single quote ``'`` in front (OWASP, "CSV
    Injection"). Numbers of any type are returned unchanged, so a negative
    number stays a number; the *text* ``"-12"`` (a sample label, say) is
    escaped to ``"'-12"``, which a spreadsheet shows as the text -12.
    """
    if not isinstance(value, str) or not value:
        return value
    if value[0] in FORMULA_TRIGGERS or value[0] in _FORMULA_STARTS or value.lstrip()[:1] in _FORMULA_STARTS:
        return _QUOTE + value
    return value


def to_safe_csv(frame: pd.DataFrame) -> str:
    """The frame as CSV text that is safe to open in a spreadsheet.

    Every text cell *and every column header* goes through
    :func:`escape_csv_cell`. The text starts with a UTF-8 byte-order mark
    (:data:`UTF8_BOM`) so that Excel detects UTF-8; encode it as UTF-8.
    RFC 4180 layout: comma separated, fields quoted when they hold a comma,
    quote or line break, lines ending in CRLF. The index is not written.
    Numbers are written in full precision (the shortest text that reads
    back to the same float64); missing values as empty cells; infinity as
    ``inf``.
    """
    buffer = io.StringIO()
    buffer.write(UTF8_BOM)
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow([_cell_text(name) for name in frame.columns])
    for row in frame.itertuples(index=False, name=None):
        writer.writerow([_cell_text(value) for value in row])
    return buffer.getvalue()


def _cell_text(value: Any) -> str:
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "TRUE" if value else "FALSE"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        return "" if math.isnan(number) else repr(number)
    if isinstance(value, str):
        return escape_csv_cell(value)
    return escape_csv_cell(str(value))


# --------------------------------------------------------------------------------------
# Tables from a resolved view (pure: no I/O)
# --------------------------------------------------------------------------------------


def _export_components(fitted) -> int:
    return min(fitted.pca.n_components, MAX_EXPORT_COMPONENTS)


def _pc_names(count: int) -> list[str]:
    return [f"PC{a}" for a in range(1, count + 1)]


def _colour_column(state: ViewState, table) -> str | None:
    """The column the view colours points by, as the dashboard chooses it."""
    column = state.colour_by
    if column is None:
        column = table.group_columns[0] if table.group_columns else None
    if not column or column == NO_COLOUR or column not in table.frame.columns:
        return None
    return column


def scores_frame(resolved, state: ViewState) -> pd.DataFrame:
    """Scores of the samples in the model: ``Sample``, [colour column], ``PC1`` .. ``PCm``.

    ``resolved`` is :func:`webapp.ui.view_model.resolve`'s result for ``state``.
    The colour column keeps its own name (with `` (group)`` added if that
    clashes with another header) and its values as in the file.
    """
    fitted, table = resolved.fitted, resolved.table
    m = _export_components(fitted)
    columns: dict[str, Any] = {"Sample": pd.Series(list(fitted.prepared.sample_labels), dtype=object)}
    colour = _colour_column(state, table)
    pcs = _pc_names(m)
    if colour is not None:
        header = colour if colour not in ("Sample", *pcs) else f"{colour} (group)"
        values = table.frame[colour].to_numpy(dtype=object)[fitted.prepared.row_positions]
        columns[header] = pd.Series([_group_value(v) for v in values], dtype=object)
    for a, name in enumerate(pcs):
        columns[name] = np.asarray(fitted.pca.scores[:, a], dtype=np.float64)
    return pd.DataFrame(columns)


def _group_value(value: Any) -> Any:
    # A whole-number group read as float (week 3.0) is written as it was in the file (3).
    if isinstance(value, (float, np.floating)) and math.isfinite(value) and float(value).is_integer():
        return int(value)
    return value


def loadings_frame(resolved, state: ViewState | None = None) -> pd.DataFrame:
    """Loadings: ``Variable``, ``PC1`` .. ``PCm`` (unit-length columns, the engine's sign rule)."""
    fitted = resolved.fitted
    m = _export_components(fitted)
    columns: dict[str, Any] = {"Variable": pd.Series(list(fitted.prepared.variables), dtype=object)}
    for a, name in enumerate(_pc_names(m)):
        columns[name] = np.asarray(fitted.pca.loadings[:, a], dtype=np.float64)
    return pd.DataFrame(columns)


def variance_frame(resolved, state: ViewState) -> pd.DataFrame:
    """The explained-variance table, all components (at most :data:`MAX_VARIANCE_ROWS`).

    Headers as on the page (``webapp.figures.variance.TABLE_COLUMNS``); numbers
    in full precision, percentages in %, rule columns ``yes``/``no`` (empty
    when parallel analysis was not run), ``Kept`` for components 1..K.
    """
    from webapp.ui.view_model import view_diagnostics

    fitted = resolved.fitted
    pca, advice = fitted.pca, fitted.advice
    rows_shown = min(pca.eigenvalues.size, MAX_VARIANCE_ROWS)
    diagnostics = view_diagnostics(resolved, state)
    rows = variance_table_rows(
        pca.eigenvalues[:rows_shown], pca.explained_variance_ratio[:rows_shown],
        pca.cumulative_explained[:rows_shown], kaiser=min(advice.kaiser, rows_shown),
        broken_stick=min(advice.broken_stick, rows_shown),
        parallel=None if advice.parallel is None else min(advice.parallel, rows_shown),
        components=min(diagnostics.components, rows_shown),
    )
    return pd.DataFrame(
        {title: [_verdict(row[key]) for row in rows] for key, title in TABLE_COLUMNS}
    )


def _verdict(value: Any) -> Any:
    if isinstance(value, bool):
        return "yes" if value else "no"
    return value


def diagnostics_frame(resolved, state: ViewState) -> pd.DataFrame:
    """Per sample: T², Q, both limits, whether each is exceeded, K and the confidence.

    T² limit: the form for samples in the model (see docs/methods.md); it is
    ``inf`` when K is not smaller than the number of samples.
    """
    from webapp.ui.view_model import view_diagnostics

    fitted = resolved.fitted
    diagnostics = view_diagnostics(resolved, state)
    n = fitted.pca.n_samples
    return pd.DataFrame({
        "Sample": pd.Series(list(fitted.prepared.sample_labels), dtype=object),
        "T²": np.asarray(diagnostics.t2, dtype=np.float64),
        "Q": np.asarray(diagnostics.q, dtype=np.float64),
        "T² limit": np.full(n, float(diagnostics.t2_limit)),
        "Q limit": np.full(n, float(diagnostics.q_limit)),
        "Above T² limit": ["yes" if v else "no" for v in diagnostics.t2_flagged],
        "Above Q limit": ["yes" if v else "no" for v in diagnostics.q_flagged],
        "K": np.full(n, int(diagnostics.components), dtype=np.int64),
        "Confidence": np.full(n, float(diagnostics.confidence)),
    })


def batch_frame(services, resolved, state: ViewState) -> pd.DataFrame:
    """The view's new batch scored against its model: scores on the K components, T², Q, limits for new samples.

    The T² limit is the form for new samples (Tracy, Young & Mason 1992), wider
    than the one for the model's own samples; see docs/methods.md.
    """
    from webapp.ui.view_model import view_diagnostics

    from webapp.ui.view_model import score_batch

    record = services.store.dataset(state.batch) if state.batch else None
    if record is None:
        raise OrdinateError("This view scores no new samples, or their file is no longer stored.")
    batch, notices = score_batch(services, record, resolved.fitted, view_diagnostics(resolved, state))
    if batch is None:
        raise OrdinateError(notices[0])
    return projection_frame(batch.projection, state.confidence)


def projection_frame(p, confidence: float) -> pd.DataFrame:
    """New samples scored against a model (a ``model_io.Projection``): the table of ``batch.csv``
    and of ``ordinate project --csv``: scores, T², Q, both limits (T² for new samples) and flags."""
    n = len(p.sample_labels)
    columns: dict[str, Any] = {"Sample": pd.Series(list(p.sample_labels), dtype=object)}
    for a, name in enumerate(_pc_names(p.scores.shape[1])):
        columns[name] = np.asarray(p.scores[:, a], dtype=np.float64)
    columns.update({
        "T²": np.asarray(p.t2, dtype=np.float64),
        "Q": np.asarray(p.q, dtype=np.float64),
        "T² limit (new samples)": np.full(n, float(p.t2_limit)),
        "Q limit": np.full(n, float(p.q_limit)),
        "Above T² limit": ["yes" if v > p.t2_limit else "no" for v in p.t2],
        "Above Q limit": ["yes" if v > p.q_limit else "no" for v in p.q],
        "K": np.full(n, int(p.scores.shape[1]), dtype=np.int64),
        "Confidence": np.full(n, float(confidence)),
    })
    return pd.DataFrame(columns)


_BUILDERS = {
    "scores": scores_frame,
    "loadings": loadings_frame,
    "variance": variance_frame,
    "diagnostics": diagnostics_frame,
}  # and "batch", which needs the store as well: see export_csv


# --------------------------------------------------------------------------------------
# Exports of a view state
# --------------------------------------------------------------------------------------


def _resolve(services, state: ViewState):
    from webapp.ui.view_model import resolve  # the UI package imports Dash; keep this module light to import

    return resolve(services, state)


def export_csv(services, state: ViewState, kind: str) -> tuple[str, str]:
    """(CSV text with BOM, ASCII file name) of one table of the view.

    ``kind`` is one of :data:`CSV_KINDS`. Raises ``DatasetNotFound`` (from the
    view model) for an unknown dataset, :class:`OrdinateError` when the view's
    recipe cannot be applied, ``ValueError`` for an unknown kind.
    """
    if kind not in CSV_KINDS:
        raise ValueError(f"unknown export kind {kind!r}")
    resolved = _resolve(services, state)
    frame = batch_frame(services, resolved, state) if kind == "batch" else _BUILDERS[kind](resolved, state)
    return to_safe_csv(frame), safe_filename(dataset_stem(resolved.record.filename), f"-{kind}.csv")


def export_model_json(services, state: ViewState) -> tuple[str, str]:
    """(JSON text, file name) of the view's reference model.

    The schema is ``ordinate analyze --model``'s (docs/model-format.md): it
    loads with :func:`webapp.analysis.model_io.load_model` and scores new
    samples with ``ordinate project``. K and the confidence are the view's.
    """
    from webapp.ui.view_model import view_diagnostics

    resolved = _resolve(services, state)
    analysis = Analysis(resolved.fitted, view_diagnostics(resolved, state))
    text = json.dumps(model_to_dict(model_from_analysis(analysis)), indent=1, ensure_ascii=False)
    return text, safe_filename(dataset_stem(resolved.record.filename), "-model.json")


# --------------------------------------------------------------------------------------
# Routes
# --------------------------------------------------------------------------------------


def register_export_routes(server: flask.Flask, services) -> None:
    """Add the download routes to the Flask server (``dash_app.server``).

    * ``GET /export/<file>`` with ``<file>`` in :data:`EXPORT_FILES` and the
      view's query string (``/export/scores.csv?v=1&ds=...``);
    * ``GET /v/<view_id>/report.html``: the self-contained report of a saved view.

    Answers are attachments with ``Cache-Control: no-store`` and
    ``X-Content-Type-Options: nosniff``. Unknown dataset, view or file: 404;
    a recipe the data cannot take (:class:`OrdinateError`): 422 with its
    message; anything unexpected: 500 with a fixed sentence (the traceback
    goes to the log). Errors are plain text.
    """
    def export(filename: str):
        if filename not in EXPORT_FILES:
            return _plain(404, _UNKNOWN_KIND_MESSAGE)
        state, _notices = parse_query(flask.request.query_string.decode("utf-8", "replace"))
        if state.dataset is None:
            return _plain(404, _NOT_FOUND_MESSAGE)
        if filename == "model.json":
            produced = _guarded(lambda: export_model_json(services, state), f"Export {filename}")
            mimetype = "application/json"
        else:
            produced = _guarded(lambda: export_csv(services, state, filename.removesuffix(".csv")),
                                f"Export {filename}")
            mimetype = "text/csv"
        if isinstance(produced, flask.Response):
            return produced
        text, name = produced
        return _attachment(text, name, mimetype)

    def view_report(view_id: str):
        from webapp.web.report import build_report_html, report_filename

        saved = services.store.view(view_id)
        if saved is None:
            return _plain(404, _NO_VIEW_MESSAGE)
        text = _guarded(lambda: build_report_html(services, saved), f"Report of view {view_id}")
        if isinstance(text, flask.Response):
            return text
        response = _attachment(text, report_filename(services, saved), "text/html")
        # Never rendered on this origin (it is a download), but if it ever were, no script runs here.
        response.headers["Content-Security-Policy"] = "sandbox"
        return response

    server.add_url_rule("/export/<filename>", endpoint="ordinate_export", view_func=export, methods=["GET"])
    server.add_url_rule("/v/<view_id>/report.html", endpoint="ordinate_view_report", view_func=view_report,
                        methods=["GET"])


def _guarded(produce, what: str):
    """Run ``produce``; map a missing dataset to 404, a user-facing error to 422, anything else to 500."""
    from webapp.ui.view_model import DatasetNotFound

    try:
        return produce()
    except DatasetNotFound:
        return _plain(404, _NOT_FOUND_MESSAGE)
    except OrdinateError as error:
        return _plain(422, str(error))
    except Exception:
        log.exception("%s failed", what)
        return _plain(500, _SERVER_PROBLEM_MESSAGE)


def _secure(response: flask.Response) -> flask.Response:
    response.headers["Cache-Control"] = "no-store"
    response.headers["X-Content-Type-Options"] = "nosniff"
    return response


def _plain(status: int, message: str) -> flask.Response:
    return _secure(flask.Response(message + "\n", status=status, mimetype="text/plain"))


def _attachment(text: str, filename: str, mimetype: str) -> flask.Response:
    response = flask.Response(text.encode("utf-8"), status=200)
    response.headers["Content-Type"] = f"{mimetype}; charset=utf-8"
    # safe_filename() leaves only [A-Za-z0-9._-], so the quoted form needs no escaping.
    response.headers["Content-Disposition"] = f'attachment; filename="{filename}"'
    return _secure(response)

"""The monitoring page and its routes, mounted on the dashboard's Flask server.

* ``/m/<code>?...`` - the monitoring page: a second, small Dash app under ``/m/``
  (layout :mod:`webapp.ui.monitoring_layout`, callbacks
  :mod:`webapp.ui.monitoring_callbacks`), so the dashboard's callbacks never
  see a monitoring address;
* ``POST /api/monitor/<code>/upload[?by=TEXT]`` - one file of new samples,
  streamed by ``assets/upload.js``, scored and appended as an upload;
* ``GET /m/<code>/manage?key=KEY`` - the manager link: the key is traded for a
  cookie (``HttpOnly``, ``SameSite=Lax``, path ``/m/``) and the browser is sent
  to the key-free monitoring page, where uploads can then be removed;
* ``GET /m/<code>/export/monitoring.csv?...`` and ``GET /m/<code>/report.html?...``
  - the monitoring table as formula-safe CSV and the HTML report of the view.

As on the dataset manager page, the key appears in an address once, never in a
monitoring link; a wrong key gets the same 404 as an unknown model.
"""

from __future__ import annotations

import logging
from urllib.parse import quote, unquote

import dash
import flask

from webapp.analysis.errors import OrdinateError
from webapp.state.monitor_state import parse_monitor_query
from webapp.store.storage import is_token
from webapp.ui.monitoring_callbacks import (
    MANAGER_COOKIE_PREFIX,
    register_monitoring_callbacks,
)
from webapp.ui.monitoring_layout import build_monitor_layout
from webapp.web.exports import _attachment, _plain, to_safe_csv
from webapp.web.filenames import safe_filename
from webapp.web.monitor_report import build_monitor_report, monitoring_table
from webapp.web.upload import (
    FILENAME_HEADER,
    REQUIRED_HEADER,
    REQUIRED_HEADER_VALUE,
    SERVER_PROBLEM_MESSAGE,
    too_large_message,
)

__all__ = ["MONITOR_PREFIX", "manager_link", "monitoring_link", "register_monitoring"]

MONITOR_PREFIX = "/m/"
log = logging.getLogger("ordinate.monitoring")


def monitoring_link(code: str) -> str:
    """The monitoring link (relative) of a locked reference model."""
    return f"{MONITOR_PREFIX}{quote(code, safe='')}"


def manager_link(code: str, key: str) -> str:
    """The private manager link of a locked model; show it to whoever locked it, only."""
    return f"{MONITOR_PREFIX}{quote(code, safe='')}/manage?key={quote(key, safe='')}"


def register_monitoring(app: dash.Dash, services, *, assets_folder: str) -> dash.Dash:
    """Mount the monitoring page and its routes on ``app.server``; returns the page's Dash app."""
    config = services.config
    page = dash.Dash(
        "webapp.web.monitoring",
        server=app.server,
        url_base_pathname=MONITOR_PREFIX,
        title=f"{config.title} · monitoring",
        assets_folder=assets_folder,
        suppress_callback_exceptions=True,
        update_title=None,
    )
    page.layout = build_monitor_layout(config)
    register_monitoring_callbacks(page, services)
    _register_routes(app.server, services, config.max_upload_bytes)
    return page


def _json(status: int, payload: dict) -> flask.Response:
    response = flask.jsonify(payload)
    response.status_code = status
    response.headers["Cache-Control"] = "no-store"
    return response


def _register_routes(server: flask.Flask, services, limit_bytes: int) -> None:
    models = services.reference_models

    def upload(code: str):
        request = flask.request
        if request.headers.get(REQUIRED_HEADER) != REQUIRED_HEADER_VALUE:
            return _json(403, {"error": "New samples are added from the monitoring page."})
        if not is_token(code) or models.get(code) is None:
            return _json(404, {"error": "This monitoring link is not known here, so the file was not added."})
        declared = request.content_length
        if declared is not None and declared > limit_bytes:
            return _json(413, {"error": too_large_message(limit_bytes, declared)})
        data = request.stream.read(limit_bytes + 1)
        if len(data) > limit_bytes:
            return _json(413, {"error": too_large_message(limit_bytes)})
        if not data:
            return _json(400, {"error": "The file is empty (0 bytes). Choose a CSV file of new samples."})
        name = unquote(request.headers.get(FILENAME_HEADER, ""), errors="replace").replace("\\", "/")
        name = name.rsplit("/", 1)[-1].strip() or "new samples.csv"
        by = request.args.get("by", "")[:100]
        try:
            info = models.add_upload(code, data, name, uploaded_by=by)
        except OrdinateError as problem:
            return _json(422, {"error": f"{problem} The file was not added."})
        except Exception:
            log.exception("adding an upload to a reference model failed")
            return _json(500, {"error": SERVER_PROBLEM_MESSAGE})
        return _json(200, {"token": info.upload_id,
                           "summary": {"filename": info.file_name, "rows": info.sample_count}})

    server.add_url_rule("/api/monitor/<code>/upload", endpoint="ordinate_monitor_upload", view_func=upload,
                        methods=["POST"], provide_automatic_options=False)

    def manage(code: str):
        key = flask.request.args.get("key", "")
        if not is_token(code) or not (0 < len(key) <= 128) or not models.check_manager_key(code, key):
            return _plain(404, "This manager link does not work. Use the complete link you received "
                               "when the reference model was locked.")
        response = flask.redirect(monitoring_link(code), code=303)
        response.set_cookie(MANAGER_COOKIE_PREFIX + code, key, path=MONITOR_PREFIX, httponly=True,
                            samesite="Lax", secure=flask.request.is_secure)
        response.headers["Cache-Control"] = "no-store"
        response.headers["Referrer-Policy"] = "no-referrer"
        return response

    server.add_url_rule("/m/<code>/manage", endpoint="ordinate_monitor_manage", view_func=manage,
                        methods=["GET"], provide_automatic_options=False)

    def export_csv(code: str):
        return _download(code, lambda locked, state: _attachment(
            to_safe_csv(monitoring_table(services, state)),
            safe_filename(f"{locked.name}-v{locked.version}-monitoring", ".csv"), "text/csv"))

    def _download(code: str, produce):
        locked = models.get(code) if is_token(code) else None
        if locked is None:
            return _plain(404, "This monitoring link is not known here.")
        state, _ = parse_monitor_query(flask.request.query_string.decode("utf-8", "replace"), code)
        try:
            return produce(locked, state)
        except OrdinateError as problem:
            return _plain(422, str(problem))
        except Exception:
            log.exception("a monitoring download failed")
            return _plain(500, SERVER_PROBLEM_MESSAGE)

    server.add_url_rule("/m/<code>/export/monitoring.csv", endpoint="ordinate_monitor_csv", view_func=export_csv,
                        methods=["GET"], provide_automatic_options=False)

    def report(code: str):
        def produce(locked, state):
            response = _attachment(build_monitor_report(services, state, base_url=flask.request.host_url),
                                   safe_filename(f"{locked.name}-v{locked.version}-monitoring", "-report.html"),
                                   "text/html")
            response.headers["Content-Security-Policy"] = "sandbox"  # as for the saved-view report
            return response

        return _download(code, produce)

    server.add_url_rule("/m/<code>/report.html", endpoint="ordinate_monitor_report", view_func=report,
                        methods=["GET"], provide_automatic_options=False)

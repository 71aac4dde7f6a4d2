"""A streaming upload route, so large files travel once and land on disk.

Dash's ``dcc.Upload`` keeps a chosen file base64-encoded in the browser and
sends it again with every callback that reads it; that is fine for a few
megabytes and breaks down well before 100 MB (plotly/dash-docs#1135,
plotly/dash#2869), and its ``max_size`` fails silently (plotly/dash#2638).
Instead, ``assets/upload.js`` POSTs the raw file once to :data:`UPLOAD_PATH`;
this module copies the request body to the :class:`~webapp.store.storage.DataStore`
in chunks, asks the app to inspect it, and answers with a token the Dash side
keeps. The file is never held whole in memory by this route.

Protocol
--------
Request::

    POST /api/upload
    Content-Type: application/octet-stream
    X-Requested-With: ordinate-upload     (required; see below)
    X-Filename: <percent-encoded original file name>   (display only)
    X-Ordinate-Purpose: analysis | batch                (optional; a batch is scored
                                                         against the open view's model)
    <raw file bytes>

Answers (all JSON, all ``Cache-Control: no-store``):

=====  ==========================================================
200    ``{"token": "...", "summary": {...}}``
400    ``{"error": ...}`` empty body, or the upload was cut off. A request
       with neither ``Content-Length`` nor chunked encoding has an empty body
       (RFC 9112, section 6.3); chunked bodies are read when the WSGI server
       sets ``wsgi.input_terminated`` (gunicorn, waitress and Werkzeug's
       development server do).
403    ``{"error": ...}`` the ``X-Requested-With`` header is missing
405    ``{"error": ...}`` any method other than POST
413    ``{"error": ...}`` over the size limit (before or while reading)
415    ``{"error": ...}`` sent as an HTML form instead of raw bytes
422    ``{"error": ...}`` the file cannot be used (the
       :class:`~webapp.analysis.errors.OrdinateError` message, followed by
       :data:`NOT_KEPT_MESSAGE`); the file was deleted at once
500    ``{"error": ...}`` anything unexpected; the traceback is logged, not sent,
       and a file already stored is deleted
=====  ==========================================================

Security
--------
* Cross-site writes: a page on another origin can POST a simple request
  (form or ``fetch`` without custom headers) to this route, but it cannot add a
  custom header such as ``X-Requested-With`` without a CORS preflight, which
  this server never grants (no ``Access-Control-Allow-*`` headers, and OPTIONS
  answers 405). Requiring the header therefore blocks cross-site uploads
  (OWASP CSRF prevention cheat sheet, "custom request headers").
* The file name is shown to people only; paths are built from the content
  hash by :class:`~webapp.store.storage.DataStore`.
* A file that cannot be used is not kept: the uploader receives no manage link
  for it, so nobody could delete a wrong (perhaps confidential) file later. Its
  dataset record goes, its bytes unless another dataset holds the same bytes,
  and (through ``on_discard``) any result cached from it.

Sizes are in MB of 1024 * 1024 bytes, as in :mod:`webapp.analysis.ingest`.
"""

from __future__ import annotations

import logging
from typing import BinaryIO, Callable
from urllib.parse import unquote

import flask
from werkzeug.exceptions import ClientDisconnected, MethodNotAllowed, RequestEntityTooLarge

from webapp.analysis.errors import OrdinateError
from webapp.store.storage import CHUNK_BYTES, DataStore, DatasetRecord, UploadTooLarge

__all__ = [
    "UPLOAD_PATH",
    "REQUIRED_HEADER",
    "REQUIRED_HEADER_VALUE",
    "FILENAME_HEADER",
    "BYTES_PER_MB",
    "limit_bytes_from_mb",
    "too_large_message",
    "SERVER_PROBLEM_MESSAGE",
    "NOT_KEPT_MESSAGE",
    "register_upload_route",
]

UPLOAD_PATH = "/api/upload"
REQUIRED_HEADER = "X-Requested-With"
REQUIRED_HEADER_VALUE = "ordinate-upload"
FILENAME_HEADER = "X-Filename"
BYTES_PER_MB = 1024 * 1024

_FORM_MIMETYPES = frozenset({"multipart/form-data", "application/x-www-form-urlencoded"})

SERVER_PROBLEM_MESSAGE = (
    "The upload could not be processed because of a problem on the server. "
    "The file was not stored. Please try again or tell the administrator."
)
NOT_KEPT_MESSAGE = "The file was not kept."
_EMPTY_MESSAGE = "The file is empty (0 bytes). Choose a CSV file that contains a header row and data."
_INTERRUPTED_MESSAGE = (
    "The upload was interrupted before the whole file arrived, so nothing was stored. "
    "Check the network connection and try again."
)
_FORBIDDEN_MESSAGE = (
    "This upload was refused because it did not come from the Ordinate page. "
    "Open Ordinate in your browser and add the file there."
)
_METHOD_MESSAGE = "Files are added to Ordinate with POST requests only."
_FORM_MESSAGE = (
    "The file was sent as a web form; Ordinate expects the raw file "
    "(Content-Type: application/octet-stream). Add the file from the Ordinate page."
)

logger = logging.getLogger(__name__)

Inspector = Callable[[DatasetRecord], dict]
OnDiscard = Callable[[DatasetRecord], None]


def limit_bytes_from_mb(limit_mb: float) -> int:
    """The byte limit for a limit given in MB (1 MB = 1024 * 1024 bytes)."""
    if not limit_mb > 0:
        raise ValueError(f"the upload limit must be a positive number of MB, not {limit_mb!r}")
    return int(limit_mb * BYTES_PER_MB)


def too_large_message(limit_bytes: int, size_bytes: int | None = None) -> str:
    """The message for an upload over the limit, with its size when known.

    ``assets/upload.js`` builds the same sentence in the browser; keep the two in step.
    """
    limit_mb = limit_bytes / BYTES_PER_MB
    limit_text = f"{limit_mb:g} MB"
    size_text = f"{size_bytes / BYTES_PER_MB:.1f}" if size_bytes is not None else None
    # A size that rounds down to the limit ("50.0 MB; accepts up to 50 MB") would read
    # as a contradiction, so it is stated as "larger than" instead.
    if size_text is not None and float(size_text) > limit_mb:
        opening = f"The file is {size_text} MB"
    else:
        opening = f"The file is larger than {limit_text}"
    return (
        f"{opening}; this server accepts files up to {limit_text}. "
        "Ask the administrator to raise the limit (--max-upload-mb) or split the file."
    )


def register_upload_route(
    server: flask.Flask,
    store: DataStore,
    *,
    limit_bytes: int,
    inspect: Inspector,
    on_discard: OnDiscard | None = None,
    path: str = UPLOAD_PATH,
) -> None:
    """Add the streaming upload route and its error handlers to ``server``.

    Parameters
    ----------
    server : flask.Flask
        The Flask app (``dash_app.server``).
    store : DataStore
        Where uploaded files are kept.
    limit_bytes : int
        Largest accepted upload. If the operator also sets Flask's
        ``MAX_CONTENT_LENGTH``, the smaller of the two applies.
    inspect : callable
        ``inspect(record) -> dict`` parses the stored file and returns a
        JSON-able summary; it raises :class:`OrdinateError` for a file that
        cannot be used.
    on_discard : callable, optional
        Called as ``on_discard(record)`` after an upload that could not be used
        was deleted from the store, e.g. to drop results cached from it. As with
        the manage page's ``on_delete``, other datasets may hold the same bytes
        (then ``store.blob_path(record).exists()``). Its errors are logged.
    path : str
        URL of the route on the Flask server; the default is :data:`UPLOAD_PATH`.

    Notes
    -----
    Registers app-wide handlers for 413 (JSON with a clear message for every
    route, since Flask's ``MAX_CONTENT_LENGTH`` applies to all of them) and for
    405 (JSON on this route only; other routes keep Flask's default).
    """
    if limit_bytes <= 0:
        raise ValueError("limit_bytes must be positive")

    def upload():
        if flask.request.headers.get(REQUIRED_HEADER) != REQUIRED_HEADER_VALUE:
            return _error(403, _FORBIDDEN_MESSAGE)
        if flask.request.mimetype in _FORM_MIMETYPES:
            return _error(415, _FORM_MESSAGE)

        limit = _effective_limit(limit_bytes)
        declared = flask.request.content_length
        if declared is not None and declared > limit:
            return _error(413, too_large_message(limit, declared))  # body left unread
        if declared == 0:
            return _error(400, _EMPTY_MESSAGE)

        filename = _display_filename(flask.request.headers.get(FILENAME_HEADER, ""))
        try:
            stream = flask.request.stream
            first_chunk = stream.read(CHUNK_BYTES)
            if not first_chunk:
                return _error(400, _EMPTY_MESSAGE)
            record = store.add_stream(
                _PrefixedStream(first_chunk, stream), filename, limit_bytes=limit
            )
        except (UploadTooLarge, RequestEntityTooLarge):
            return _error(413, too_large_message(limit, declared))
        except ClientDisconnected:
            return _error(400, _INTERRUPTED_MESSAGE)
        except Exception:
            logger.exception("Storing an upload failed")
            return _error(500, SERVER_PROBLEM_MESSAGE)

        try:
            summary = inspect(record)
            return _json(200, {"token": record.token, "summary": summary})
        except OrdinateError as error:
            _discard(store, record, on_discard)
            return _error(422, f"{error} {NOT_KEPT_MESSAGE}")
        except Exception:
            logger.exception("Inspecting upload %s failed", record.token)
            _discard(store, record, on_discard)
            return _error(500, SERVER_PROBLEM_MESSAGE)

    server.add_url_rule(
        path,
        endpoint="ordinate_upload",
        view_func=upload,
        methods=["POST"],
        provide_automatic_options=False,
    )

    @server.errorhandler(RequestEntityTooLarge)
    def _too_large(error: RequestEntityTooLarge):
        limit = _effective_limit(limit_bytes)
        return _error(413, too_large_message(limit, flask.request.content_length))

    @server.errorhandler(MethodNotAllowed)
    def _method_not_allowed(error: MethodNotAllowed):
        if flask.request.path != path:
            return error
        response = _error(405, _METHOD_MESSAGE)
        response.headers["Allow"] = "POST"
        return response


def _discard(store: DataStore, record: DatasetRecord, on_discard: OnDiscard | None) -> None:
    """Delete an upload that cannot be used; never raises (the user gets the reason it failed)."""
    try:
        store.delete_dataset(record.token)
        if on_discard is not None:
            on_discard(record)
    except Exception:
        logger.exception("Deleting the unusable upload %s failed", record.token)


def _effective_limit(limit_bytes: int) -> int:
    """The route's limit, lowered by the operator's ``MAX_CONTENT_LENGTH`` when set."""
    server_limit = flask.request.max_content_length
    return min(limit_bytes, server_limit) if server_limit is not None else limit_bytes


def _display_filename(header_value: str) -> str:
    """The original file name, for display only (never part of a path).

    The client percent-encodes it so any Unicode name survives HTTP headers.
    Only the last path segment is kept, whichever separator the client used;
    :class:`DataStore` trims control characters and length.
    """
    name = unquote(header_value, errors="replace")
    return name.replace("\\", "/").rsplit("/", 1)[-1].strip()


def _json(status: int, payload: dict) -> flask.Response:
    response = flask.jsonify(payload)
    response.status_code = status
    response.headers["Cache-Control"] = "no-store"
    return response


def _error(status: int, message: str) -> flask.Response:
    return _json(status, {"error": message})


class _PrefixedStream:
    """A read-only stream that yields an already-read first chunk, then the rest.

    Reading one chunk before storing lets an empty body be refused without
    leaving an empty dataset behind.
    """

    def __init__(self, first_chunk: bytes, rest: BinaryIO):
        self._first = first_chunk
        self._rest = rest

    def read(self, size: int = -1) -> bytes:
        if not self._first:
            return self._rest.read(size)
        if size is None or size < 0:
            chunk, self._first = self._first + self._rest.read(), b""
        else:
            chunk, self._first = self._first[:size], self._first[size:]
        return chunk

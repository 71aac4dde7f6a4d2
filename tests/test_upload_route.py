"""The streaming upload route (webapp/web/upload.py) on a bare Flask app.

Status codes follow HTTP semantics, RFC 9110: 403 (15.5.4), 405 with an
``Allow`` header (15.5.6), 413 (15.5.14), 415 (15.5.16),
422 (15.5.21). The custom-header defence against cross-site writes is the
"custom request headers" technique of the OWASP CSRF Prevention Cheat Sheet.
The exact wording of the messages is the project's own specification.
"""

from __future__ import annotations

import hashlib
import io
import logging
import re
import shutil
import subprocess
from pathlib import Path
from urllib.parse import quote

import flask
import pytest
from werkzeug.test import EnvironBuilder

from webapp.analysis.errors import OrdinateError
from webapp.store.storage import CHUNK_BYTES, DataStore
from webapp.web.upload import (
    NOT_KEPT_MESSAGE,
    SERVER_PROBLEM_MESSAGE,
    UPLOAD_PATH,
    limit_bytes_from_mb,
    register_upload_route,
    too_large_message,
)

MB = 1024 * 1024
HEADERS = {"X-Requested-With": "ordinate-upload", "Content-Type": "application/octet-stream"}
BAD_FILE_MESSAGE = "Row 3 of 'bad.csv' has 5 values but the header has 4. Fix that row and upload again."
CSV = b"sample,Fe,Mn\nS1,1.5,0.2\n"


def fake_inspect(store: DataStore):
    def inspect(record):
        if store.read_bytes(record).startswith(b"BAD"):
            raise OrdinateError(BAD_FILE_MESSAGE)
        return {"rows": 1}

    return inspect


def refuse_named(filename: str):
    """An inspector that refuses one file name: the same bytes can then be kept under another name."""
    def inspect(record):
        if record.filename == filename:
            raise OrdinateError(BAD_FILE_MESSAGE)
        return {"rows": 1}

    return inspect


def make_app(store: DataStore, *, limit_bytes: int = 2 * MB, inspect=None, on_discard=None) -> flask.Flask:
    app = flask.Flask("upload-test")
    register_upload_route(app, store, limit_bytes=limit_bytes, inspect=inspect or fake_inspect(store),
                          on_discard=on_discard)
    return app


@pytest.fixture
def store(tmp_path) -> DataStore:
    return DataStore(tmp_path / "data")


@pytest.fixture
def client(store):
    return make_app(store).test_client()


def post(client, body: bytes, filename: str = "batch.csv", **headers):
    return client.post(UPLOAD_PATH, data=body, headers={**HEADERS, "X-Filename": quote(filename), **headers})


def blob_files(store: DataStore) -> list[Path]:
    return sorted(store.blob_dir.iterdir())


def post_without_content_length(app: flask.Flask, body: bytes, *, server_terminates_stream: bool):
    """A chunked-style request: no Content-Length header at all.

    Werkzeug only reads such a body when the WSGI server says it ends the stream
    itself (``wsgi.input_terminated``, as gunicorn and the dev server do for
    chunked requests); the test client always adds a length, so the environ is built by hand.
    """
    environ = EnvironBuilder(
        path=UPLOAD_PATH, method="POST", headers={**HEADERS, "X-Filename": "big.csv"}, input_stream=io.BytesIO(body)
    ).get_environ()
    del environ["CONTENT_LENGTH"]
    if server_terminates_stream:
        environ["wsgi.input_terminated"] = True
    return app.test_client().open(flask.Request(environ))


# --- success ----------------------------------------------------------------


def test_success_stores_the_exact_bytes_and_returns_a_token(store, monkeypatch):
    # The body must be streamed: buffering it whole (request.data / get_data) is a bug here.
    def no_buffering(*args, **kwargs):
        raise AssertionError("the upload route buffered the whole body")

    monkeypatch.setattr(flask.Request, "get_data", no_buffering)
    # Larger than one storage chunk, so the body is copied in several pieces.
    body = CSV + b"".join(b"S%d,%d.5,0.1\n" % (i, i) for i in range(200_000))
    assert len(body) > 2 * CHUNK_BYTES
    client = make_app(store, limit_bytes=10 * MB).test_client()

    response = post(client, body, filename="Eisen µg-L 2024.csv")

    assert response.status_code == 200
    payload = response.get_json()
    assert re.fullmatch(r"[A-Za-z0-9_-]{24}", payload["token"])
    assert payload["summary"] == {"rows": 1}
    assert response.headers["Cache-Control"] == "no-store"
    record = store.dataset(payload["token"])
    assert store.read_bytes(record) == body
    assert record.size_bytes == len(body)
    assert record.filename == "Eisen µg-L 2024.csv"  # percent-decoded for display
    assert [p.suffix for p in blob_files(store)] == [".bin"]  # no .part left behind


def test_same_content_twice_gives_two_tokens_and_one_blob(client, store):
    first = post(client, CSV).get_json()["token"]
    second = post(client, CSV, filename="copy.csv").get_json()["token"]

    assert first != second
    assert len(blob_files(store)) == 1
    assert store.dataset(first).content_hash == store.dataset(second).content_hash
    assert store.dataset(second).filename == "copy.csv"


# --- size limit -------------------------------------------------------------


def test_too_large_message_matches_the_specified_wording():
    # The sentence given in the project's specification for a 63.2 MB file and a 50 MB limit.
    assert too_large_message(50 * MB, int(63.2 * MB)) == (
        "The file is 63.2 MB; this server accepts files up to 50 MB. "
        "Ask the administrator to raise the limit (--max-upload-mb) or split the file."
    )
    assert too_large_message(50 * MB).startswith("The file is larger than 50 MB; this server accepts files up to 50 MB.")
    # 50.04 MB would print as "50.0 MB", which reads as within the limit; say "larger than" instead.
    assert too_large_message(50 * MB, 50 * MB + 40_000).startswith("The file is larger than 50 MB;")


def test_limit_from_mb_uses_binary_megabytes():
    assert limit_bytes_from_mb(50) == 52_428_800
    assert limit_bytes_from_mb(0.5) == 524_288
    with pytest.raises(ValueError):
        limit_bytes_from_mb(0)


def test_declared_length_over_the_limit_is_refused_without_reading_the_body(store, tmp_path):
    class WatchedBody(io.BytesIO):
        reads = 0

        def read(self, *args):
            WatchedBody.reads += 1
            return super().read(*args)

        def readinto(self, *args):
            WatchedBody.reads += 1
            return super().readinto(*args)

    client = make_app(store, limit_bytes=1 * MB).test_client()
    body = WatchedBody(b"x" * (3 * MB // 2))

    response = client.post(UPLOAD_PATH, input_stream=body, headers={**HEADERS, "X-Filename": "big.csv"})

    assert response.status_code == 413
    assert response.get_json()["error"].startswith("The file is 1.5 MB; this server accepts files up to 1 MB.")
    assert response.headers["Cache-Control"] == "no-store"
    assert WatchedBody.reads == 0
    assert blob_files(store) == []


def test_streamed_body_over_the_limit_is_refused_and_leaves_no_partial_file(store):
    app = make_app(store, limit_bytes=1 * MB)

    response = post_without_content_length(app, b"y" * (3 * MB), server_terminates_stream=True)

    assert response.status_code == 413
    message = response.get_json()["error"]
    assert "larger than 1 MB" in message and "--max-upload-mb" in message
    assert blob_files(store) == []  # neither a .part nor a .bin


def test_streamed_body_within_the_limit_is_stored(store):
    app = make_app(store, limit_bytes=1 * MB)

    response = post_without_content_length(app, CSV, server_terminates_stream=True)

    assert response.status_code == 200
    assert store.read_bytes(store.dataset(response.get_json()["token"])) == CSV


def test_body_without_length_or_chunking_counts_as_empty(store):
    # RFC 9112, section 6.3, rule 7: a request with neither Content-Length nor
    # Transfer-Encoding has a message body of length zero.
    response = post_without_content_length(make_app(store), CSV, server_terminates_stream=False)

    assert response.status_code == 400
    assert "empty" in response.get_json()["error"]
    assert blob_files(store) == []


def test_operator_max_content_length_lowers_the_limit_and_answers_json(store):
    app = make_app(store, limit_bytes=10 * MB)
    app.config["MAX_CONTENT_LENGTH"] = 1 * MB

    @app.post("/elsewhere")
    def elsewhere():
        return {"n": len(flask.request.get_data())}

    client = app.test_client()
    upload = post(client, b"z" * (2 * MB))
    other = client.post("/elsewhere", data=b"z" * (2 * MB))

    assert upload.status_code == 413
    assert "accepts files up to 1 MB" in upload.get_json()["error"]
    # Flask's own MAX_CONTENT_LENGTH check on any other route gets the same JSON shape.
    assert other.status_code == 413
    assert other.get_json()["error"].startswith("The file is 2.0 MB; this server accepts files up to 1 MB.")


# --- refusals ---------------------------------------------------------------


def test_unusable_file_gives_422_with_the_engine_message_and_is_not_kept(client, store):
    response = post(client, b"BAD,header\n1,2,3\n", filename="bad.csv")

    assert response.status_code == 422
    assert response.get_json() == {"error": f"{BAD_FILE_MESSAGE} The file was not kept."}
    assert response.headers["Cache-Control"] == "no-store"
    # No manage link was sent for it, so nothing may stay that nobody could delete.
    assert store.datasets() == []
    assert blob_files(store) == []


def test_a_refused_upload_leaves_a_kept_dataset_with_the_same_bytes_alone(store):
    client = make_app(store, inspect=refuse_named("wrong.csv")).test_client()
    kept = post(client, CSV, filename="right.csv").get_json()["token"]

    refused = post(client, CSV, filename="wrong.csv")

    assert refused.status_code == 422 and refused.get_json()["error"].endswith(NOT_KEPT_MESSAGE)
    assert [record.token for record in store.datasets()] == [kept]
    assert store.read_bytes(store.dataset(kept)) == CSV
    # The kept dataset's bytes stay until it is deleted too.
    store.delete_dataset(kept)
    assert blob_files(store) == []


def test_a_refused_upload_is_handed_to_on_discard_after_its_deletion(store):
    seen = []

    def on_discard(record):
        seen.append((record.filename, store.dataset(record.token), store.blob_path(record).exists()))

    client = make_app(store, on_discard=on_discard).test_client()
    post(client, b"BAD,header\n1,2,3\n", filename="bad.csv")

    assert seen == [("bad.csv", None, False)]


def test_a_failing_on_discard_still_answers_422_and_logs(store, caplog):
    def on_discard(record):
        raise RuntimeError("cache is gone")

    with caplog.at_level(logging.ERROR, logger="webapp.web.upload"):
        response = post(make_app(store, on_discard=on_discard).test_client(), b"BAD\n", filename="bad.csv")

    assert response.status_code == 422
    assert store.datasets() == [] and blob_files(store) == []
    assert "cache is gone" in caplog.text


@pytest.mark.parametrize("header_value", [None, "XMLHttpRequest", ""])
def test_missing_or_wrong_custom_header_is_forbidden(client, store, header_value):
    headers = {"Content-Type": "application/octet-stream", "X-Filename": "a.csv"}
    if header_value is not None:
        headers["X-Requested-With"] = header_value

    response = client.post(UPLOAD_PATH, data=CSV, headers=headers)

    assert response.status_code == 403
    assert "error" in response.get_json()
    assert blob_files(store) == []


@pytest.mark.parametrize("method", ["GET", "PUT", "DELETE", "OPTIONS"])
def test_only_post_is_allowed(client, method):
    response = client.open(UPLOAD_PATH, method=method, headers=HEADERS)

    assert response.status_code == 405
    assert response.headers["Allow"] == "POST"
    assert response.headers["Cache-Control"] == "no-store"
    assert "error" in response.get_json()
    # No CORS grant: a cross-site preflight must not succeed.
    assert "Access-Control-Allow-Origin" not in response.headers


def test_method_handler_leaves_other_routes_alone(store):
    app = make_app(store)

    @app.post("/elsewhere")
    def elsewhere():
        return "ok"

    response = app.test_client().get("/elsewhere")

    assert response.status_code == 405
    assert response.get_json(silent=True) is None  # Flask's default page, not our JSON


def test_empty_body_gives_400_and_stores_nothing(client, store):
    response = post(client, b"")

    assert response.status_code == 400
    assert "empty" in response.get_json()["error"]
    assert blob_files(store) == []


def test_form_upload_is_refused_with_415(client, store):
    response = client.post(
        UPLOAD_PATH,
        data={"file": (io.BytesIO(CSV), "a.csv")},
        headers={"X-Requested-With": "ordinate-upload"},
        content_type="multipart/form-data",
    )

    assert response.status_code == 415
    assert "application/octet-stream" in response.get_json()["error"]
    assert blob_files(store) == []


def test_interrupted_upload_gives_400_and_leaves_no_partial_file(store):
    # The client promised more bytes than it sent (connection dropped mid-way).
    environ = EnvironBuilder(
        path=UPLOAD_PATH, method="POST", headers=HEADERS, input_stream=io.BytesIO(b"w" * (CHUNK_BYTES + 10))
    ).get_environ()
    environ["CONTENT_LENGTH"] = str(3 * CHUNK_BYTES)
    response = make_app(store, limit_bytes=10 * MB).test_client().open(flask.Request(environ))

    assert response.status_code == 400
    assert "interrupted" in response.get_json()["error"]
    assert blob_files(store) == []


def test_unexpected_error_gives_500_without_details_and_logs_them(store, caplog):
    def broken_inspect(record):
        raise RuntimeError("secret internal detail /srv/ordinate/config.py")

    client = make_app(store, inspect=broken_inspect).test_client()
    with caplog.at_level(logging.ERROR, logger="webapp.web.upload"):
        response = post(client, CSV)

    assert response.status_code == 500
    assert response.get_json() == {"error": SERVER_PROBLEM_MESSAGE}
    text = response.get_data(as_text=True)
    assert "Traceback" not in text and "secret internal detail" not in text
    assert "RuntimeError: secret internal detail" in caplog.text  # the traceback is in the server log
    assert store.datasets() == [] and blob_files(store) == []  # as the message says: not stored


def test_storage_failure_gives_500(store, monkeypatch, caplog):
    def disk_full(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(store, "add_stream", disk_full)
    with caplog.at_level(logging.ERROR, logger="webapp.web.upload"):
        response = post(make_app(store).test_client(), CSV)

    assert response.status_code == 500
    assert response.get_json() == {"error": SERVER_PROBLEM_MESSAGE}
    assert "No space left on device" in caplog.text


# --- file names -------------------------------------------------------------


@pytest.mark.parametrize(
    "filename, shown",
    [
        ("../../etc/passwd", "passwd"),
        ("..\\..\\Windows\\win.ini", "win.ini"),
        ("/etc/../../passwd\x00.csv", "passwd.csv"),
        ("", "uploaded data"),
    ],
)
def test_file_name_is_a_display_name_only(tmp_path, filename, shown):
    store = DataStore(tmp_path / "deep" / "nested" / "data")
    client = make_app(store).test_client()

    response = post(client, CSV, filename=filename)

    assert response.status_code == 200
    assert store.dataset(response.get_json()["token"]).filename == shown
    written = [p for p in tmp_path.rglob("*") if p.is_file()]
    assert written and all(store.root in p.parents for p in written)
    assert not any(p.name in {"passwd", "win.ini", "passwd.csv"} for p in written)


def test_missing_file_name_header_is_accepted(client, store):
    response = client.post(UPLOAD_PATH, data=CSV, headers=HEADERS)

    assert response.status_code == 200
    assert store.dataset(response.get_json()["token"]).filename == "uploaded data"


# --- browser script (static checks only; browser tests live elsewhere) --------

UPLOAD_JS = Path(__file__).resolve().parents[1] / "assets" / "upload.js"


def test_upload_script_parses_and_uses_the_agreed_ids():
    node = shutil.which("node")
    if node is None:
        pytest.skip("node is not installed; the syntax check needs it")
    result = subprocess.run([node, "--check", str(UPLOAD_JS)], capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr

    source = UPLOAD_JS.read_text(encoding="utf-8")
    for contract in ['"upload-zone"', '"upload-input"', '"upload-progress"', '"upload-status"', '"upload-result"',
                     '"is-dragging"', '"is-error"', '"X-Requested-With", "ordinate-upload"', '"data-limit-mb"',
                     "set_props", "XMLHttpRequest", "upload.onprogress"]:
        assert contract in source, contract
    assert f'"{UPLOAD_PATH}"' in source


# --- in the real app: results cached from a refused upload go too -------------


def test_a_refused_upload_leaves_no_cached_results_in_the_app(tmp_path, monkeypatch):
    from webapp.web import app as app_module
    from webapp.config import AppConfig

    def refuse_after_parsing(state, table):
        raise OrdinateError("This table cannot be analysed as it is.")

    dash_app = app_module.create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    services = dash_app.server.config["ordinate.services"]
    # The table is parsed and cached first; the refusal comes after that.
    monkeypatch.setattr(app_module, "recipe_for", refuse_after_parsing)
    body = b"sample,a,b\nS1,1,2\nS2,2,1\nS3,3,5\n"

    response = post(dash_app.server.test_client(), body, filename="refused.csv")

    assert response.status_code == 422
    assert response.get_json()["error"] == "This table cannot be analysed as it is. The file was not kept."
    assert services.compute.stats()["parses"] == 1  # it was parsed and cached, then refused
    assert services.store.datasets() == [] and blob_files(services.store) == []
    content_hash = hashlib.sha256(body).hexdigest()
    assert not [k for k in services.compute.cache.iterkeys() if isinstance(k, str) and content_hash in k]

"""The team access key: start-up policy, sign-in page, cookie and security headers (webapp/web/access.py).

Sources for the expectations:

* Loopback addresses: RFC 1122 section 3.2.1.3 (127.0.0.0/8), RFC 4291 section
  2.5.3 (::1), RFC 6761 section 6.3 (the name "localhost"); IPv4-mapped IPv6
  addresses: RFC 4291 section 2.5.5.2.
* Status codes: RFC 9110 section 15.4.4 (303 See Other), 15.5.2 (401).
* Cookie attributes HttpOnly, Secure, Path, Max-Age: RFC 6265 section 4.1;
  SameSite: the RFC 6265bis draft (as implemented by browsers).
* Open redirects: OWASP Unvalidated Redirects and Forwards Cheat Sheet; browsers
  treat ``\\`` like ``/`` and drop tab/newline in URLs (WHATWG URL Standard,
  "special" schemes and the basic URL parser's removal of ASCII tab or newline).
* Fetch Metadata ``Sec-Fetch-Site``: W3C Fetch Metadata Request Headers.
* ``secrets.token_urlsafe(18)`` is 24 characters: Base64url of 18 bytes,
  4 characters per 3 bytes without padding (RFC 4648 section 5; Python docs of
  ``secrets.token_urlsafe``).
* The exact messages are the project's own specification.
"""

from __future__ import annotations

import json
import os
import re
import stat
import threading
import time
from pathlib import Path
from urllib.parse import parse_qs, urlsplit

import pytest

from webapp.web import access
from webapp.web.access import (
    ACCESS_KEY_ENV,
    COOKIE_MAX_AGE_SECONDS,
    COOKIE_NAME,
    GENERATE_KEY_COMMAND,
    SECRET_FILE_NAME,
    AccessConfigError,
    access_policy,
    cookie_serializer,
    is_loopback_host,
    key_file_warning,
    load_or_create_secret,
    register_access_control,
    resolve_access_key,
    safe_next,
    warning_text,
)
from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.store.storage import TOKEN_PATTERN, new_token

KEY = "k" * 24
OTHER_KEY = "z" * 24
HTML = {"Accept": "text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8"}  # a browser navigating
JSON_ACCEPT = {"Accept": "application/json"}
SECRET_CSV = b"batch,Moisture,Protein\nZX-PRIVATE-1,11.2,13.9\nZX-PRIVATE-2,11.8,13.1\nZX-PRIVATE-3,10.9,14.2\n"
SECRET_FILENAME = "confidential-supplier-lots.csv"


# --- helpers ---------------------------------------------------------------------------


def build_app(data_dir: Path, key: str = KEY):
    """The whole Ordinate app with access control, however far the factory wiring has got."""
    app = create_app(AppConfig(data_dir=data_dir, access_key=key, require_access_key=True))
    if "ordinate_sign_in" not in app.server.view_functions:
        register_access_control(app.server, access_key=key, secret_dir=data_dir)
    app.server.testing = True
    return app


@pytest.fixture
def app(tmp_path):
    return build_app(tmp_path)


@pytest.fixture
def services(app):
    return app.server.config["ordinate.services"]


@pytest.fixture
def private_dataset(services):
    """A dataset and a saved view whose identifiers must never leak before sign-in."""
    store = services.store
    record = store.add_bytes(SECRET_CSV, SECRET_FILENAME, title="Supplier lots Q3")
    view = store.save_view(record.token, f"v=1&ds={record.token}", title="Outlier lots for review",
                           content_hash=record.content_hash, engine_version="test")
    return record, view


def sign_in(client, key: str = KEY, next_path: str = "/", address: str = "127.0.0.1"):
    return client.post("/sign-in", data={"key": key, "next": next_path}, environ_base={"REMOTE_ADDR": address})


def set_cookie_header(response) -> str:
    headers = [v for v in response.headers.getlist("Set-Cookie") if v.startswith(COOKIE_NAME + "=")]
    assert len(headers) == 1, response.headers
    return headers[0]


def hidden_next(page: str) -> str:
    match = re.search(r'name="next" value="([^"]*)"', page)
    assert match, page
    return match.group(1)


def forged_cookie(secret: bytes, payload, *, age_seconds: float = 0.0) -> str:
    serializer = cookie_serializer(secret)
    serializer.signer = _backdated_signer(serializer.signer, age_seconds)
    return serializer.dumps(payload)


def _backdated_signer(signer_class, age_seconds: float):
    class _Backdated(signer_class):
        def get_timestamp(self) -> int:
            return int(time.time() - age_seconds)

    return _Backdated


# --- start-up policy ---------------------------------------------------------------------


@pytest.mark.parametrize("host", ["127.0.0.1", "127.8.9.10", "::1", "[::1]", "localhost", "LOCALHOST",
                                  "::ffff:127.0.0.1"])
def test_loopback_hosts_are_recognised(host):
    assert is_loopback_host(host)


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "", "192.168.10.5", "10.0.0.1", "fe80::1",
                                  "ordinate.lab.example", "128.0.0.1"])
def test_network_hosts_are_not_loopback(host):
    assert not is_loopback_host(host)


def test_loopback_needs_no_key():
    policy = access_policy("127.0.0.1", None, False)
    assert policy.loopback and not policy.requires_key and policy.access_key is None
    assert policy.warning is None


def test_loopback_with_a_key_still_uses_it():
    policy = access_policy("localhost", f"  {KEY}\n", False)
    assert policy.requires_key and policy.access_key == KEY


def test_network_host_without_key_is_refused_with_instructions():
    with pytest.raises(AccessConfigError) as caught:
        access_policy("0.0.0.0", None, False)
    message = str(caught.value)
    assert ACCESS_KEY_ENV in message and "--access-key-file" in message and "--no-access-key" in message
    assert "\n" not in message  # one line for `ordinate serve` to print
    assert isinstance(caught.value, ValueError)


def test_network_host_with_key_requires_it():
    policy = access_policy("0.0.0.0", KEY, False)
    assert policy.requires_key and not policy.open_access and policy.warning is None
    assert KEY not in repr(policy)  # the key stays out of logs and tracebacks


def test_explicit_opt_out_is_allowed_with_a_loud_warning():
    policy = access_policy("0.0.0.0", None, True)
    assert not policy.requires_key and policy.open_access
    assert policy.warning == warning_text("0.0.0.0")
    assert policy.warning.startswith("WARNING") and "0.0.0.0" in policy.warning
    assert ACCESS_KEY_ENV in warning_text()


def test_key_and_opt_out_together_are_refused():
    with pytest.raises(AccessConfigError, match="Remove one"):
        access_policy("0.0.0.0", KEY, True)


@pytest.mark.parametrize("host", ["0.0.0.0", "127.0.0.1"])
def test_short_key_is_refused_with_a_way_to_make_a_good_one(host):
    with pytest.raises(AccessConfigError) as caught:
        access_policy(host, "k" * 15, False)
    assert "at least 16" in str(caught.value) and GENERATE_KEY_COMMAND in str(caught.value)
    assert access_policy(host, "k" * 16, False).requires_key  # the boundary itself is accepted


def test_key_with_a_line_break_inside_is_refused():
    with pytest.raises(AccessConfigError, match="one line"):
        access_policy("0.0.0.0", "first-half-of-key\nsecond-half-of-key", False)


def test_key_from_environment(monkeypatch):
    assert resolve_access_key(None, {ACCESS_KEY_ENV: f" {KEY} "}) == KEY
    assert resolve_access_key(None, {ACCESS_KEY_ENV: "   "}) is None
    assert resolve_access_key(None, {}) is None
    monkeypatch.setenv(ACCESS_KEY_ENV, OTHER_KEY)
    assert resolve_access_key() == OTHER_KEY


def test_key_file_wins_over_environment_and_is_stripped(tmp_path):
    key_file = tmp_path / "ordinate.key"
    key_file.write_text(KEY + "\n", encoding="utf-8")
    key_file.chmod(0o600)
    assert resolve_access_key(key_file, {ACCESS_KEY_ENV: OTHER_KEY}) == KEY
    assert key_file_warning(key_file) is None


def test_missing_or_empty_key_file_is_refused(tmp_path):
    with pytest.raises(AccessConfigError, match="does not exist"):
        resolve_access_key(tmp_path / "absent.key", {})
    empty = tmp_path / "empty.key"
    empty.write_text("\n", encoding="utf-8")
    with pytest.raises(AccessConfigError, match="is empty"):
        resolve_access_key(empty, {})


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_key_file_readable_by_others_gives_a_warning(tmp_path):
    key_file = tmp_path / "ordinate.key"
    key_file.write_text(KEY, encoding="utf-8")
    key_file.chmod(0o644)
    warning = key_file_warning(key_file)
    assert warning is not None and "chmod 600" in warning and str(key_file) in warning
    assert resolve_access_key(key_file, {}) == KEY  # warn only, not refuse


# --- nothing without signing in ---------------------------------------------------------------


def test_start_page_sends_a_browser_to_sign_in(app):
    response = app.server.test_client().get("/", headers=HTML)
    assert response.status_code == 303
    assert response.headers["Location"] == "/sign-in?next=/"
    assert response.headers["Cache-Control"] == "no-store"


def test_every_route_is_closed_without_the_cookie(app, services, private_dataset):
    record, view = private_dataset
    client = app.server.test_client()
    blobs_before = sorted(services.store.blob_dir.iterdir())
    query = f"v=1&ds={record.token}"
    attempts = [
        client.get("/", headers=HTML),
        client.get(f"/?{query}", headers=HTML),
        client.get("/_dash-layout", headers=JSON_ACCEPT),
        client.get("/_dash-dependencies", headers=JSON_ACCEPT),
        client.post("/_dash-update-component", json={"output": "x.children", "inputs": [], "changedPropIds": []}),
        client.post("/api/upload", data=SECRET_CSV,
                    headers={"X-Requested-With": "ordinate-upload", "Content-Type": "application/octet-stream",
                             "X-Filename": "new.csv"}),
        client.get(f"/export/scores.csv?{query}"),
        client.get(f"/export/scores.csv?{query}", headers=HTML),
        client.get(f"/v/{view.view_id}"),
        client.get(f"/v/{view.view_id}", headers=HTML),
        client.get(f"/v/{view.view_id}/report.html", headers=HTML),
        client.get("/assets/upload.js"),
        client.get("/_favicon.ico"),
        client.options("/api/upload"),
    ]
    for response in attempts:
        assert response.status_code in (303, 401), (response.request.path, response.status_code)
        body = response.get_data()
        for secret in (record.token, record.content_hash, SECRET_FILENAME, "ZX-PRIVATE", view.view_id,
                       record.manage_key, "Supplier lots", "Outlier lots"):
            assert secret.encode() not in body, (response.request.path, secret)
        if response.status_code == 303:
            assert response.headers["Location"].startswith("/sign-in?next=")
        else:
            assert response.get_json() == {"error": "Sign in first."}
    assert sorted(services.store.blob_dir.iterdir()) == blobs_before  # the upload stored nothing


def test_fetch_style_requests_get_json_not_a_redirect(app):
    # A script asking for anything (*/*) is not a person who can fill in a form.
    response = app.server.test_client().get("/_dash-layout", headers={"Accept": "*/*"})
    assert response.status_code == 401
    assert response.headers["WWW-Authenticate"].startswith("Cookie")


def test_sign_in_page_and_stylesheet_are_public(app):
    client = app.server.test_client()
    page = client.get("/sign-in", headers=HTML)
    assert page.status_code == 200
    text = page.get_data(as_text=True)
    assert "<title>Ordinate \u2014 sign in</title>" in text
    assert "Team access key" in text and 'type="password"' in text
    assert "Ask the person who runs this Ordinate server for the key." in text
    assert client.get("/assets/ordinate.css").status_code == 200


# --- signing in -----------------------------------------------------------------------------------


def test_wrong_key_is_refused_without_a_cookie(app):
    client = app.server.test_client()
    response = sign_in(client, OTHER_KEY)
    assert response.status_code == 401
    assert "That key is not right." in response.get_data(as_text=True)
    assert not [v for v in response.headers.getlist("Set-Cookie") if v.startswith(COOKIE_NAME)]
    assert not hasattr(access, "_pause")  # wrong keys are counted, never slept on (see test_sign_in_throttle)
    assert client.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 401
    for number, near_miss in enumerate(("", KEY[:-1], KEY + "k", KEY.upper())):
        assert sign_in(client, near_miss, address=f"10.0.0.{number}").status_code == 401


def test_right_key_sets_a_protected_cookie_and_opens_the_app(app):
    client = app.server.test_client()
    response = sign_in(client, KEY, "/_dash-layout")
    assert response.status_code == 303 and response.headers["Location"] == "/_dash-layout"
    header = set_cookie_header(response)
    attributes = {part.strip().split("=")[0].lower(): part.strip() for part in header.split(";")[1:]}
    assert "httponly" in attributes
    assert attributes["samesite"] == "SameSite=Lax"
    assert attributes["path"] == "Path=/"
    assert attributes["max-age"] == f"Max-Age={COOKIE_MAX_AGE_SECONDS}" and COOKIE_MAX_AGE_SECONDS == 30 * 86400
    assert "secure" not in attributes  # plain HTTP: a Secure cookie would never come back
    assert KEY not in header

    layout = client.get("/_dash-layout", headers=JSON_ACCEPT)
    assert layout.status_code == 200
    assert json.loads(layout.get_data())  # the real Dash layout
    start = client.get("/", headers=HTML)
    assert not start.headers.get("Location", "").startswith("/sign-in")


def test_cookie_is_secure_over_https(app):
    client = app.server.test_client()
    response = client.post("/sign-in", data={"key": KEY, "next": "/"}, base_url="https://ordinate.lab.example")
    assert "Secure" in [part.strip() for part in set_cookie_header(response).split(";")]


def test_key_is_compared_after_trimming_surrounding_spaces(app):
    # Pasting a key often brings a trailing newline or space with it.
    assert sign_in(app.server.test_client(), f"  {KEY}\n").status_code == 303


def test_signed_in_visitor_opening_sign_in_goes_straight_on(app):
    client = app.server.test_client()
    sign_in(client)
    response = client.get("/sign-in?next=/v/abc", headers=HTML)
    assert response.status_code == 303 and response.headers["Location"] == "/v/abc"


def test_a_saved_view_link_survives_the_trip_through_sign_in(app, private_dataset):
    _record, view = private_dataset
    client = app.server.test_client()
    first = client.get(f"/v/{view.view_id}?from=mail&x=1", headers=HTML)
    assert first.status_code == 303
    page = client.get(first.headers["Location"], headers=HTML).get_data(as_text=True)
    assert hidden_next(page) == f"/v/{view.view_id}?from=mail&amp;x=1"  # HTML-escaped in the form
    assert parse_qs(urlsplit(first.headers["Location"]).query)["next"] == [f"/v/{view.view_id}?from=mail&x=1"]
    done = sign_in(client, KEY, f"/v/{view.view_id}?from=mail&x=1")
    assert done.headers["Location"] == f"/v/{view.view_id}?from=mail&x=1"


def test_a_very_long_address_falls_back_to_its_path(app):
    # gunicorn reads request lines of at most 8190 bytes (gunicorn documentation,
    # --limit-request-line), so the sign-in address must stay below that.
    query = "&".join(f"x{i}=sample-{i}" for i in range(500))  # ~7 000 characters, ~8 500 once encoded
    assert len(f"/?{query}") < 8190
    response = app.server.test_client().get(f"/v/abcdefghijklmnop?{query}", headers=HTML)
    assert response.status_code == 303
    assert len(response.headers["Location"]) <= 8000
    assert response.headers["Location"] == "/sign-in?next=/v/abcdefghijklmnop"


@pytest.mark.parametrize("target", [
    "//evil.example", "//evil.example/path", "https://evil.example", "http:/evil.example", "/\\evil.example",
    "\\\\evil.example", "/\t/evil.example", "/\n/evil.example", "javascript:alert(1)", "evil.example",
    "", " /x", "/sign-in", "/sign-out",
])
def test_next_cannot_leave_the_site(app, target):
    assert safe_next(target) == "/"
    client = app.server.test_client()
    page = client.get("/sign-in", query_string={"next": target}, headers=HTML).get_data(as_text=True)
    assert hidden_next(page) == "/"
    response = sign_in(client, KEY, target)
    assert response.status_code == 303 and response.headers["Location"] == "/"


@pytest.mark.parametrize("target", ["/", "/v/abcDEF123_-xyz", "/?v=1&ds=abc#scores", "/export/loadings.csv?v=1"])
def test_next_keeps_ordinary_paths(target):
    assert safe_next(target) == target


def test_cross_site_sign_in_and_sign_out_are_refused(app):
    client = app.server.test_client()
    refused = client.post("/sign-in", data={"key": KEY, "next": "/"}, headers={"Sec-Fetch-Site": "cross-site"})
    assert refused.status_code == 403 and not refused.headers.getlist("Set-Cookie")
    sign_in(client)
    assert client.post("/sign-out", headers={"Sec-Fetch-Site": "cross-site"}).status_code == 403
    assert client.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 200  # still signed in


def test_sign_out_clears_the_cookie(app):
    client = app.server.test_client()
    sign_in(client)
    assert client.get("/sign-out", headers=HTML).status_code == 200  # a page with a button, not an action
    assert client.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 200
    response = client.post("/sign-out", headers={"Sec-Fetch-Site": "same-origin"})
    assert response.status_code == 303 and response.headers["Location"] == "/sign-in"
    assert client.get_cookie(COOKIE_NAME) is None
    assert client.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 401


# --- forged, tampered, expired and outdated cookies ------------------------------------------------------


@pytest.mark.filterwarnings("ignore:The 'ordinate_access' cookie is too large")
def test_forged_and_tampered_cookies_are_rejected(app, tmp_path):
    client = app.server.test_client()
    sign_in(client)
    good = client.get_cookie(COOKIE_NAME).value
    secret = (tmp_path / SECRET_FILE_NAME).read_bytes()
    fingerprint = cookie_serializer(secret).loads(good)["k"]
    payload, timestamp, signature = good.rsplit(".", 2)
    # (The last Base64 character of a signature carries unused bits, so a change there
    # can decode to the same bytes; change characters that carry only data.)
    flipped = f"{payload}.{timestamp}.{_other_char(signature[0])}{signature[1:]}"
    payload_changed = f"{_other_char(payload[0])}{payload[1:]}.{timestamp}.{signature}"
    timestamp_changed = f"{payload}.{_other_char(timestamp[0])}{timestamp[1:]}.{signature}"
    other_payload = forged_cookie(secret, {"k": "0" * 16}).split(".")[0]
    candidates = {
        "garbage": "not-a-cookie",
        "empty": "",
        "signature changed": flipped,
        "payload changed": payload_changed,
        "timestamp changed": timestamp_changed,
        "signature removed": f"{payload}.{timestamp}",
        "other payload, old signature": f"{other_payload}.{timestamp}.{signature}",
        "signed with another secret": forged_cookie(b"y" * 32, {"k": fingerprint}),
        "right secret, wrong fingerprint": forged_cookie(secret, {"k": "0" * 16}),
        "right secret, no fingerprint": forged_cookie(secret, {}),
        "right secret, not a dict": forged_cookie(secret, fingerprint),
        "expired (31 days old)": forged_cookie(secret, {"k": fingerprint}, age_seconds=31 * 86400),
        "oversized": "a" * 5000,
    }
    for name, value in candidates.items():
        fresh = app.server.test_client()
        fresh.set_cookie(COOKIE_NAME, value)
        assert fresh.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 401, name
    # Control: the same construction with the right secret and age is accepted, so the
    # rejections above are about the damage and not about the construction.
    control = app.server.test_client()
    control.set_cookie(COOKIE_NAME, forged_cookie(secret, {"k": fingerprint}, age_seconds=29 * 86400))
    assert control.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 200


def _other_char(ch: str) -> str:
    return "Q" if ch != "Q" else "R"


def test_rotating_the_key_signs_everybody_out(tmp_path):
    before = build_app(tmp_path, KEY)
    client = before.server.test_client()
    sign_in(client)
    old_cookie = client.get_cookie(COOKIE_NAME).value

    after = build_app(tmp_path, OTHER_KEY)  # restart with a new key, same data directory
    rotated = after.server.test_client()
    rotated.set_cookie(COOKIE_NAME, old_cookie)
    assert rotated.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 401
    assert sign_in(rotated, KEY).status_code == 401  # the old key no longer works
    assert sign_in(rotated, OTHER_KEY).status_code == 303
    assert rotated.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 200


# --- the shared secret ------------------------------------------------------------------------------------


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_secret_file_is_created_once_private_and_shared_by_a_second_app(tmp_path):
    first = build_app(tmp_path)
    secret_file = tmp_path / SECRET_FILE_NAME
    content = secret_file.read_bytes()
    assert len(content) == 32
    assert stat.S_IMODE(secret_file.stat().st_mode) == 0o600
    modified = secret_file.stat().st_mtime_ns

    client = first.server.test_client()
    sign_in(client)
    cookie = client.get_cookie(COOKIE_NAME).value

    second = build_app(tmp_path)  # another worker process starting on the same data directory
    assert secret_file.read_bytes() == content and secret_file.stat().st_mtime_ns == modified
    other_worker = second.server.test_client()
    other_worker.set_cookie(COOKIE_NAME, cookie)
    assert other_worker.get("/_dash-layout", headers=JSON_ACCEPT).status_code == 200


def test_workers_starting_together_agree_on_one_secret(tmp_path):
    results: list[bytes] = []
    barrier = threading.Barrier(8)

    def start_worker():
        barrier.wait()
        results.append(load_or_create_secret(tmp_path))

    threads = [threading.Thread(target=start_worker) for _ in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert len(results) == 8 and len(set(results)) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == [SECRET_FILE_NAME]  # no temporary files left


def test_damaged_secret_file_is_reported(tmp_path):
    (tmp_path / SECRET_FILE_NAME).write_bytes(b"short")
    with pytest.raises(AccessConfigError, match="delete that file"):
        load_or_create_secret(tmp_path)


def test_registering_twice_is_an_error(app, tmp_path):
    with pytest.raises(RuntimeError):
        register_access_control(app.server, access_key=KEY, secret_dir=tmp_path)


# --- headers and tokens -------------------------------------------------------------------------------


def test_security_headers_on_every_kind_of_response(app):
    client = app.server.test_client()
    responses = [client.get("/", headers=HTML), client.get("/_dash-layout"), client.get("/sign-in"),
                 sign_in(client, OTHER_KEY), sign_in(client), client.get("/_dash-layout"),
                 client.get("/assets/ordinate.css")]
    for response in responses:
        assert response.headers["X-Content-Type-Options"] == "nosniff"
        assert response.headers["Referrer-Policy"] == "same-origin"
        assert response.headers["X-Frame-Options"] == "DENY"
        assert "frame-ancestors 'none'" in response.headers["Content-Security-Policy"]


def test_headers_are_added_even_without_a_key(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path))
    if "ordinate.access" not in app.server.extensions:
        register_access_control(app.server, access_key=None, secret_dir=tmp_path)
    response = app.server.test_client().get("/_dash-layout")
    assert response.status_code == 200  # open: no key configured
    assert response.headers["Referrer-Policy"] == "same-origin"
    assert not (tmp_path / SECRET_FILE_NAME).exists()  # no secret needed without a key


def test_link_tokens_are_long_random_and_url_safe():
    tokens = [new_token() for _ in range(1000)]
    assert all(len(t) == 24 and re.fullmatch(r"[A-Za-z0-9_-]{24}", t) and TOKEN_PATTERN.match(t) for t in tokens)
    assert len(set(tokens)) == 1000
    # About 1 in 64 raw urlsafe codes starts with '-', which argparse reads as an option
    # (`ordinate report -abc...` failed): none of 1000 may (a chance of (63/64)**1000 ≈ 1e-7 to pass by luck).
    assert not any(t.startswith("-") for t in tokens)


# --- Content-Security-Policy ------------------------------------------------------------------------
# Directives and hash sources: W3C Content Security Policy Level 3 (script-src, 'sha256-...' hash
# sources are the base64 SHA-256 of the inline script's text; frame-ancestors; object-src).

INLINE_SCRIPT = re.compile(r"<script(?![^>]*\ssrc=)([^>]*)>(.*?)</script>", re.DOTALL)
# Dash's page holds an Internet Explorer warning inside an HTML comment (a conditional
# comment): current browsers never run it (HTML Living Standard, comments), so it is left out.
HTML_COMMENT = re.compile(r"<!--.*?-->", re.DOTALL)


def _directives(policy: str) -> dict[str, list[str]]:
    parts = [part.split() for part in policy.split(";") if part.strip()]
    return {part[0]: part[1:] for part in parts}


def test_dashboard_policy_allows_exactly_its_own_inline_scripts(app):
    import base64
    import hashlib

    client = app.server.test_client()
    sign_in(client)
    page = client.get("/", headers=HTML, follow_redirects=True)
    assert page.status_code == 200 and "_dash-renderer" in page.get_data(as_text=True)
    policy = _directives(page.headers["Content-Security-Policy"])
    scripts = policy["script-src"]
    assert "'self'" in scripts and "'unsafe-inline'" not in scripts
    text = HTML_COMMENT.sub("", page.get_data(as_text=True))
    executable = [body for attributes, body in INLINE_SCRIPT.findall(text)
                  if "application/json" not in attributes]
    assert len(executable) >= 2  # Dash's renderer start and the clientside callbacks
    for body in executable:
        digest = base64.b64encode(hashlib.sha256(body.encode("utf-8")).digest()).decode("ascii")
        assert f"'sha256-{digest}'" in scripts
    assert policy["default-src"] == ["'self'"] and policy["connect-src"] == ["'self'"]
    assert policy["object-src"] == ["'none'"] and policy["frame-ancestors"] == ["'none'"]
    assert policy["base-uri"] == ["'self'"] and policy["form-action"] == ["'self'"]


def test_sign_in_and_manage_pages_carry_a_policy_without_inline_script(app, services, private_dataset):
    from webapp.web.manage import manage_link

    client = app.server.test_client()
    sign_in_policy = _directives(client.get("/sign-in", headers=HTML).headers["Content-Security-Policy"])
    assert "'unsafe-inline'" not in sign_in_policy["script-src"]
    sign_in(client)
    record, _ = private_dataset
    manage = client.get(manage_link(record), headers=HTML, follow_redirects=True)
    assert manage.status_code == 200
    assert "'unsafe-inline'" not in _directives(manage.headers["Content-Security-Policy"])["script-src"]


def test_the_report_download_keeps_its_own_sandbox_policy(app, private_dataset):
    client = app.server.test_client()
    sign_in(client)
    _, view = private_dataset
    response = client.get(f"/v/{view.view_id}/report.html")
    assert response.status_code == 200
    assert response.headers["Content-Security-Policy"] == "sandbox"

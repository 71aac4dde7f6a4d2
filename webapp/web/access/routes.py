"""Who may open this server while it runs: the sign-in check, its routes, the response headers.

:func:`register_access_control` puts every request except the sign-in page
behind a signed cookie that the sign-in page hands out for the right key, and
adds security headers (a Content-Security-Policy among them) to every response.

Design notes (see also docs/deployment.md):

* The key is one shared team secret, not a per-person account. It is compared
  with :func:`hmac.compare_digest` (constant time in the length of the input).
* Cookie flags: HttpOnly (page scripts cannot read it), SameSite=Lax (browsers
  do not send it with cross-site POSTs, which is the CSRF defence for the Dash
  callbacks), Secure when the request arrived over HTTPS, 30 days.
* Wrong keys are counted per client address (:mod:`webapp.web.access.throttle`);
  an address over its budget gets ``429`` with ``Retry-After`` and its key is
  not even compared. Nothing sleeps, so guessers hold no server thread.
* ``next`` (where to go after signing in) is accepted only as a same-site
  relative path, which closes the open-redirect hole that login pages often have
  (OWASP Unvalidated Redirects and Forwards Cheat Sheet).
"""

from __future__ import annotations

import hmac
import logging
import time
from pathlib import Path
from urllib.parse import quote, urlsplit

import flask
from itsdangerous import BadSignature

from webapp.web.access.keys import (
    MAX_KEY_LENGTH,
    check_key,
    cookie_serializer,
    key_fingerprint,
    load_or_create_secret,
)
from webapp.web.access.pages import (
    CROSS_SITE_MESSAGE,
    SIGN_IN_PATH,
    SIGN_IN_REQUIRED_MESSAGE,
    SIGN_OUT_PATH,
    WRONG_KEY_MESSAGE,
    html_response,
    sign_in_page,
    sign_out_page,
    too_many_attempts_message,
)
from webapp.web.access.throttle import THROTTLE_DIR_NAME, Clock, SignInThrottle, client_address

log = logging.getLogger("ordinate.access")

__all__ = [
    "PUBLIC_PATHS",
    "COOKIE_NAME",
    "COOKIE_MAX_AGE_SECONDS",
    "SECURITY_HEADERS",
    "CONTENT_SECURITY_POLICY",
    "content_security_policy",
    "safe_next",
    "register_access_control",
    "register_security_headers",
    "register_content_security_policy",
]

# Requests that need no cookie: the sign-in page itself, signing out, and the
# one stylesheet (static, holds no data). Kept deliberately short.
PUBLIC_PATHS = frozenset({SIGN_IN_PATH, SIGN_OUT_PATH, "/assets/ordinate.css"})

COOKIE_NAME = "ordinate_access"
COOKIE_MAX_AGE_SECONDS = 30 * 24 * 3600
_MAX_COOKIE_CHARS = 4096
# Long view URLs survive the trip through sign-in, as long as the sign-in address
# that carries them (percent-encoded, so longer) stays within the request line
# gunicorn accepts (8190 bytes at most); otherwise only the path is kept.
_MAX_NEXT_CHARS = 12_000
_MAX_SIGN_IN_LOCATION_CHARS = 8000

SECURITY_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    # Dataset and view tokens live in URLs; same-origin keeps them out of the
    # Referer header sent to other sites (links in notes, for example).
    "Referrer-Policy": "same-origin",
    "X-Frame-Options": "DENY",
}

# Scripts only from this server, plus the page's own inline scripts by hash
# (Dash's renderer start and its clientside callbacks). 'unsafe-eval' is there
# because plotly.js compiles its WebGL (Scattergl) drawing code with Function();
# the dashboard switches to WebGL for large datasets. Inline styles: React and
# plotly.js set style attributes and add <style> elements at run time.
_CSP_DIRECTIVES = (
    ("default-src", "'self'"),
    ("script-src", "'self' 'unsafe-eval'"),
    ("style-src", "'self' 'unsafe-inline'"),
    ("img-src", "'self' data: blob:"),
    ("font-src", "'self' data:"),
    ("connect-src", "'self'"),
    ("worker-src", "'self' blob:"),
    ("frame-ancestors", "'none'"),
    ("base-uri", "'self'"),
    ("form-action", "'self'"),
    ("object-src", "'none'"),
)


def content_security_policy(script_hashes: tuple[str, ...] = ()) -> str:
    """The Content-Security-Policy header value, allowing the inline scripts with ``script_hashes``."""
    parts = []
    for name, value in _CSP_DIRECTIVES:
        if name == "script-src" and script_hashes:
            value = f"{value} {' '.join(script_hashes)}"
        parts.append(f"{name} {value}")
    return "; ".join(parts)


#: The policy of pages without inline scripts (sign-in, sign-out, manage pages).
CONTENT_SECURITY_POLICY = content_security_policy()


def safe_next(value: object) -> str:
    """``value`` if it is a same-site relative path (``/...``), else ``"/"``.

    Refused: absolute URLs (``https://...``), scheme-relative ``//host``, any
    backslash (browsers read ``/\\host`` as ``//host``), whitespace and control
    characters (browsers drop tabs and newlines, turning ``/\\t/host`` into
    ``//host``), and anything overly long.
    """
    if not isinstance(value, str) or not value.startswith("/") or len(value) > _MAX_NEXT_CHARS:
        return "/"
    if value.startswith("//") or "\\" in value:
        return "/"
    if any(ord(ch) <= 0x20 or ord(ch) == 0x7F for ch in value):
        return "/"
    parts = urlsplit(value)
    if parts.scheme or parts.netloc:
        return "/"
    if parts.path in (SIGN_IN_PATH, SIGN_OUT_PATH):
        return "/"
    return value


def _requested_target() -> str:
    """The path and query of the current request, as ``next`` for the sign-in page."""
    request = flask.request
    query = request.query_string.decode("latin-1")
    target = request.path + (f"?{query}" if query else "")
    return target if len(target) <= _MAX_NEXT_CHARS else request.path


def _sign_in_location(next_path: str) -> str:
    """``/sign-in?next=...``; the query of ``next`` is dropped if the address would be too long."""
    location = f"{SIGN_IN_PATH}?next={quote(next_path, safe='/')}"
    if len(location) > _MAX_SIGN_IN_LOCATION_CHARS:
        location = f"{SIGN_IN_PATH}?next={quote(safe_next(next_path.split('?', 1)[0]), safe='/')}"
    if len(location) > _MAX_SIGN_IN_LOCATION_CHARS:
        location = f"{SIGN_IN_PATH}?next=/"
    return location


def _wants_html(request: flask.Request) -> bool:
    """True when the client explicitly accepts HTML (a browser navigating), not for ``*/*``."""
    return any(value in ("text/html", "application/xhtml+xml") and quality > 0
               for value, quality in request.accept_mimetypes)


def _see_other(location: str) -> flask.Response:
    """A 303 redirect with an empty body (Flask's default body would echo the target)."""
    return _no_store(flask.Response(b"", status=303, headers={"Location": location}))


def _no_store(response: flask.Response) -> flask.Response:
    response.headers["Cache-Control"] = "no-store"
    return response


def _cross_site(request: flask.Request) -> bool:
    # Fetch Metadata (W3C): browsers say where a request comes from; old browsers
    # send nothing, and they are then covered by the SameSite cookie alone.
    return request.headers.get("Sec-Fetch-Site", "").lower() == "cross-site"


# --- registration ----------------------------------------------------------------


def register_security_headers(server: flask.Flask) -> None:
    """Add :data:`SECURITY_HEADERS` and :data:`CONTENT_SECURITY_POLICY` to every response.

    A response that sets a header itself keeps its own value (the report
    download sends ``Content-Security-Policy: sandbox``).
    """

    @server.after_request
    def _add_security_headers(response: flask.Response) -> flask.Response:
        for name, value in SECURITY_HEADERS.items():
            response.headers.setdefault(name, value)
        response.headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
        return response


def register_content_security_policy(dash_app) -> None:
    """Send the dashboard's pages a policy that allows exactly their own inline scripts.

    Call after every clientside callback is registered. Dash's
    :meth:`~dash.Dash.csp_hashes` lists the hashes of its inline scripts; they
    are read at the first request, when Dash has finished its own set-up, and
    kept for the life of the app.
    """
    policies: list[str] = []

    @dash_app.server.after_request
    def _add_dashboard_policy(response: flask.Response) -> flask.Response:
        if response.mimetype == "text/html" and "Content-Security-Policy" not in response.headers:
            if not policies:
                policies.append(content_security_policy(tuple(dash_app.csp_hashes())))
            response.headers["Content-Security-Policy"] = policies[0]
        return response


def register_access_control(server: flask.Flask, *, access_key: str | None, secret_dir: Path,
                            clock: Clock = time.time) -> None:
    """Require the team access key for every request to ``server`` (when a key is set).

    Always adds the security headers (:func:`register_security_headers`). With
    ``access_key`` set, also adds ``GET/POST /sign-in`` and ``GET/POST
    /sign-out`` and a check that runs before every other request handler
    (including the app's own ``before_request`` hooks, whichever was registered
    first):

    * requests to :data:`PUBLIC_PATHS` pass;
    * a request with a valid cookie passes;
    * a browser navigation (GET/HEAD accepting ``text/html``) is sent to the
      sign-in page with ``303 See Other`` and ``next`` set to where it was going;
    * anything else (Dash's JSON endpoints, uploads, exports) gets ``401`` and
      ``{"error": "Sign in first."}``.

    Call once per Flask app, before its first request. ``secret_dir`` holds the
    shared signing secret and the wrong-key counts (normally the data
    directory); ``clock`` is for tests.
    """
    if server.extensions.get("ordinate.access"):
        raise RuntimeError("register_access_control was already called for this server")
    server.extensions["ordinate.access"] = True
    register_security_headers(server)
    if access_key is None:
        return
    access_key = access_key.strip()
    check_key(access_key)

    secret = load_or_create_secret(secret_dir)
    serializer = cookie_serializer(secret)
    fingerprint = key_fingerprint(secret, access_key)
    expected_key = access_key.encode("utf-8")
    throttle = SignInThrottle(Path(secret_dir) / THROTTLE_DIR_NAME, clock=clock)

    def signed_in(request: flask.Request) -> bool:
        value = request.cookies.get(COOKIE_NAME)
        if not value or len(value) > _MAX_COOKIE_CHARS:
            return False
        try:
            payload = serializer.loads(value, max_age=COOKIE_MAX_AGE_SECONDS)
        except BadSignature:  # includes SignatureExpired
            return False
        return isinstance(payload, dict) and hmac.compare_digest(str(payload.get("k", "")), fingerprint)

    def require_sign_in():
        request = flask.request
        if request.path in PUBLIC_PATHS or signed_in(request):
            return None
        if request.method in ("GET", "HEAD") and _wants_html(request):
            return _see_other(_sign_in_location(safe_next(_requested_target())))
        response = flask.jsonify({"error": SIGN_IN_REQUIRED_MESSAGE})
        response.status_code = 401
        response.headers["WWW-Authenticate"] = 'Cookie realm="Ordinate"'
        return _no_store(response)

    # First in line: the start-page redirect and Dash's own hooks must not run
    # (or reveal anything, such as the demo token) for a visitor without the key.
    server.before_request_funcs.setdefault(None, []).insert(0, require_sign_in)

    def too_many_attempts(next_path: str, retry_after: int) -> flask.Response:
        response = html_response(sign_in_page(next_path, too_many_attempts_message(retry_after)), 429)
        response.headers["Retry-After"] = str(retry_after)
        return response

    def sign_in():
        request = flask.request
        if request.method == "GET":
            next_path = safe_next(request.args.get("next", "/"))
            if signed_in(request):
                return _see_other(next_path)
            return html_response(sign_in_page(next_path), 200)
        next_path = safe_next(request.form.get("next", "/"))
        if _cross_site(request):
            return html_response(sign_in_page(next_path, CROSS_SITE_MESSAGE), 403)
        address = client_address(request.remote_addr, request.headers.get("X-Forwarded-For"))
        # A blocked address is answered before its key is even looked at.
        retry_after = throttle.retry_after(address)
        if retry_after:
            return too_many_attempts(next_path, retry_after)
        offered = request.form.get("key", "").strip()[:MAX_KEY_LENGTH].encode("utf-8")
        if not hmac.compare_digest(offered, expected_key):
            log.info("failed sign-in from %s", address)
            retry_after = throttle.record_failure(address)
            if retry_after:
                log.warning("sign-in from %s blocked for %d s after repeated wrong keys",
                            address, retry_after)
                return too_many_attempts(next_path, retry_after)
            return html_response(sign_in_page(next_path, WRONG_KEY_MESSAGE), 401)
        throttle.forget(address)
        response = _see_other(next_path)
        response.set_cookie(
            COOKIE_NAME, serializer.dumps({"k": fingerprint}), max_age=COOKIE_MAX_AGE_SECONDS,
            path="/", secure=request.is_secure, httponly=True, samesite="Lax",
        )
        return response

    def sign_out():
        request = flask.request
        if request.method == "GET":
            return html_response(sign_out_page(), 200)
        if _cross_site(request):
            return html_response(sign_out_page(), 403)
        response = _see_other(SIGN_IN_PATH)
        response.delete_cookie(COOKIE_NAME, path="/", secure=request.is_secure, httponly=True, samesite="Lax")
        return response

    server.add_url_rule(SIGN_IN_PATH, endpoint="ordinate_sign_in", view_func=sign_in,
                        methods=["GET", "POST"], provide_automatic_options=False)
    server.add_url_rule(SIGN_OUT_PATH, endpoint="ordinate_sign_out", view_func=sign_out,
                        methods=["GET", "POST"], provide_automatic_options=False)

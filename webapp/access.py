"""Who may open this server: the team access key, its sign-in page and response headers.

Two parts, used at two moments:

* At start-up, :func:`access_policy` decides from the listening address whether
  an access key is needed. A loopback address (127.0.0.0/8, ``::1``,
  ``localhost``) is reachable only from the same machine, so no key is needed.
  Any other address is reachable by other people, so a key is required unless
  the operator explicitly opts out with ``--no-access-key`` (then
  :func:`warning_text` is printed). A missing or weak key raises
  :class:`AccessConfigError`, whose message says what to do.
* While serving, :func:`register_access_control` puts every request except the
  sign-in page behind a signed cookie that the sign-in page hands out for the
  right key, and adds a few security headers to every response.

Design notes (see also docs/deployment.md):

* The key is one shared team secret, not a per-person account. It is compared
  with :func:`hmac.compare_digest` (constant time in the length of the input).
* The cookie is signed with :class:`itsdangerous.URLSafeTimedSerializer` using a
  random server secret kept in ``<data dir>/session-secret`` (mode 0600), which
  every worker process reads, so a cookie issued by one worker is accepted by
  all. The cookie carries a fingerprint of the access key, an HMAC of the key
  under the server secret: changing the key signs everybody out, and a stolen
  cookie does not help anyone guess the key offline.
* Cookie flags: HttpOnly (page scripts cannot read it), SameSite=Lax (browsers
  do not send it with cross-site POSTs, which is the CSRF defence for the Dash
  callbacks), Secure when the request arrived over HTTPS, 30 days.
* A wrong key costs the client half a second (:data:`FAILED_SIGN_IN_DELAY_SECONDS`).
  With a random key of 16 or more characters guessing is hopeless anyway; real
  rate limits belong in the reverse proxy.
* ``next`` (where to go after signing in) is accepted only as a same-site
  relative path, which closes the open-redirect hole that login pages often have
  (OWASP Unvalidated Redirects and Forwards Cheat Sheet).
"""

from __future__ import annotations

import hashlib
import hmac
import html
import ipaddress
import logging
import os
import secrets
import stat
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping
from urllib.parse import quote, urlsplit

import flask
from itsdangerous import BadSignature, URLSafeTimedSerializer

__all__ = [
    "ACCESS_KEY_ENV",
    "MIN_KEY_LENGTH",
    "MAX_KEY_LENGTH",
    "GENERATE_KEY_COMMAND",
    "SIGN_IN_PATH",
    "SIGN_OUT_PATH",
    "PUBLIC_PATHS",
    "COOKIE_NAME",
    "COOKIE_MAX_AGE_SECONDS",
    "SECRET_FILE_NAME",
    "FAILED_SIGN_IN_DELAY_SECONDS",
    "SECURITY_HEADERS",
    "AccessConfigError",
    "AccessPolicy",
    "is_loopback_host",
    "access_policy",
    "warning_text",
    "resolve_access_key",
    "read_access_key_file",
    "key_file_warning",
    "safe_next",
    "load_or_create_secret",
    "cookie_serializer",
    "register_access_control",
    "register_security_headers",
]

ACCESS_KEY_ENV = "ORDINATE_ACCESS_KEY"
MIN_KEY_LENGTH = 16
MAX_KEY_LENGTH = 1024
GENERATE_KEY_COMMAND = 'python -c "import secrets; print(secrets.token_urlsafe(24))"'

SIGN_IN_PATH = "/sign-in"
SIGN_OUT_PATH = "/sign-out"
# Requests that need no cookie: the sign-in page itself, signing out, and the
# one stylesheet (static, holds no data). Kept deliberately short.
PUBLIC_PATHS = frozenset({SIGN_IN_PATH, SIGN_OUT_PATH, "/assets/ordinate.css"})

COOKIE_NAME = "ordinate_access"
COOKIE_MAX_AGE_SECONDS = 30 * 24 * 3600
SECRET_FILE_NAME = "session-secret"
SECRET_BYTES = 32
FAILED_SIGN_IN_DELAY_SECONDS = 0.5
_COOKIE_SALT = "ordinate-access-cookie"
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
    "X-Frame-Options": "SAMEORIGIN",
}

SIGN_IN_REQUIRED_MESSAGE = "Sign in first."
WRONG_KEY_MESSAGE = "That key is not right."
CROSS_SITE_MESSAGE = "This form can only be sent from the Ordinate page itself."

log = logging.getLogger("ordinate.access")
_pause = time.sleep  # the failed-sign-in delay; a seam so tests need not wait


class AccessConfigError(ValueError):
    """The access settings cannot be used; the message tells the operator what to change."""


# --- start-up: the policy ------------------------------------------------------


@dataclass(frozen=True)
class AccessPolicy:
    """What :func:`access_policy` decided for one server.

    ``access_key`` is the key to require (``None``: no key). ``open_access`` is
    true only when a non-loopback address is served without a key because the
    operator asked for that; :attr:`warning` is then the text to print.
    """

    host: str
    loopback: bool
    access_key: str | None = field(repr=False)
    open_access: bool

    @property
    def requires_key(self) -> bool:
        return self.access_key is not None

    @property
    def warning(self) -> str | None:
        return warning_text(self.host) if self.open_access else None


def is_loopback_host(host: str) -> bool:
    """True for addresses only this machine can reach: 127.0.0.0/8, ``::1``, ``localhost``.

    Anything else, including ``0.0.0.0``, ``::``, an empty host and every other
    host name, counts as reachable from the network. Host names are not
    resolved: a name that happens to point at 127.0.0.1 today is still treated
    as a network address (the cautious reading).
    """
    name = str(host or "").strip().lower()
    if name.startswith("[") and name.endswith("]"):
        name = name[1:-1]
    if name in ("localhost", "localhost."):
        return True
    try:
        address = ipaddress.ip_address(name)
    except ValueError:
        return False
    mapped = getattr(address, "ipv4_mapped", None)
    return bool(address.is_loopback or (mapped is not None and mapped.is_loopback))


def access_policy(host: str, access_key: str | None, open_access: bool) -> AccessPolicy:
    """Decide at start-up whether this server requires the team access key.

    Parameters
    ----------
    host : str
        The address the server listens on (``--host``).
    access_key : str or None
        The resolved key (see :func:`resolve_access_key`); surrounding
        whitespace is ignored.
    open_access : bool
        The operator's explicit ``--no-access-key``.

    Raises
    ------
    AccessConfigError
        A non-loopback host without a key and without ``--no-access-key``; a key
        together with ``--no-access-key``; a key that is too short or too long or
        contains control characters.
    """
    key = access_key.strip() if isinstance(access_key, str) else None
    loopback = is_loopback_host(host)
    if key is not None and open_access:
        raise AccessConfigError(
            f"--no-access-key was given, but an access key is also set ({ACCESS_KEY_ENV} or "
            "--access-key-file). Remove one of them."
        )
    if key is not None:
        _check_key(key)
        return AccessPolicy(host, loopback, key, False)
    if loopback:
        return AccessPolicy(host, loopback, None, False)
    if open_access:
        return AccessPolicy(host, loopback, None, True)
    raise AccessConfigError(
        f"Ordinate would be reachable from the network at {host}, so it needs a team access key. "
        f"Set the environment variable {ACCESS_KEY_ENV}, or pass --access-key-file FILE "
        f"(make one with: {GENERATE_KEY_COMMAND}); or serve on 127.0.0.1; or, on a network you trust "
        "completely, pass --no-access-key."
    )


def warning_text(host: str | None = None) -> str:
    """The warning to print when a network address is served without an access key."""
    where = f"on {host} " if host else ""
    return (
        f"WARNING: Ordinate is serving {where}WITHOUT an access key (--no-access-key). "
        "Anyone who can reach this address can upload files and open every dataset and saved view "
        "whose link they have. Use this only on a network you trust completely; otherwise set "
        f"{ACCESS_KEY_ENV} or pass --access-key-file."
    )


def _check_key(key: str) -> None:
    if len(key) < MIN_KEY_LENGTH:
        raise AccessConfigError(
            f"The access key is {len(key)} characters long; use at least {MIN_KEY_LENGTH}. "
            f"Make a good one with: {GENERATE_KEY_COMMAND}"
        )
    if len(key) > MAX_KEY_LENGTH:
        raise AccessConfigError(f"The access key is longer than {MAX_KEY_LENGTH} characters; use a shorter one.")
    if any(not ch.isprintable() for ch in key):
        raise AccessConfigError(
            "The access key contains a line break or another control character; "
            "put the key on one line by itself."
        )


def resolve_access_key(key_file: str | os.PathLike | None = None,
                       environ: Mapping[str, str] | None = None) -> str | None:
    """The access key from ``--access-key-file`` if given, else from :data:`ACCESS_KEY_ENV`.

    The command-line file wins over the environment. An empty or unset
    environment variable means "no key". The key is not validated here; pass it
    to :func:`access_policy`.
    """
    if key_file is not None:
        return read_access_key_file(key_file)
    environ = os.environ if environ is None else environ
    value = environ.get(ACCESS_KEY_ENV, "").strip()
    return value or None


def read_access_key_file(path: str | os.PathLike) -> str:
    """Read a key file: the whole file, surrounding whitespace removed.

    Raises :class:`AccessConfigError` when the file cannot be read or is empty.
    A file readable by other users is accepted; see :func:`key_file_warning`.
    """
    try:
        key = Path(path).read_text(encoding="utf-8").strip()
    except FileNotFoundError:
        raise AccessConfigError(f"The access key file {path} does not exist.") from None
    except (OSError, UnicodeDecodeError) as error:
        reason = getattr(error, "strerror", None) or str(error)
        raise AccessConfigError(f"The access key file {path} cannot be read ({reason}).") from None
    if not key:
        raise AccessConfigError(
            f"The access key file {path} is empty. Put the key in it, for example: "
            f"{GENERATE_KEY_COMMAND} > {path}"
        )
    return key


def key_file_warning(path: str | os.PathLike) -> str | None:
    """A warning when the key file can be read by its group or by other users, else None.

    Only a warning: on some systems (containers, shared service accounts) this
    is deliberate. On Windows the POSIX mode bits say nothing, so no warning.
    """
    if os.name != "posix":
        return None
    try:
        mode = Path(path).stat().st_mode
    except OSError:
        return None
    if mode & (stat.S_IRWXG | stat.S_IRWXO):
        return (
            f"Warning: the access key file {path} can be read by other users "
            f"(mode {stat.S_IMODE(mode):o}). Consider: chmod 600 {path}"
        )
    return None


# --- serving: the shared secret ------------------------------------------------


def load_or_create_secret(secret_dir: str | os.PathLike) -> bytes:
    """The server's cookie-signing secret, created on first start.

    The file ``secret_dir / "session-secret"`` holds 32 random bytes
    (:func:`secrets.token_bytes`), mode 0600. Several workers may start at the
    same moment: each writes a complete candidate to a private temporary file and
    tries to hard-link it to the final name; ``link`` fails if the name exists,
    so exactly one candidate wins and nobody can ever read a half-written file.
    Everybody then reads the winner. Deleting the file (and restarting) signs
    everybody out.
    """
    directory = Path(secret_dir)
    directory.mkdir(parents=True, exist_ok=True)
    target = directory / SECRET_FILE_NAME
    if not target.exists():
        # mkstemp creates the file with mode 0600; the hard link keeps that mode.
        fd, temp_name = tempfile.mkstemp(dir=directory, prefix=".session-secret-", suffix=".part")
        try:
            with os.fdopen(fd, "wb") as handle:
                handle.write(secrets.token_bytes(SECRET_BYTES))
                handle.flush()
                os.fsync(handle.fileno())
            try:
                os.link(temp_name, target)
            except FileExistsError:
                pass  # another worker won the race; use its secret
            except OSError:
                # No hard links on this file system: fall back to an exclusive create.
                _create_exclusive(target, Path(temp_name).read_bytes())
        finally:
            os.unlink(temp_name)
    secret = _read_secret(target)
    if len(secret) != SECRET_BYTES:
        raise AccessConfigError(
            f"The session secret {target} is damaged ({len(secret)} bytes instead of {SECRET_BYTES}). "
            "Stop the server, delete that file and start again (everyone signs in again)."
        )
    if os.name == "posix" and stat.S_IMODE(target.stat().st_mode) & 0o077:
        log.warning("the session secret %s can be read by other users; run: chmod 600 %s", target, target)
    return secret


# --- serving: next, cookie, pages -----------------------------------------------


def _create_exclusive(target: Path, data: bytes) -> None:
    try:
        fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:
        return
    with os.fdopen(fd, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())


def _read_secret(target: Path, attempts: int = 20) -> bytes:
    # Only the exclusive-create fallback can expose a file still being written;
    # give its writer a moment before calling it damaged.
    for _ in range(attempts):
        secret = target.read_bytes()
        if len(secret) == SECRET_BYTES:
            return secret
        time.sleep(0.05)
    return secret


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


def cookie_serializer(secret: bytes) -> URLSafeTimedSerializer:
    """The signer of the access cookie: HMAC-SHA256 under the server secret, with a timestamp."""
    return URLSafeTimedSerializer(secret, salt=_COOKIE_SALT, signer_kwargs={"digest_method": hashlib.sha256})


def _key_fingerprint(secret: bytes, access_key: str) -> str:
    """A short HMAC of the key under the server secret: identifies the key, reveals nothing."""
    return hmac.new(secret, access_key.encode("utf-8"), hashlib.sha256).hexdigest()[:16]


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


_PAGE_STYLE = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; min-height: 100vh; display: grid; place-items: center; background: #f5f6f8; color: #1d2433;
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { width: min(380px, calc(100vw - 32px)); background: #fff; border: 1px solid #dde1e8; border-radius: 8px;
       padding: 26px 28px 22px; box-shadow: 0 6px 20px rgba(29, 36, 51, 0.08); }
.wordmark { margin: 0 0 14px; font-weight: 700; font-size: 1.2rem; letter-spacing: 0.04em; color: #0f5c8c; }
h1 { margin: 0 0 16px; font-size: 1.05rem; font-weight: 600; }
label { display: block; font-weight: 600; margin-bottom: 6px; }
input[type=password] { width: 100%; padding: 8px 10px; border: 1px solid #b8c1cf; border-radius: 6px; font: inherit; }
button { margin-top: 14px; width: 100%; padding: 9px 12px; border: 0; border-radius: 6px; background: #0f5c8c;
         color: #fff; font: inherit; font-weight: 600; cursor: pointer; }
button:hover { background: #0b4a72; }
:focus-visible { outline: 3px solid #f0b400; outline-offset: 2px; }
.problem { margin: 0 0 14px; padding: 8px 10px; border-radius: 6px; background: #fdecee; color: #a3222b;
           font-weight: 600; }
.hint { margin: 14px 0 0; color: #4a5366; font-size: 0.9rem; }
"""


def _page(title: str, body: str) -> str:
    return (
        "<!doctype html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        "<meta name=\"robots\" content=\"noindex\">"
        f"<title>{html.escape(title)}</title><style>{_PAGE_STYLE}</style></head>"
        f"<body><main>{body}</main></body></html>\n"
    )


def _sign_in_page(next_path: str, problem: str | None = None) -> str:
    problem_html = f'<p class="problem" role="alert">{html.escape(problem)}</p>' if problem else ""
    return _page("Ordinate \u2014 sign in", (
        '<p class="wordmark">Ordinate</p><h1>Sign in</h1>'
        f"{problem_html}"
        f'<form method="post" action="{SIGN_IN_PATH}">'
        f'<input type="hidden" name="next" value="{html.escape(next_path, quote=True)}">'
        '<label for="access-key">Team access key</label>'
        '<input id="access-key" name="key" type="password" autocomplete="current-password" required autofocus>'
        '<button type="submit">Sign in</button></form>'
        '<p class="hint">Ask the person who runs this Ordinate server for the key.</p>'
    ))


def _sign_out_page() -> str:
    return _page("Ordinate \u2014 sign out", (
        '<p class="wordmark">Ordinate</p><h1>Sign out of Ordinate in this browser?</h1>'
        f'<form method="post" action="{SIGN_OUT_PATH}"><button type="submit">Sign out</button></form>'
        '<p class="hint">You will need the team access key to come back.</p>'
    ))


def _html_response(text: str, status: int) -> flask.Response:
    return _no_store(flask.Response(text, status=status, mimetype="text/html"))


# --- serving: registration -------------------------------------------------------


def register_security_headers(server: flask.Flask) -> None:
    """Add :data:`SECURITY_HEADERS` to every response that does not set them itself.

    No Content-Security-Policy: the Dash renderer starts from inline scripts and
    Plotly's WebGL traces compile shaders at run time, so a strict policy breaks
    the dashboard; see docs/deployment.md.
    """

    @server.after_request
    def _add_security_headers(response: flask.Response) -> flask.Response:
        for name, value in SECURITY_HEADERS.items():
            response.headers.setdefault(name, value)
        return response


def register_access_control(server: flask.Flask, *, access_key: str | None, secret_dir: Path) -> None:
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
    shared signing secret (normally the data directory).
    """
    if server.extensions.get("ordinate.access"):
        raise RuntimeError("register_access_control was already called for this server")
    server.extensions["ordinate.access"] = True
    register_security_headers(server)
    if access_key is None:
        return
    access_key = access_key.strip()
    _check_key(access_key)

    secret = load_or_create_secret(secret_dir)
    serializer = cookie_serializer(secret)
    fingerprint = _key_fingerprint(secret, access_key)
    expected_key = access_key.encode("utf-8")

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

    def sign_in():
        request = flask.request
        if request.method == "GET":
            next_path = safe_next(request.args.get("next", "/"))
            if signed_in(request):
                return _see_other(next_path)
            return _html_response(_sign_in_page(next_path), 200)
        next_path = safe_next(request.form.get("next", "/"))
        if _cross_site(request):
            return _html_response(_sign_in_page(next_path, CROSS_SITE_MESSAGE), 403)
        offered = request.form.get("key", "").strip()[:MAX_KEY_LENGTH].encode("utf-8")
        if not hmac.compare_digest(offered, expected_key):
            _pause(FAILED_SIGN_IN_DELAY_SECONDS)
            log.info("failed sign-in from %s", request.remote_addr)
            return _html_response(_sign_in_page(next_path, WRONG_KEY_MESSAGE), 401)
        response = _see_other(next_path)
        response.set_cookie(
            COOKIE_NAME, serializer.dumps({"k": fingerprint}), max_age=COOKIE_MAX_AGE_SECONDS,
            path="/", secure=request.is_secure, httponly=True, samesite="Lax",
        )
        return response

    def sign_out():
        request = flask.request
        if request.method == "GET":
            return _html_response(_sign_out_page(), 200)
        if _cross_site(request):
            return _html_response(_sign_out_page(), 403)
        response = _see_other(SIGN_IN_PATH)
        response.delete_cookie(COOKIE_NAME, path="/", secure=request.is_secure, httponly=True, samesite="Lax")
        return response

    server.add_url_rule(SIGN_IN_PATH, endpoint="ordinate_sign_in", view_func=sign_in,
                        methods=["GET", "POST"], provide_automatic_options=False)
    server.add_url_rule(SIGN_OUT_PATH, endpoint="ordinate_sign_out", view_func=sign_out,
                        methods=["GET", "POST"], provide_automatic_options=False)

"""Who may open this server: the team access key, its sign-in page and response headers.

Split by job:

* :mod:`webapp.web.access.keys`: the start-up policy, key files, the server secret
  and cookie signing;
* :mod:`webapp.web.access.throttle`: the budget of wrong keys per client address;
* :mod:`webapp.web.access.pages`: the sign-in and sign-out pages;
* :mod:`webapp.web.access.routes`: the sign-in check before every request, its
  routes and the security headers (Content-Security-Policy included).

Every public name is importable from ``webapp.web.access`` as before.
"""

from webapp.web.access.keys import (
    ACCESS_KEY_ENV,
    GENERATE_KEY_COMMAND,
    MAX_KEY_LENGTH,
    MIN_KEY_LENGTH,
    SECRET_FILE_NAME,
    AccessConfigError,
    AccessPolicy,
    access_policy,
    check_key,
    cookie_serializer,
    is_loopback_host,
    key_file_warning,
    key_fingerprint,
    load_or_create_secret,
    read_access_key_file,
    resolve_access_key,
    warning_text,
)
from webapp.web.access.pages import SIGN_IN_PATH, SIGN_OUT_PATH
from webapp.web.access.routes import (
    CONTENT_SECURITY_POLICY,
    COOKIE_MAX_AGE_SECONDS,
    COOKIE_NAME,
    PUBLIC_PATHS,
    SECURITY_HEADERS,
    content_security_policy,
    register_access_control,
    register_content_security_policy,
    register_security_headers,
    safe_next,
)
from webapp.web.access.throttle import FAILURE_BUDGET, SignInThrottle

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
    "SECURITY_HEADERS",
    "CONTENT_SECURITY_POLICY",
    "FAILURE_BUDGET",
    "AccessConfigError",
    "AccessPolicy",
    "SignInThrottle",
    "is_loopback_host",
    "access_policy",
    "check_key",
    "warning_text",
    "resolve_access_key",
    "read_access_key_file",
    "key_file_warning",
    "safe_next",
    "load_or_create_secret",
    "cookie_serializer",
    "key_fingerprint",
    "content_security_policy",
    "register_access_control",
    "register_content_security_policy",
    "register_security_headers",
]

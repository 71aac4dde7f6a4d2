"""The sign-in and sign-out pages of the team access key, and their addresses and messages.

Plain server-rendered HTML with no script at all, so they work under the
strictest Content-Security-Policy; user-controlled text (``next``) is escaped.
"""

from __future__ import annotations

import html
import math

import flask

__all__ = [
    "SIGN_IN_PATH",
    "SIGN_OUT_PATH",
    "SIGN_IN_REQUIRED_MESSAGE",
    "WRONG_KEY_MESSAGE",
    "CROSS_SITE_MESSAGE",
    "too_many_attempts_message",
    "page",
    "sign_in_page",
    "sign_out_page",
    "html_response",
]

SIGN_IN_PATH = "/sign-in"
SIGN_OUT_PATH = "/sign-out"

SIGN_IN_REQUIRED_MESSAGE = "Sign in first."
WRONG_KEY_MESSAGE = "That key is not right."
CROSS_SITE_MESSAGE = "This form can only be sent from the Ordinate page itself."


def too_many_attempts_message(retry_after_seconds: int) -> str:
    """What a blocked address is told: what happened, how long to wait, whom to ask."""
    if retry_after_seconds < 90:
        wait = f"{max(1, retry_after_seconds)} seconds"
    else:
        minutes = math.ceil(retry_after_seconds / 60)
        wait = f"{minutes} minutes"
    return (f"Too many wrong keys were tried from this network address. Wait {wait}, then try again. "
            "If you do not have the key, ask the person who runs this Ordinate server.")


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


def page(title: str, body: str) -> str:
    return (
        "<!doctype html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        "<meta name=\"robots\" content=\"noindex\">"
        f"<title>{html.escape(title)}</title><style>{_PAGE_STYLE}</style></head>"
        f"<body><main>{body}</main></body></html>\n"
    )


def sign_in_page(next_path: str, problem: str | None = None) -> str:
    problem_html = f'<p class="problem" role="alert">{html.escape(problem)}</p>' if problem else ""
    return page("Ordinate \u2014 sign in", (
        '<p class="wordmark">Ordinate</p><h1>Sign in</h1>'
        f"{problem_html}"
        f'<form method="post" action="{SIGN_IN_PATH}">'
        f'<input type="hidden" name="next" value="{html.escape(next_path, quote=True)}">'
        '<label for="access-key">Team access key</label>'
        '<input id="access-key" name="key" type="password" autocomplete="current-password" required autofocus>'
        '<button type="submit">Sign in</button></form>'
        '<p class="hint">Ask the person who runs this Ordinate server for the key.</p>'
    ))


def sign_out_page() -> str:
    return page("Ordinate \u2014 sign out", (
        '<p class="wordmark">Ordinate</p><h1>Sign out of Ordinate in this browser?</h1>'
        f'<form method="post" action="{SIGN_OUT_PATH}"><button type="submit">Sign out</button></form>'
        '<p class="hint">You will need the team access key to come back.</p>'
    ))


def html_response(text: str, status: int) -> flask.Response:
    response = flask.Response(text, status=status, mimetype="text/html")
    response.headers["Cache-Control"] = "no-store"
    return response

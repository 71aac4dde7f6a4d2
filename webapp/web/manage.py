"""The uploader's private page for one dataset: details, saved views, rename, delete.

Every dataset has two secrets (see :mod:`webapp.store.storage`): its ``token``, which
opens the analysis and goes into every shared link, and its ``manage_key``,
which only the uploader receives, in the link :func:`manage_link` builds::

    GET  /manage/<token>?key=<manage_key>      first visit: key exchanged for a cookie, 303 to
    GET  /manage/<token>                       the page (the key comes from the cookie)
    POST /manage/<token>/rename                form fields: key, title
    POST /manage/<token>/delete                form fields: key, confirm=yes

Rules:

* The key is checked with :meth:`DataStore.check_manage_key` (constant-time
  comparison) on every request. A wrong or missing key, an unknown or malformed
  token and any other path under ``/manage/`` all get the same plain 404 page,
  so nobody can learn whether a dataset exists. The dataset token and view ids
  are different secrets and never work as the key.
* The key appears in an address once: the first visit stores it in a cookie
  scoped to that dataset's page (``Path=/manage/<token>``, ``HttpOnly``,
  ``SameSite=Lax``, ``Secure`` over HTTPS, gone when the browser closes) and
  redirects to the key-free address, and every later address (after a rename
  too) is key-free. So the key does not pile up in browser history and proxy
  logs. ``Lax`` still sends the cookie when the link is followed from a mail
  or chat (a top-level GET from another site), never with another site's POST.
* Cross-site request forgery: the two POST routes read the key from the form
  body only, never from the cookie. A page on another site cannot know the
  key, so it cannot forge a rename or delete (the secret plays the part of a
  CSRF token; OWASP CSRF Prevention Cheat Sheet, "synchronizer token pattern").
* The page is sent with ``Cache-Control: no-store`` and ``Referrer-Policy:
  no-referrer`` (its forms hold the key), and it is marked ``noindex``.
* User text (names, file names, view titles, authors) is HTML-escaped; no file
  path is ever built from the request: tokens are validated by the store.
"""

from __future__ import annotations

import html
import logging
import time
from typing import Callable
from urllib.parse import quote

import flask

from webapp.store.storage import DataStore, DatasetRecord, SavedView, is_token

__all__ = ["MANAGE_PREFIX", "manage_link", "register_manage_routes"]

MANAGE_PREFIX = "/manage"
KEY_COOKIE = "ordinate_manage_key"
_MAX_KEY_CHARS = 128
_MAX_TITLE_CHARS = 1000  # the store keeps 200; this bounds what is even looked at

CONFIRM_LABEL = "I understand this cannot be undone"
NOT_FOUND_TEXT = (
    "This manager link does not work. It may be mistyped or incomplete, or the dataset "
    "may have been deleted. Use the complete link you received after uploading."
)
CONFIRM_MISSING_TEXT = f"Nothing was deleted: tick \u201c{CONFIRM_LABEL}\u201d first."
RENAMED_TEXT = "The new name is saved."

log = logging.getLogger("ordinate.manage")

OnDelete = Callable[[DatasetRecord], None]


def manage_link(record: DatasetRecord) -> str:
    """The private manager link (relative URL) for ``record``; show it to the uploader only."""
    return f"{MANAGE_PREFIX}/{quote(record.token, safe='')}?key={quote(record.manage_key, safe='')}"


def register_manage_routes(server: flask.Flask, store: DataStore, *, on_delete: OnDelete | None = None) -> None:
    """Add the management page and its two forms to ``server``.

    Parameters
    ----------
    server : flask.Flask
        The Flask app (``dash_app.server``).
    store : DataStore
        Where the datasets and their saved views live.
    on_delete : callable, optional
        Called as ``on_delete(record)`` after a dataset and its views are
        deleted, for example to purge cached results computed from it. Other
        datasets may hold identical bytes (same ``content_hash``); then the
        blob file is still there (``store.blob_path(record).exists()``) and
        results keyed by that hash are still in use. An exception in the hook is
        logged and does not undo the deletion.

    Notes
    -----
    The routes own the whole ``/manage/`` namespace (a catch-all path), so that
    malformed addresses such as ``/manage/../../etc`` get the same 404 page
    instead of falling through to Dash's page route.
    """

    def dispatch(rest: str = ""):
        request = flask.request
        parts = rest.split("/")
        token = parts[0]
        if not is_token(token):
            return _not_found()
        if len(parts) == 1 and request.method in ("GET", "HEAD"):
            if "key" in request.args:  # the link as received: keep the key, drop it from the address
                key = request.args.get("key", "")
                if not _key_ok(store, token, key):
                    return _not_found()
                return _with_key_cookie(flask.redirect(_page_address(token), code=303), token, key)
            key = request.cookies.get(KEY_COOKIE, "")
            if not _key_ok(store, token, key):
                return _not_found()
            notice = RENAMED_TEXT if request.args.get("saved") == "name" else None
            return _manage_page(store, token, key, notice=notice)
        if len(parts) == 2 and request.method == "POST" and parts[1] in ("rename", "delete"):
            key = request.form.get("key", "")
            if not _key_ok(store, token, key):
                return _not_found()
            if parts[1] == "rename":
                return _rename(store, token, key)
            return _delete(store, token, key, on_delete)
        return _not_found()

    server.add_url_rule(f"{MANAGE_PREFIX}/<path:rest>", endpoint="ordinate_manage", view_func=dispatch,
                        methods=["GET", "POST"], provide_automatic_options=False)
    server.add_url_rule(MANAGE_PREFIX, endpoint="ordinate_manage_root", view_func=dispatch,
                        methods=["GET", "POST"], provide_automatic_options=False, strict_slashes=False)


def _page_address(token: str, query: str = "") -> str:
    return f"{MANAGE_PREFIX}/{quote(token, safe='')}" + (f"?{query}" if query else "")


def _with_key_cookie(response: flask.Response, token: str, key: str) -> flask.Response:
    response.set_cookie(KEY_COOKIE, key, path=_page_address(token), httponly=True, samesite="Lax",
                        secure=flask.request.is_secure)
    return _private(response)


def _key_ok(store: DataStore, token: str, key: object) -> bool:
    return isinstance(key, str) and 0 < len(key) <= _MAX_KEY_CHARS and store.check_manage_key(token, key)


def _rename(store: DataStore, token: str, key: str) -> flask.Response:
    title = flask.request.form.get("title", "")[:_MAX_TITLE_CHARS]
    if store.rename_dataset(token, title) is None:
        return _not_found()
    # The cookie again: the page may have been opened before this browser had it (a kept tab).
    return _with_key_cookie(flask.redirect(_page_address(token, "saved=name"), code=303), token, key)


def _delete(store: DataStore, token: str, key: str, on_delete: OnDelete | None) -> flask.Response:
    if flask.request.form.get("confirm") != "yes":
        return _manage_page(store, token, key, problem=CONFIRM_MISSING_TEXT, status=400)
    record = store.dataset(token)
    views = store.views_for_dataset(token)
    if record is None or not store.delete_dataset(token):
        return _not_found()
    log.info("dataset %s deleted with %d saved view(s)", record.content_hash[:12], len(views))
    if on_delete is not None:
        try:
            on_delete(record)
        except Exception:
            log.exception("the on_delete hook failed for a deleted dataset")
    bytes_kept = store.blob_path(record).exists()
    return _gone_page(record, len(views), bytes_kept=bytes_kept, cache_purged=on_delete is not None)


# --- pages -------------------------------------------------------------------------


def _private(response: flask.Response) -> flask.Response:
    response.headers["Cache-Control"] = "no-store"
    response.headers["Referrer-Policy"] = "no-referrer"
    response.headers["X-Robots-Tag"] = "noindex"
    return response


def _html(text: str, status: int = 200) -> flask.Response:
    return _private(flask.Response(text, status=status, mimetype="text/html"))


def _not_found() -> flask.Response:
    return _html(_page("Ordinate \u2014 link not found", "<h1>Link not found</h1>"
                       f"<p>{html.escape(NOT_FOUND_TEXT)}</p>"), 404)


def _e(value: object) -> str:
    return html.escape(str(value), quote=True)


def _when(timestamp: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime(timestamp))


def _size(size_bytes: int) -> str:
    # 1 MB = 1024 * 1024 bytes, as in webapp.web.upload
    if size_bytes < 1024:
        return f"{size_bytes} bytes"
    for unit, factor in (("GB", 1024**3), ("MB", 1024**2), ("KB", 1024)):
        if size_bytes >= factor:
            return f"{size_bytes / factor:.1f} {unit} ({size_bytes:,} bytes)"
    return f"{size_bytes} bytes"


def _views_html(views: list[SavedView]) -> str:
    if not views:
        return "<p class=\"quiet\">No saved views yet.</p>"
    items = []
    for view in views:
        byline = f" by {_e(view.author)}" if view.author else ""
        items.append(
            f'<li><a href="/v/{_e(quote(view.view_id, safe=""))}" rel="noreferrer">{_e(view.title)}</a>'
            f'<span class="quiet">{byline}, {_e(_when(view.created))}</span></li>'
        )
    return f"<ul class=\"views\">{''.join(items)}</ul>"


def _manage_page(store: DataStore, token: str, key: str, *, notice: str | None = None,
                 problem: str | None = None, status: int = 200) -> flask.Response:
    record = store.dataset(token)
    if record is None:
        return _not_found()
    views = store.views_for_dataset(token)
    action = f"{MANAGE_PREFIX}/{_e(quote(token, safe=''))}"
    hidden_key = f'<input type="hidden" name="key" value="{_e(key)}">'
    messages = ""
    if notice:
        messages += f'<p class="notice" role="status">{_e(notice)}</p>'
    if problem:
        messages += f'<p class="problem" role="alert">{_e(problem)}</p>'
    body = f"""
<p class="wordmark">Ordinate</p>
<h1>Manager page of \u201c{_e(record.display_name)}\u201d</h1>
<p class="private">This manager page is private: anyone with its link can rename or delete this dataset.
Share view links and short links, never this one.</p>
{messages}
<section><h2>Dataset</h2>
<table>
<tr><th scope="row">Name</th><td>{_e(record.display_name)}</td></tr>
<tr><th scope="row">File</th><td>{_e(record.filename)}</td></tr>
<tr><th scope="row">Size</th><td>{_e(_size(record.size_bytes))}</td></tr>
<tr><th scope="row">Uploaded</th><td>{_e(_when(record.created))}</td></tr>
<tr><th scope="row">Fingerprint (SHA-256 of the file)</th><td><code>{_e(record.content_hash)}</code></td></tr>
</table></section>
<section><h2>Saved views ({len(views)})</h2>{_views_html(views)}</section>
<section><h2>Rename</h2>
<form method="post" action="{action}/rename">{hidden_key}
<label for="title">New name (empty: use the file name)</label>
<input id="title" name="title" type="text" maxlength="200" value="{_e(record.title)}">
<button type="submit">Save name</button></form></section>
<section class="danger"><h2>Delete</h2>
<p>Deletes the uploaded file and all {len(views)} saved view(s) of it. Every link to this dataset
and to its views stops working.</p>
<form method="post" action="{action}/delete">{hidden_key}
<label class="check"><input type="checkbox" name="confirm" value="yes" required> {_e(CONFIRM_LABEL)}</label>
<button type="submit" class="delete">Delete this dataset</button></form></section>
"""
    return _html(_page(f"Ordinate \u2014 manager page of {record.display_name}", body), status)


def _gone_page(record: DatasetRecord, view_count: int, *, bytes_kept: bool, cache_purged: bool) -> flask.Response:
    lines = [
        f"\u201c{_e(record.display_name)}\u201d and its {view_count} saved view(s) are deleted.",
        "Links to the dataset and to its saved views no longer open.",
    ]
    if bytes_kept:
        lines.append("The same file was uploaded separately as another dataset, so those bytes stay on the "
                     "server until that dataset is deleted too.")
    else:
        lines.append("The uploaded file is removed from the server.")
    if cache_purged:
        lines.append("Results computed from it were removed from the server's cache.")
    else:
        lines.append("Results computed from it stay in the server's cache until the cache needs the space.")
    lines.append("Copies that people exported or downloaded are not affected.")
    body = '<p class="wordmark">Ordinate</p><h1>Dataset deleted</h1>' + "".join(f"<p>{line}</p>" for line in lines)
    return _html(_page("Ordinate \u2014 dataset deleted", body))


_STYLE = """
* { box-sizing: border-box; }
body { margin: 0; background: #f5f6f8; color: #1d2433;
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 720px; margin: 32px auto; background: #fff; border: 1px solid #dde1e8; border-radius: 8px;
       padding: 24px 28px; }
.wordmark { margin: 0 0 10px; font-weight: 700; font-size: 1.2rem; letter-spacing: 0.04em; color: #0f5c8c; }
h1 { margin: 0 0 10px; font-size: 1.25rem; font-weight: 600; overflow-wrap: anywhere; }
h2 { margin: 0 0 8px; font-size: 1.05rem; font-weight: 600; }
section { margin-top: 22px; padding-top: 16px; border-top: 1px solid #dde1e8; }
table { border-collapse: collapse; }
th { text-align: left; font-weight: 500; color: #4a5366; padding: 3px 16px 3px 0; vertical-align: top; }
td { overflow-wrap: anywhere; }
code { font: 0.85rem ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; }
label { display: block; font-weight: 600; margin-bottom: 6px; }
label.check { font-weight: 500; margin: 10px 0; }
input[type=text] { width: 100%; padding: 7px 10px; border: 1px solid #b8c1cf; border-radius: 6px; font: inherit; }
button { margin-top: 10px; padding: 8px 14px; border: 0; border-radius: 6px; background: #0f5c8c; color: #fff;
         font: inherit; font-weight: 600; cursor: pointer; }
button.delete { background: #a3222b; }
:focus-visible { outline: 3px solid #f0b400; outline-offset: 2px; }
.views { padding-left: 18px; }
.views li { margin: 4px 0; overflow-wrap: anywhere; }
.quiet { color: #4a5366; }
.views .quiet { margin-left: 6px; }
.private { padding: 8px 10px; border-radius: 6px; background: #fff6e0; color: #8a5a00; }
.notice { padding: 8px 10px; border-radius: 6px; background: #e3eef6; color: #0f5c8c; font-weight: 600; }
.problem { padding: 8px 10px; border-radius: 6px; background: #fdecee; color: #a3222b; font-weight: 600; }
.danger h2 { color: #a3222b; }
"""


def _page(title: str, body: str) -> str:
    return (
        "<!doctype html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        "<meta name=\"robots\" content=\"noindex\"><meta name=\"referrer\" content=\"no-referrer\">"
        f"<title>{_e(title)}</title><style>{_STYLE}</style></head><body><main>{body}</main></body></html>\n"
    )

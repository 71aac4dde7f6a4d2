"""The uploader's private management page (webapp/web/manage.py) on a bare Flask app.

Sources for the expectations:

* Status codes: RFC 9110 sections 15.4.4 (303 See Other after a POST),
  15.5.1 (400) and 15.5.5 (404, also usable to hide that a resource exists).
* CSRF defence by a secret the attacker cannot know, sent in the POST body:
  OWASP CSRF Prevention Cheat Sheet, "synchronizer token pattern".
* ``Referrer-Policy: no-referrer``: W3C Referrer Policy; ``Cache-Control:
  no-store``: RFC 9111 section 5.2.2.5.
* Escaping ``<``, ``>``, ``&``, ``"`` and ``'`` in HTML text and attributes:
  OWASP Cross Site Scripting Prevention Cheat Sheet (output encoding).
* Path traversal patterns (``../``, ``%2F``, NUL): OWASP "Path Traversal".
* The exact wording is the project's own specification.
"""

from __future__ import annotations

import html
import re

import flask
import pytest

from webapp.web.manage import CONFIRM_LABEL, NOT_FOUND_TEXT, manage_link, register_manage_routes
from webapp.store.storage import DataStore, new_token

CSV = b"lot,Ash,Fibre\nL-01,1.9,7.2\nL-02,2.1,6.8\nL-03,2.0,7.0\n"
DASH_PAGE = "DASH CATCH-ALL PAGE"


@pytest.fixture
def store(tmp_path) -> DataStore:
    return DataStore(tmp_path / "data")


@pytest.fixture
def deleted() -> list:
    return []


@pytest.fixture
def app(store, deleted) -> flask.Flask:
    app = flask.Flask("manage-test")
    app.testing = True
    register_manage_routes(app, store, on_delete=deleted.append)
    # Dash answers every other GET path with its page; the manage routes must win
    # for anything under /manage/, however malformed.
    app.add_url_rule("/<path:path>", endpoint="catchall", view_func=lambda path: DASH_PAGE)
    return app


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def dataset(store):
    record = store.add_bytes(CSV, "cereal lots 2024.csv", title="Cereal lots")
    views = [
        store.save_view(record.token, f"v=1&ds={record.token}", title="First look", author="Ines",
                        content_hash=record.content_hash, engine_version="test"),
        store.save_view(record.token, f"v=1&ds={record.token}&k=3", title="Three components", author="Bo",
                        content_hash=record.content_hash, engine_version="test"),
    ]
    return record, views


def page_url(record, key=None) -> str:
    return f"/manage/{record.token}?key={record.manage_key if key is None else key}"


def snapshot(store, record):
    """Everything a manage request could change about a dataset."""
    return (store.dataset(record.token), [v.view_id for v in store.views_for_dataset(record.token)],
            store.blob_path(record).exists())


# --- the page ------------------------------------------------------------------------------


def test_link_format(dataset):
    record, _ = dataset
    assert manage_link(record) == f"/manage/{record.token}?key={record.manage_key}"


def test_page_shows_the_dataset_and_its_views(client, dataset):
    record, views = dataset
    response = client.get(manage_link(record), follow_redirects=True)
    assert response.status_code == 200
    text = response.get_data(as_text=True)
    for expected in ("Cereal lots", "cereal lots 2024.csv", f"{len(CSV)} bytes", record.content_hash,
                     "First look", "Three components", "Ines", "Saved views (2)", CONFIRM_LABEL):
        assert expected in text, expected
    for view in views:
        assert f'href="/v/{view.view_id}"' in text
    assert f'action="/manage/{record.token}/rename"' in text
    assert f'action="/manage/{record.token}/delete"' in text
    assert text.count(f'name="key" value="{record.manage_key}"') == 2
    assert response.headers["Cache-Control"] == "no-store"
    assert response.headers["Referrer-Policy"] == "no-referrer"


def test_the_first_visit_trades_the_key_for_a_cookie_and_a_key_free_address(client, dataset):
    # Issue: the key travelled in every GET address (browser history, proxy logs).
    record, _ = dataset
    first = client.get(manage_link(record))
    assert first.status_code == 303 and first.headers["Location"] == f"/manage/{record.token}"
    cookie = first.headers["Set-Cookie"]
    assert cookie.startswith(f"ordinate_manage_key={record.manage_key};")
    assert f"Path=/manage/{record.token}" in cookie and "HttpOnly" in cookie and "SameSite=Lax" in cookie
    assert "Expires" not in cookie and "Max-Age" not in cookie  # gone when the browser closes
    assert first.headers["Cache-Control"] == "no-store" and first.headers["Referrer-Policy"] == "no-referrer"
    page = client.get(f"/manage/{record.token}")
    assert page.status_code == 200 and record.filename in page.get_data(as_text=True)
    assert "Secure" not in cookie  # plain HTTP on loopback; over HTTPS the cookie is Secure:
    secure = client.get(manage_link(record), base_url="https://ordinate.example")
    assert "Secure" in secure.headers["Set-Cookie"]


def test_the_key_free_address_needs_the_cookie_of_that_dataset(app, store, dataset):
    record, _ = dataset
    other = store.add_bytes(b"a,b\n1,2\n3,4\n", "other.csv")
    fresh = app.test_client()
    assert fresh.get(f"/manage/{record.token}").status_code == 404  # no cookie: as a wrong key
    fresh.get(manage_link(record))
    assert fresh.get(f"/manage/{other.token}").status_code == 404  # the cookie is scoped to one dataset
    forged = app.test_client()
    forged.set_cookie("ordinate_manage_key", record.manage_key, path=f"/manage/{other.token}")
    assert forged.get(f"/manage/{other.token}").status_code == 404  # and holds that dataset's key only


def test_the_cookie_never_authorises_a_post(client, store, dataset):
    # Rename and delete read the key from the form only: another site's form cannot use the cookie.
    record, _ = dataset
    client.get(manage_link(record))
    before = snapshot(store, record)
    assert client.post(f"/manage/{record.token}/delete", data={"confirm": "yes"}).status_code == 404
    assert client.post(f"/manage/{record.token}/rename", data={"title": "X"}).status_code == 404
    assert snapshot(store, record) == before


def test_user_text_is_escaped(client, store):
    record = store.add_bytes(CSV, '<img src=x onerror="alert(2)">.csv', title="<script>alert(1)</script>")
    store.save_view(record.token, "v=1", title='"><b>bold</b>', author="<i>me</i>",
                    content_hash=record.content_hash, engine_version="test")
    text = client.get(manage_link(record), follow_redirects=True).get_data(as_text=True)
    assert "<script>alert(1)</script>" not in text
    assert html.escape("<script>alert(1)</script>") in text
    assert "<img src=x" not in text and "<b>bold</b>" not in text and "<i>me</i>" not in text
    assert 'value="&lt;script&gt;alert(1)&lt;/script&gt;"' in text  # inside the rename field too


# --- rename --------------------------------------------------------------------------------


def test_rename_with_the_key(client, store, dataset):
    record, views = dataset
    response = client.post(f"/manage/{record.token}/rename", data={"key": record.manage_key, "title": "Lots, May"})
    assert response.status_code == 303
    assert response.headers["Location"] == f"/manage/{record.token}?saved=name"  # no key in the address
    assert store.dataset(record.token).title == "Lots, May"
    assert [v.view_id for v in store.views_for_dataset(record.token)] == [v.view_id for v in views]
    after = client.get(response.headers["Location"]).get_data(as_text=True)
    assert "The new name is saved." in after and "Lots, May" in after


def test_empty_name_falls_back_to_the_file_name(client, store, dataset):
    record, _ = dataset
    client.post(f"/manage/{record.token}/rename", data={"key": record.manage_key, "title": "   "})
    assert store.dataset(record.token).title == ""
    assert store.dataset(record.token).display_name == "cereal lots 2024.csv"


def wrong_keys(record, views) -> dict[str, str | None]:
    return {
        "missing": None,
        "empty": "",
        "random": new_token(),
        "dataset token": record.token,
        "view id": views[0].view_id,
        "content hash": record.content_hash,
        "key with extra character": record.manage_key + "x",
        "key truncated": record.manage_key[:-1],
        "oversized": "x" * 10_000,
    }


@pytest.mark.parametrize("action", ["rename", "delete"])
def test_wrong_keys_change_nothing(client, store, dataset, deleted, action):
    record, views = dataset
    before = snapshot(store, record)
    for name, key in wrong_keys(record, views).items():
        form = {"title": "Hijacked", "confirm": "yes"}
        if key is not None:
            form["key"] = key
        response = client.post(f"/manage/{record.token}/{action}", data=form)
        assert response.status_code == 404, name
        assert html.escape(NOT_FOUND_TEXT) in response.get_data(as_text=True)
        assert snapshot(store, record) == before, name
    assert deleted == []


def test_wrong_keys_do_not_open_the_page(client, dataset):
    record, views = dataset
    for name, key in wrong_keys(record, views).items():
        url = f"/manage/{record.token}" if key is None else page_url(record, key)
        response = client.get(url, follow_redirects=True)
        assert response.status_code == 404, name
        assert record.filename not in response.get_data(as_text=True)


def test_key_in_the_address_does_not_authorise_a_post(client, store, dataset):
    # The POST routes read the key from the form body only (the CSRF defence).
    record, _ = dataset
    before = snapshot(store, record)
    response = client.post(f"/manage/{record.token}/delete?key={record.manage_key}", data={"confirm": "yes"})
    assert response.status_code == 404
    response = client.post(f"/manage/{record.token}/rename?key={record.manage_key}", data={"title": "X"})
    assert response.status_code == 404
    assert snapshot(store, record) == before


def test_one_datasets_key_does_not_manage_another(client, store, dataset):
    record, _ = dataset
    other = store.add_bytes(b"a,b\n1,2\n3,4\n", "other.csv")
    response = client.post(f"/manage/{other.token}/rename", data={"key": record.manage_key, "title": "X"})
    assert response.status_code == 404 and store.dataset(other.token).title == ""


def test_not_found_does_not_reveal_whether_a_dataset_exists(client, dataset):
    record, _ = dataset
    wrong_key = client.get(page_url(record, new_token()))
    unknown = client.get(f"/manage/{new_token()}?key={new_token()}")
    assert wrong_key.status_code == unknown.status_code == 404
    assert wrong_key.get_data() == unknown.get_data()
    assert wrong_key.headers["Cache-Control"] == unknown.headers["Cache-Control"] == "no-store"


@pytest.mark.parametrize("path", [
    "/manage/..%2F..%2Fetc%2Fpasswd",
    "/manage/../../etc/passwd",
    "/manage/%2e%2e/%2e%2e/etc/passwd",
    "/manage/%00",
    "/manage/abcdefghijklmnopqrstuvwx%00",
    "/manage/abcdefghijklmnopqrstuvwx/../../blobs",
    "/manage/abcdefghijklmnopqrstuvwx/rename/extra",
    "/manage/",
    "/manage",
])
def test_malformed_addresses_get_the_plain_404(client, path):
    for response in (client.get(f"{path}?key=whatever"), client.post(path, data={"key": "whatever"})):
        text = response.get_data(as_text=True)
        assert response.status_code == 404, path
        assert DASH_PAGE not in text and html.escape(NOT_FOUND_TEXT) in text


def test_token_with_nul_or_traversal_never_reaches_the_store(client, store, dataset):
    record, _ = dataset
    before = snapshot(store, record)
    for token in (f"{record.token}%00", f"{record.token}%2F..", f"..%2F{record.token}"):
        response = client.post(f"/manage/{token}/delete", data={"key": record.manage_key, "confirm": "yes"})
        assert response.status_code == 404, token
    assert snapshot(store, record) == before


def test_get_on_a_form_address_changes_nothing(client, store, dataset):
    record, _ = dataset
    before = snapshot(store, record)
    response = client.get(f"/manage/{record.token}/delete?key={record.manage_key}&confirm=yes")
    assert response.status_code == 404
    assert snapshot(store, record) == before


# --- delete --------------------------------------------------------------------------------


def test_delete_needs_the_confirmation_box(client, store, dataset, deleted):
    record, _ = dataset
    before = snapshot(store, record)
    for form in ({"key": record.manage_key}, {"key": record.manage_key, "confirm": "on"},
                 {"key": record.manage_key, "confirm": ""}):
        response = client.post(f"/manage/{record.token}/delete", data=form)
        assert response.status_code == 400
        assert "Nothing was deleted" in response.get_data(as_text=True)
        assert snapshot(store, record) == before
    assert deleted == []


def test_delete_removes_the_dataset_its_views_and_its_file(client, store, dataset, deleted):
    record, views = dataset
    blob = store.blob_path(record)
    assert blob.exists()
    response = client.post(f"/manage/{record.token}/delete", data={"key": record.manage_key, "confirm": "yes"})
    assert response.status_code == 200
    text = response.get_data(as_text=True)
    assert "Dataset deleted" in text and "no longer open" in text and "2 saved view(s)" in text
    assert response.headers["Cache-Control"] == "no-store"
    assert store.dataset(record.token) is None
    assert all(store.view(v.view_id) is None for v in views)
    assert store.views_for_dataset(record.token) == []
    assert not blob.exists()
    assert deleted == [record]
    # The link itself is dead now, and a second delete finds nothing.
    assert client.get(manage_link(record), follow_redirects=True).status_code == 404
    again = client.post(f"/manage/{record.token}/delete", data={"key": record.manage_key, "confirm": "yes"})
    assert again.status_code == 404 and deleted == [record]


def test_delete_keeps_bytes_another_dataset_still_uses(client, store, dataset):
    record, _ = dataset
    twin = store.add_bytes(CSV, "same bytes, second upload.csv")
    assert twin.content_hash == record.content_hash
    response = client.post(f"/manage/{record.token}/delete", data={"key": record.manage_key, "confirm": "yes"})
    assert response.status_code == 200
    assert "stay on the server" in response.get_data(as_text=True)
    assert store.dataset(twin.token) is not None and store.blob_path(twin).exists()
    assert store.read_bytes(twin) == CSV


def test_a_failing_hook_does_not_undo_the_delete(tmp_path, dataset, store):
    record, _ = dataset

    def broken_hook(_record):
        raise RuntimeError("cache unavailable")

    app = flask.Flask("manage-hook-test")
    register_manage_routes(app, store, on_delete=broken_hook)
    response = app.test_client().post(f"/manage/{record.token}/delete",
                                      data={"key": record.manage_key, "confirm": "yes"})
    assert response.status_code == 200 and store.dataset(record.token) is None


def test_without_a_hook_the_page_says_when_cached_results_go(tmp_path, dataset, store):
    record, _ = dataset
    app = flask.Flask("manage-nohook-test")
    register_manage_routes(app, store)
    response = app.test_client().post(f"/manage/{record.token}/delete",
                                      data={"key": record.manage_key, "confirm": "yes"})
    assert re.search(r"stay in the server's cache until", response.get_data(as_text=True))

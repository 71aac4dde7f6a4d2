"""Follow sessions: one presenter writes, attendees read, every worker sees the same view.

No outside reference applies: these are the product's own access rules (the
presenter's key is a secret like the manage key; constant-time comparison is
common practice for secrets).
"""

import pytest

from webapp.store.follow import IDLE_HOURS, FollowSessions
from webapp.store.storage import DataStore
from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.state import ViewState, parse_query, to_query

CSV = b"lot,a,b\nL1,1,2\nL2,2,1\nL3,3,5\nL4,4,4\n"


class Clock:
    now = 1_000_000.0

    def __call__(self):
        return self.now


@pytest.fixture
def store(tmp_path):
    return DataStore(tmp_path / "data")


@pytest.fixture
def dataset(store):
    return store.add_bytes(CSV, "lots.csv")


def test_the_presenter_updates_and_attendees_read_the_current_view(store, dataset):
    sessions = FollowSessions(store)
    first = to_query(ViewState(dataset=dataset.token, present=True, slide=1))
    session, key = sessions.start(dataset.token, first)
    assert session.revision == 1 and session.active and sessions.get(session.code).query == first
    second = to_query(ViewState(dataset=dataset.token, present=True, slide=2))
    assert sessions.update(session.code, key, second).revision == 2
    assert sessions.update(session.code, key, second).revision == 2  # the same view: nothing new to follow
    # Another worker process opens the same data directory: it sees the same view.
    assert FollowSessions(DataStore(store.root)).get(session.code).query == second


def test_attendees_cannot_move_or_end_the_presentation(store, dataset):
    sessions = FollowSessions(store)
    session, key = sessions.start(dataset.token, "v=1")
    for wrong in ("", session.code, dataset.token, dataset.manage_key, key + "x", None):
        assert sessions.update(session.code, wrong, "v=1&slide=9") is None
        assert sessions.end(session.code, wrong) is False
    assert sessions.get(session.code).query == "v=1" and sessions.get(session.code).active


def test_a_session_ends_when_the_presenter_leaves_goes_idle_or_the_dataset_is_deleted(store, dataset):
    clock = Clock()
    sessions = FollowSessions(store, clock=clock)
    left, key = sessions.start(dataset.token, "v=1")
    assert sessions.end(left.code, key)
    ended = sessions.get(left.code)
    assert not ended.active and ended.revision == 2  # attendees notice the end as a new revision
    assert sessions.update(left.code, key, "v=1&slide=2") is None

    idle, key = sessions.start(dataset.token, "v=1")
    clock.now += IDLE_HOURS * 3600 - 1
    assert sessions.get(idle.code).active
    clock.now += 2
    assert not sessions.get(idle.code).active

    deleted, _ = sessions.start(dataset.token, "v=1")
    store.delete_dataset(dataset.token)
    assert not sessions.get(deleted.code).active


def test_unknown_or_malformed_codes_are_not_found(store):
    sessions = FollowSessions(store)
    for code in ("Z" * 24, "../../etc", "", None, 3):
        assert sessions.get(code) is None


def test_the_follow_address_opens_the_presenters_current_view_followed(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    services = app.server.config["ordinate.services"]
    record = services.store.add_bytes(CSV, "lots.csv")
    presenting = ViewState(dataset=record.token, present=True, slide=2, sigma_levels=(1.0, 3.0))
    session, _ = services.follows.start(record.token, to_query(presenting))
    client = app.server.test_client()
    answer = client.get(f"/follow/{session.code}")
    assert answer.status_code == 302
    followed, notices = parse_query(answer.headers["Location"].split("?", 1)[1])
    assert notices == () and followed == presenting.replace(follow=session.code)
    missing = client.get("/follow/" + "Z" * 24)
    assert missing.status_code == 404 and "not known here" in missing.get_data(as_text=True)

"""Wrong sign-in keys are counted per client address and answered 429 once over budget, never slept on.

Sources: RFC 6585 section 4 (429 Too Many Requests, Retry-After); RFC 9110
section 10.2.3 (Retry-After in seconds). The budget (5 wrong keys a minute,
then blocks of 60 s doubling each time) is the project's own specification;
exponential back-off itself is common practice.
"""

from __future__ import annotations

import pytest

from webapp.web import access
from webapp.web.access import FAILURE_BUDGET, SignInThrottle
from webapp.web.access.throttle import FIRST_BLOCK_SECONDS, client_bucket
from webapp.web.app import create_app
from webapp.config import AppConfig

KEY = "t" * 24
WRONG = "w" * 24


class Clock:
    def __init__(self, now: float = 1_000_000.0):
        self.now = now

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock():
    return Clock()


@pytest.fixture
def app(tmp_path, clock, monkeypatch):
    # The factory registers access control with the real clock; give it the test clock instead.
    original = access.routes.SignInThrottle
    monkeypatch.setattr(access.routes, "SignInThrottle", lambda directory, clock_=None, **_: original(directory, clock))
    app = create_app(AppConfig(data_dir=tmp_path, access_key=KEY, require_access_key=True))
    app.server.testing = True
    return app


def post(client, key, address):
    return client.post("/sign-in", data={"key": key, "next": "/"}, environ_base={"REMOTE_ADDR": address})


def test_many_wrong_keys_from_one_address_get_429_without_waiting(app):
    assert not hasattr(access, "_pause") and not hasattr(access.routes, "_pause")
    client = app.server.test_client()
    answers = [post(client, WRONG, "192.0.2.7") for _ in range(40)]
    statuses = [answer.status_code for answer in answers]
    assert statuses[:FAILURE_BUDGET - 1] == [401] * (FAILURE_BUDGET - 1)
    assert statuses[FAILURE_BUDGET - 1:] == [429] * (40 - FAILURE_BUDGET + 1)
    blocked = answers[-1]
    assert 0 < int(blocked.headers["Retry-After"]) <= FIRST_BLOCK_SECONDS
    assert "Too many wrong keys" in blocked.get_data(as_text=True)
    # Even the right key is not looked at while the address is blocked.
    assert post(client, KEY, "192.0.2.7").status_code == 429


def test_another_address_is_unaffected(app):
    client = app.server.test_client()
    for _ in range(FAILURE_BUDGET):
        post(client, WRONG, "192.0.2.7")
    assert post(client, WRONG, "198.51.100.3").status_code == 401
    assert post(client, KEY, "198.51.100.4").status_code == 303


def test_the_right_key_works_after_the_block_and_blocks_then_double(app, clock):
    client = app.server.test_client()
    for _ in range(FAILURE_BUDGET):
        post(client, WRONG, "192.0.2.7")
    clock.now += FIRST_BLOCK_SECONDS + 1
    for _ in range(FAILURE_BUDGET):
        last = post(client, WRONG, "192.0.2.7")
    assert last.status_code == 429 and int(last.headers["Retry-After"]) == 2 * FIRST_BLOCK_SECONDS
    clock.now += 2 * FIRST_BLOCK_SECONDS + 1
    assert post(client, KEY, "192.0.2.7").status_code == 303


def test_the_count_is_shared_by_every_worker_through_the_data_directory(tmp_path, clock):
    first, second = SignInThrottle(tmp_path, clock), SignInThrottle(tmp_path, clock)
    for _ in range(FAILURE_BUDGET - 1):
        first.record_failure("192.0.2.7")
    assert second.record_failure("192.0.2.7") == FIRST_BLOCK_SECONDS
    assert first.retry_after("192.0.2.7") == FIRST_BLOCK_SECONDS


def test_ipv6_addresses_of_one_64_network_share_a_budget():
    # RFC 4291 section 2.5.4: a global unicast address is a 64-bit prefix plus an interface id.
    assert client_bucket("2001:db8:1:2::1") == client_bucket("2001:db8:1:2:ffff::9")
    assert client_bucket("2001:db8:1:3::1") != client_bucket("2001:db8:1:2::1")
    assert client_bucket("::ffff:192.0.2.7") == client_bucket("192.0.2.7")


def test_behind_a_trusted_proxy_each_client_has_its_own_budget(app, monkeypatch):
    # Every request reaches Ordinate from the proxy (here on loopback, trusted by default,
    # as gunicorn trusts it for X-Forwarded-Proto); one guesser must not lock out the team.
    monkeypatch.delenv("FORWARDED_ALLOW_IPS", raising=False)
    client = app.server.test_client()

    def through_proxy(key, client_address, sent_by_client=""):
        chain = f"{sent_by_client}, {client_address}" if sent_by_client else client_address
        return client.post("/sign-in", data={"key": key, "next": "/"},
                           environ_base={"REMOTE_ADDR": "127.0.0.1"}, headers={"X-Forwarded-For": chain})

    for _ in range(FAILURE_BUDGET):
        through_proxy(WRONG, "203.0.113.9")
    assert through_proxy(WRONG, "203.0.113.9").status_code == 429
    assert through_proxy(KEY, "203.0.113.10").status_code == 303  # a colleague behind the same proxy
    # A guesser cannot escape its block by sending its own X-Forwarded-For: the proxy appends the real one.
    assert through_proxy(WRONG, "203.0.113.9", sent_by_client="198.51.100.77").status_code == 429


def test_a_forwarded_address_from_an_untrusted_peer_is_ignored(app, monkeypatch):
    monkeypatch.setenv("FORWARDED_ALLOW_IPS", "10.0.0.5")
    client = app.server.test_client()
    for n in range(FAILURE_BUDGET):
        client.post("/sign-in", data={"key": WRONG, "next": "/"}, environ_base={"REMOTE_ADDR": "192.0.2.50"},
                    headers={"X-Forwarded-For": f"198.51.100.{n}"})  # a direct client making up addresses
    answer = client.post("/sign-in", data={"key": WRONG, "next": "/"}, environ_base={"REMOTE_ADDR": "192.0.2.50"},
                         headers={"X-Forwarded-For": "198.51.100.99"})
    assert answer.status_code == 429

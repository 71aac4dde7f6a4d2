"""The monitoring view's URL form: round trip, defaults, and readable notices for bad input.

No external reference applies here; the checks are the round-trip rules stated in
webapp/state/monitor_state.py (the same rules as the main view's URL form).
"""

import pytest

from webapp.state.monitor_state import (
    MONITOR_PARAMETERS,
    MonitorState,
    MonitorStateError,
    model_code_from_path,
    monitor_address,
    parse_monitor_query,
    to_monitor_query,
)

CODE = "abcdefghijklmnop1234"

STATES = [
    MonitorState(model=CODE),
    MonitorState(model=CODE, version=3, first=10, last=40, rules=("run-above-median",), run_length=9,
                 component=2, band=2.5, reference=False, pick=17, present=True,
                 saved_view="qrstuvwxyzABCDEF12"),
    MonitorState(model=CODE, rules=(), first=5),
    MonitorState(model=CODE, last=0, band=10.0),
]


@pytest.mark.parametrize("state", STATES)
def test_round_trip(state):
    assert parse_monitor_query(to_monitor_query(state), CODE) == (state, ())
    assert parse_monitor_query("?" + to_monitor_query(state), CODE) == (state, ())


def test_every_parameter_is_written_in_a_fixed_order():
    query = to_monitor_query(MonitorState(model=CODE))
    names = [pair.split("=")[0] for pair in query.split("&")]
    assert names == ["v", *[p.name for p in MONITOR_PARAMETERS]]
    assert "rules=beyond-limit,run-above-median" in query
    assert monitor_address(MonitorState(model=CODE)).startswith(f"/m/{CODE}?v=1&")


def test_rules_are_kept_in_one_canonical_order():
    state = MonitorState(rules=("run-above-median", "beyond-limit"))
    assert state.rules == ("beyond-limit", "run-above-median")
    assert parse_monitor_query("rules=run-above-median,beyond-limit")[0].rules == state.rules
    assert parse_monitor_query("rules=none")[0].rules == ()


@pytest.mark.parametrize("query, field, default", [
    ("run=1", "run_length", 8),
    ("run=51", "run_length", 8),
    ("pc=0", "component", 1),
    ("band=0", "band", 3.0),
    ("band=11", "band", 3.0),
    ("band=-2", "band", 3.0),
    ("ref=yes", "reference", True),
    ("pick=-1", "pick", None),
    ("rules=beyond,run", "rules", ("beyond-limit", "run-above-median")),
    ("view=short", "saved_view", None),
    ("ver=0", "version", None),
])
def test_unusable_values_take_the_default_with_one_notice(query, field, default):
    state, notices = parse_monitor_query(query, CODE)
    assert getattr(state, field) == default
    assert len(notices) == 1
    assert notices[0].startswith("Ignored the setting") and notices[0].endswith(".")


def test_window_with_start_after_end_is_dropped():
    state, notices = parse_monitor_query("from=20&to=10", CODE)
    assert (state.first, state.last) == (None, None)
    assert len(notices) == 1 and "start comes after its end" in notices[0]


def test_unknown_repeated_and_newer_links_are_reported():
    state, notices = parse_monitor_query("v=9&colour=red&pc=2&pc=3", CODE)
    assert state.component == 2
    assert any("newer version" in n for n in notices)
    assert any("'colour'" in n for n in notices)
    assert any("appeared 2 times" in n for n in notices)


@pytest.mark.parametrize("junk", [None, "", "&&&", "%ff%fe=%00", "=x", "pc=" + "9" * 500, 42])
def test_parse_never_raises(junk):
    state, notices = parse_monitor_query(junk, CODE)
    assert isinstance(state, MonitorState)
    assert all(isinstance(n, str) for n in notices)


def test_model_code_from_path():
    assert model_code_from_path(f"/m/{CODE}") == (CODE, ())
    assert model_code_from_path(f"/m/{CODE}/") == (CODE, ())
    assert model_code_from_path("/m/short")[0] is None
    assert model_code_from_path("/v/" + CODE)[0] is None
    assert parse_monitor_query("", "bad code")[0].model is None


def test_invalid_states_are_refused():
    with pytest.raises(MonitorStateError):
        MonitorState(first=5, last=2)
    with pytest.raises(MonitorStateError):
        MonitorState(rules=("beyond-limit", "beyond-limit"))
    with pytest.raises(MonitorStateError):
        MonitorState(component=True)


def test_every_monitoring_parameter_is_documented():
    # The docs-test pattern of tests/test_state.py, for the "Monitoring links" section.
    from pathlib import Path

    text = (Path(__file__).resolve().parents[2] / "docs" / "url-state.md").read_text(encoding="utf-8")
    section = text.split("## Monitoring links", 1)[1]
    for name in ["v", *[p.name for p in MONITOR_PARAMETERS]]:
        assert f"`{name}`" in section, f"document '{name}' under 'Monitoring links' in docs/url-state.md"

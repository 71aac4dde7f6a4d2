"""Follow links: attendees' pages show the presenter's current view and change with it.

The presenter's tab publishes every address it shows while presenting to its
follow session (:mod:`webapp.store.follow`); an attendee's page (URL parameter
``follow=<code>``) asks for the session's revision every
:data:`~webapp.ui.layout.FOLLOW_POLL_MS` milliseconds and, when it changed,
moves to the presenter's address, which redraws through the usual view
callbacks. Short polling rather than server-sent events: each poll is one small
request that any worker answers from the shared data directory, it passes the
access key and proxies like every other request, and it holds no worker
thread per attendee (a long-lived event stream would, with gunicorn's threads).
"""

from __future__ import annotations

from dash import Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from webapp.state import ViewState, parse_query, to_query
from webapp.ui import layout as L
from webapp.ui.components import base_url

__all__ = ["ENDED_TEXT", "FOLLOWING_TEXT", "UNKNOWN_TEXT", "follow_address", "register_follow_callbacks"]

FOLLOWING_TEXT = "Following the presenter: this page changes when theirs does."
ENDED_TEXT = "The presenter has ended the presentation; this is the last view they showed."
UNKNOWN_TEXT = "This follow link is not known here: it may be mistyped, or the presentation ended long ago."


def follow_address(code: str) -> str:
    """The path attendees open; it redirects to the presenter's current view (see ``webapp.web.app``)."""
    return f"/follow/{code}"


def register_follow_callbacks(app, services) -> None:
    _register_presenter(app, services)
    _register_attendee(app, services)


def _published_query(state: ViewState) -> str:
    return to_query(state.replace(follow=None))


def _link_children(code: str) -> list:
    address = f"{base_url().rstrip('/')}{follow_address(code)}"
    return [html.Span("Attendees open: "), html.A(address, href=address, target="_blank", rel="noopener",
                                                     className="follow-address")]


def _register_presenter(app, services) -> None:
    @app.callback(
        Output(L.FOLLOW_SESSION, "data"),
        Output(L.FOLLOW_LINK, "children"),
        Input(L.FOLLOW_START, "n_clicks"),
        Input(L.URL, "search"),
        State(L.FOLLOW_SESSION, "data"),
    )
    def publish(clicks, search, session):
        """Start a session on request; publish each address shown while presenting; end it on leaving."""
        state, _ = parse_query(search)
        if state.follow:
            raise PreventUpdate  # an attendee's page never publishes
        code, key = (session or {}).get("code"), (session or {}).get("key")
        if code and not state.present:
            services.follows.end(code, key)
            return None, None
        if not state.present or state.dataset is None:
            raise PreventUpdate
        if code and services.follows.update(code, key, _published_query(state)) is not None:
            return no_update, _link_children(code)
        if ctx.triggered_id != L.FOLLOW_START or not clicks:
            # No session, or it ended meanwhile (idle, dataset deleted): a new one only when asked.
            return None, None
        started, key = services.follows.start(state.dataset, _published_query(state))
        return {"code": started.code, "key": key}, _link_children(started.code)


def _register_attendee(app, services) -> None:
    @app.callback(
        Output(L.FOLLOW_POLL, "disabled"),
        Output(L.FOLLOW_BANNER, "hidden"),
        Input(L.URL, "search"),
    )
    def start_polling(search):
        following = parse_query(search)[0].follow is not None
        return not following, not following

    @app.callback(
        Output(L.URL, "search", allow_duplicate=True),
        Output(L.FOLLOW_REVISION, "data"),
        Output(L.FOLLOW_BANNER, "children"),
        Output(L.FOLLOW_POLL, "disabled", allow_duplicate=True),
        Input(L.FOLLOW_POLL, "n_intervals"),
        State(L.URL, "search"),
        State(L.FOLLOW_REVISION, "data"),
        prevent_initial_call=True,
    )
    def follow_presenter(_ticks, search, shown_revision):
        state, _ = parse_query(search)
        if state.follow is None:
            raise PreventUpdate
        session = services.follows.get(state.follow)
        if session is None:
            return no_update, no_update, UNKNOWN_TEXT, True
        if session.revision == shown_revision:
            raise PreventUpdate
        banner = FOLLOWING_TEXT if session.active else ENDED_TEXT
        presenter, _ = parse_query(session.query)
        target = "?" + to_query(presenter.replace(follow=state.follow))
        address = target if target != search else no_update
        return address, session.revision, banner, not session.active

""""Lock as reference model" on the dashboard: from an opened saved view to a monitoring page.

Shown under the saved view's banner. Locking freezes the saved view's model
(preprocessing, components kept, confidence, limits and the fingerprint of the
reference data) under a name; the version is one more than the highest already
locked under that name. The answer gives the monitoring link (to share) and the
manager link (private: it lets its holder remove uploads), once.
"""

from __future__ import annotations

import logging
from urllib.parse import quote

from dash import Input, Output, State, dcc, html
from dash.exceptions import PreventUpdate

from webapp.analysis.errors import OrdinateError
from webapp.state import parse_query
from webapp.ui import layout as L
from webapp.ui.components import base_url
from webapp.ui.reference_locking import lock_saved_view

log = logging.getLogger("ordinate")


def lock_result(locked, manager_key: str, host: str) -> list:
    """What the page says after a lock: the version, the monitoring link and the private manager link."""
    code = locked.code
    monitoring = f"{host.rstrip('/')}/m/{code}"
    manager = f"{host.rstrip('/')}/m/{code}/manage?key={quote(manager_key, safe='')}"
    return [
        html.P(["Locked ", html.Strong(f"“{locked.name}” version {locked.version}"), "."], className="save-done"),
        html.Label(["Monitoring link (share it with your team) ",
                    html.A(monitoring, href=f"/m/{code}", id="lock-monitoring-link", className="link-text")]),
        html.Label(["Manager link (keep it private: it lets its holder remove uploads) ",
                    dcc.Input(value=manager, readOnly=True, className="link-text", id="lock-manager-link")]),
        html.P("The manager link is shown only now. Open it once in this browser to manage the model's uploads.",
               className="quiet"),
    ]


def locked_list(services, dataset_token: str | None) -> list:
    """Links to the monitoring pages of the models locked from one dataset, newest version last."""
    models = [m for m in services.reference_models.all() if dataset_token and m.dataset_token == dataset_token]
    if not models:
        return [html.P("None yet. Open a saved view and use “Lock as reference model…” to monitor new samples "
                       "against it over time.", className="quiet")]
    return [html.Ul(className="saved-items", children=[
        html.Li(className="saved-item", children=[
            html.A(f"{m.name} · version {m.version}", href=f"/m/{m.code}", className="saved-link"),
            html.Span(f" locked {m.locked_at[:10]}", className="saved-meta"),
        ]) for m in sorted(models, key=lambda m: (m.name.casefold(), m.version))
    ])]


def register_locking(app, services) -> None:
    @app.callback(Output(L.LOCK_PANEL, "hidden"), Input(L.URL, "search"))
    def show_lock_panel(search):
        state, _ = parse_query(search)
        return not (state.saved_view and not state.present and not state.follow)

    @app.callback(Output(L.LOCKED_LIST, "children"), Input(L.URL, "search"), Input(L.LOCK_RESULT, "children"))
    def show_locked_models(search, _locked):
        state, _ = parse_query(search)
        return locked_list(services, state.dataset)

    @app.callback(Output(L.LOCK_RESULT, "children"), Input(L.LOCK_CONFIRM, "n_clicks"), State(L.LOCK_NAME, "value"),
                  State(L.URL, "search"), prevent_initial_call=True)
    def lock(_clicks, name, search):
        state, _ = parse_query(search)
        if not state.saved_view:
            raise PreventUpdate
        name = (name or "").strip()
        if not name:
            return html.P("Give the reference model a name first.", className="notice notice-error")
        try:
            locked, key = lock_saved_view(services, state.saved_view, name)
        except OrdinateError as problem:
            return html.P(str(problem), className="notice notice-error")
        except Exception:
            log.exception("locking a reference model failed")
            return html.P("The model could not be locked. Try again; if it happens again, tell the administrator.",
                          className="notice notice-error")
        return lock_result(locked, key, base_url())

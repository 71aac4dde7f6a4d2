"""Picking one sample: a click on the scores plot or the T²/Q plot, or a row of a flagged table.

Every pick is a new URL (``pick=``); the view then rings the sample on the
scores plot, names it beside its point and shows its contributions.
"""

from __future__ import annotations

from dash import ALL, Input, Output, State, ctx
from dash.exceptions import PreventUpdate

from webapp.state import parse_query, to_query
from webapp.ui import layout as L
from webapp.ui.components import PICK_ROW
from webapp.ui.scores_panel import labels_from_event


def register_picking(app) -> None:
    url_out = Output(L.URL, "search", allow_duplicate=True)

    @app.callback(url_out, Input(L.SCORES_GRAPH, "clickData"), Input(L.DIAGNOSTICS_GRAPH, "clickData"),
                  State(L.URL, "search"), prevent_initial_call=True)
    def pick_sample(scores_click, diagnostics_click, search):
        event = scores_click if ctx.triggered_id == L.SCORES_GRAPH else diagnostics_click
        labels = labels_from_event(event)
        if not labels:
            raise PreventUpdate
        return picked_search(search, labels[0])

    @app.callback(url_out, Input({"type": PICK_ROW, "index": ALL}, "n_clicks"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def pick_from_table(_clicks, search):
        # Drawing a table fires this with n_clicks 0: only a real click picks.
        if not ctx.triggered or not ctx.triggered[0].get("value") or not isinstance(ctx.triggered_id, dict):
            raise PreventUpdate
        return picked_search(search, str(ctx.triggered_id["index"]))


def picked_search(search: str | None, label: str) -> str:
    """The address of the current view with ``label`` picked (detached from a saved view), or no update."""
    current, _ = parse_query(search)
    new = current.replace(picked=label)
    if new == current or current.present or current.dataset is None:
        raise PreventUpdate
    return "?" + to_query(new.unsaved())

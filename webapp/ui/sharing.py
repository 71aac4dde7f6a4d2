"""Callbacks for saved views and presentation mode.

A saved view is an immutable snapshot (``DataStore.save_view``) reached by a
short link ``/v/<id>`` (see ``webapp.web.app``), which redirects to the full view
URL with ``view=<id>``. Presentation mode is a URL flag (``present=1`` and
``slide=N``) that shows the dataset's saved views in order.
"""

from __future__ import annotations

import re

from dash import ALL, Input, Output, State, ctx, dcc, html, no_update
from dash.exceptions import PreventUpdate

from webapp.state import SLIDE_FIGURES, ViewState, parse_query, to_query
from webapp.ui import layout as L
from webapp.ui import view_model as vm
from webapp.ui.components import base_url
from webapp.ui.follow import register_follow_callbacks


def register_sharing_callbacks(app, services) -> None:
    _register_display(app, services)
    _register_save(app, services)
    _register_presentation(app, services)
    register_follow_callbacks(app, services)


# --- what the sharing parts show ---------------------------------------------------


def _register_display(app, services) -> None:
    @app.callback(
        Output(L.APP_ROOT, "className"),
        Output(L.SAVED_BANNER, "children"),
        Output(L.SAVED_BANNER, "hidden"),
        Output(L.SAVED_LIST, "children"),
        Output(L.PRESENT_BAR, "hidden"),
        Output(L.SLIDE_POSITION, "children"),
        Output(L.SLIDE_FIRST, "disabled"),
        Output(L.SLIDE_PREV, "disabled"),
        Output(L.SLIDE_NEXT, "disabled"),
        Output(L.SLIDE_LAST, "disabled"),
        Output(L.ORIGIN_VIEW, "data"),
        Input(L.URL, "search"),
    )
    def show_sharing(search):
        state, _ = parse_query(search)
        shown, slides, _ = vm.effective_state(services, state)
        info = vm.saved_view_info(services, shown)
        banner = saved_banner(info, shown, base_url()) if info else None
        position = f"View {slides.position} of {slides.count}" if slides else ""
        at_start = not slides or slides.position <= 1
        at_end = not slides or slides.position >= slides.count
        classes = ["ordinate"]
        if state.present:
            classes += ["is-presenting", f"shows-{shown.slide_figure}"]
        if state.follow:
            classes.append("is-following")
        return (
            " ".join(classes),
            banner,
            info is None,
            saved_list(vm.saved_views_list(services, state.dataset), state.dataset),
            not state.present,
            position,
            at_start, at_start, at_end, at_end,
            info["view_id"] if info else no_update,
        )


PRESENTER_MARK = re.compile(r"^[ \t]*presenter only:[ \t]*$", re.IGNORECASE | re.MULTILINE)


def split_presenter_note(note: str) -> tuple[str, str]:
    """(shown to everyone, presenter only): the lines after a line "Presenter only:" are the presenter's."""
    parts = PRESENTER_MARK.split(note or "", maxsplit=1)
    return parts[0].rstrip(), (parts[1].strip() if len(parts) > 1 else "")


def saved_banner(info: dict, state: ViewState, base_url: str) -> list:
    short = f"{base_url}v/{info['view_id']}"
    meta = [f"Saved {info['saved']}"]
    if info["author"]:
        meta.append(f"by {info['author']}")
    meta.append(f"engine {info['engine_version']}")
    meta.append(f"data fingerprint {info['content_hash'][:12]}…")
    public_note, presenter_note = split_presenter_note(info["note"])
    children = [
        html.Div(className="banner-head", children=[
            html.H2(info["title"], className="saved-title"),
            html.Div(className="banner-actions", children=[
                html.Label([html.Span("Short link", className="visually-hidden"),
                            dcc.Input(id="short-link", value=short, readOnly=True, className="link-text")]),
                dcc.Clipboard(target_id="short-link", className="copy-button", title="Copy the short link"),
                html.Button("Duplicate and edit", id={"type": "duplicate", "index": 0}, n_clicks=0,
                            className="small-button"),
            ]),
        ]),
        dcc.Markdown(public_note, className="saved-note", link_target="_blank"),
        html.P(" · ".join(meta), className="saved-meta"),
    ]
    if presenter_note and not state.follow:  # an attendee's page never shows the presenter's notes
        children.insert(2, html.Div(className="presenter-note", children=[
            html.P("Presenter notes (not shown to people following the presentation)", className="presenter-note-head"),
            dcc.Markdown(presenter_note, className="saved-note", link_target="_blank"),
        ]))
    if info["outdated_engine"]:
        children.append(html.P(
            "This view was saved with another engine version; its numbers were recomputed with the current one.",
            className="notice"))
    return children


def saved_list(views: list[dict], dataset: str | None) -> list:
    if not views:
        return [html.P("No saved views yet. Use “Save view” to keep this analysis with a title and a note.",
                       className="quiet")]
    items = []
    for view in views:
        present = "?" + to_query(ViewState(dataset=dataset, present=True, slide=view["position"]))
        meta = view["saved"] + (f" · {view['author']}" if view["author"] else "")
        items.append(html.Li(className="saved-item", children=[
            html.A(view["title"], href=f"/v/{view['view_id']}", className="saved-link"),
            html.Span(meta, className="saved-meta"),
            html.P(view["note"], className="saved-preview") if view["note"] else None,
            html.A("present from here", href=present, className="small-link"),
        ]))
    return [html.Ol(items, className="saved-items")]


# --- saving -----------------------------------------------------------------------------


def _register_save(app, services) -> None:
    @app.callback(
        Output(L.SAVE_PANEL, "hidden"),
        Output(L.SAVE_TITLE, "value"),
        Output(L.SAVE_NOTE, "value"),
        Output(L.SAVE_RESULT, "children", allow_duplicate=True),
        Output(L.DATASET_DETAILS, "open", allow_duplicate=True),
        Output(L.SAVE_FIGURE, "value"),
        Input(L.SAVE_OPEN, "n_clicks"),
        Input(L.SAVE_CANCEL, "n_clicks"),
        Input({"type": "duplicate", "index": ALL}, "n_clicks"),
        State(L.SAVE_PANEL, "hidden"),
        State(L.URL, "search"),
        prevent_initial_call=True,
    )
    def toggle_save_panel(_open, _cancel, duplicate, hidden, search):
        if ctx.triggered_id == L.SAVE_CANCEL:
            return True, no_update, no_update, None, no_update, no_update
        if isinstance(ctx.triggered_id, dict) and not any(duplicate or ()):
            raise PreventUpdate
        if ctx.triggered_id == L.SAVE_OPEN and not hidden:
            return True, no_update, no_update, None, no_update, no_update
        state, _ = parse_query(search)
        info = vm.saved_view_info(services, state)
        title = f"Copy of {info['title']}" if info else ""
        note = info["note"] if info else ""
        # Close the data summary so it does not cover the form.
        return False, title, note, None, False, state.slide_figure

    @app.callback(
        Output(L.URL, "search", allow_duplicate=True),
        Output(L.SAVE_RESULT, "children"),
        Input(L.SAVE_CONFIRM, "n_clicks"),
        State(L.SAVE_TITLE, "value"),
        State(L.SAVE_NOTE, "value"),
        State(L.SAVE_AUTHOR, "value"),
        State(L.SAVE_FIGURE, "value"),
        State(L.URL, "search"),
        State(L.ORIGIN_VIEW, "data"),
        prevent_initial_call=True,
    )
    def save_current_view(_clicks, title, note, author, figure, search, origin):
        state, _ = parse_query(search)
        if figure in SLIDE_FIGURES:
            state = state.replace(slide_figure=figure)
        if state.dataset is None or state.present:
            raise PreventUpdate
        if not (title or "").strip():
            return no_update, html.P("Give the view a title first.", className="notice notice-error")
        try:
            view = vm.save_view(services, state, title=title, note=note or "", author=author or "",
                                parent=state.saved_view or origin)
        except (vm.DatasetNotFound, KeyError):
            return no_update, html.P("This dataset is no longer available.", className="notice notice-error")
        short = f"{base_url()}v/{view.view_id}"
        message = html.P(["Saved. Short link: ", html.A(short, href=short, className="saved-link")],
                         className="save-done")
        return "?" + to_query(state.replace(saved_view=view.view_id)), message


# --- presenting -------------------------------------------------------------------------


def _register_presentation(app, services) -> None:
    @app.callback(
        Output(L.URL, "search", allow_duplicate=True),
        Input(L.PRESENT_OPEN, "n_clicks"),
        Input(L.SLIDE_FIRST, "n_clicks"),
        Input(L.SLIDE_PREV, "n_clicks"),
        Input(L.SLIDE_NEXT, "n_clicks"),
        Input(L.SLIDE_LAST, "n_clicks"),
        Input(L.PRESENT_EXIT, "n_clicks"),
        State(L.URL, "search"),
        prevent_initial_call=True,
    )
    def navigate(_open, _first, _prev, _next, _last, _exit, search):
        state, _ = parse_query(search)
        if state.dataset is None or not ctx.triggered or not ctx.triggered[0].get("value"):
            raise PreventUpdate
        if state.follow and ctx.triggered_id != L.PRESENT_EXIT:
            raise PreventUpdate  # an attendee's page follows the presenter; it does not step on its own
        return "?" + to_query(presentation_step(services, state, ctx.triggered_id))

    app.clientside_callback(
        """function(clicks) {
            if (!clicks) { return window.dash_clientside.no_update; }
            if (document.fullscreenElement) { document.exitFullscreen(); }
            else if (document.documentElement.requestFullscreen) { document.documentElement.requestFullscreen(); }
            return window.dash_clientside.no_update;
        }""",
        Output(L.FULL_SCREEN, "title"),
        Input(L.FULL_SCREEN, "n_clicks"),
        prevent_initial_call=True,
    )


def presentation_step(services, state: ViewState, action: str) -> ViewState:
    """The state after a presentation control: open, previous, next or leave."""
    shown, slides, _ = vm.effective_state(services, state)
    if action == L.PRESENT_OPEN:
        start = _position_of(services, state) if not state.present else state.slide
        return ViewState(dataset=state.dataset, present=True, slide=start)
    if action == L.PRESENT_EXIT:
        return shown.replace(present=False, slide=1, follow=None)
    count = slides.count if slides else 1
    target = {L.SLIDE_FIRST: 1, L.SLIDE_LAST: count}.get(action)
    if target is None:
        target = state.slide + (-1 if action == L.SLIDE_PREV else 1)
    return state.replace(slide=min(max(target, 1), count))


def _position_of(services, state: ViewState) -> int:
    ids = [v.view_id for v in services.store.views_for_dataset(state.dataset)]
    return ids.index(state.saved_view) + 1 if state.saved_view in ids else 1

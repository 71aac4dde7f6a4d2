"""The app factory: ``create_app(config)`` builds a complete Ordinate server.

Everything a request needs (the data store, the compute cache) is created here
and reached through the ``Services`` object closed over by the callbacks; no
module holds mutable state, so several apps (tests) and several worker
processes (production) coexist safely. Workers share only the data directory.
"""

from __future__ import annotations

import html
import logging
from pathlib import Path

import dash
import plotly.graph_objects as go
from flask import redirect, request

from webapp import __version__
from webapp.web.access import AccessConfigError, register_access_control, register_content_security_policy
from webapp.analysis.errors import OrdinateError
from webapp.config import REPOSITORY_ROOT, AppConfig
from webapp.web.exports import register_export_routes
from webapp.web.manage import manage_link, register_manage_routes
from webapp.state import ViewState, parse_query, to_query
from webapp.store.services import DEMO_SETTING, Services, create_services, ensure_demo, forget_results_if_unused
from webapp.ui.callbacks import register_callbacks
from webapp.ui.long_view import register_long_view
from webapp.ui.locking import register_locking
from webapp.ui.layout import build_layout
from webapp.ui.view_model import recipe_for, table_summary
from webapp.web.monitoring import register_monitoring
from webapp.web.upload import register_upload_route

ASSETS = REPOSITORY_ROOT / "assets"
log = logging.getLogger("ordinate")


def create_app(config: AppConfig | None = None) -> dash.Dash:
    config = config or AppConfig.from_environment()
    services = create_services(config)
    app = dash.Dash(
        __name__,
        title=config.title,
        assets_folder=str(ASSETS),
        suppress_callback_exceptions=True,
        update_title=None,
        compress=True,  # gzip callback responses: figure payloads shrink several-fold on the wire
    )
    if config.require_access_key and not config.access_key:
        raise AccessConfigError(
            "This server needs a team access key: set ORDINATE_ACCESS_KEY or pass --access-key-file.")
    # Always registered: without a key it only adds security headers.
    register_access_control(app.server, access_key=config.access_key, secret_dir=Path(config.data_dir))
    register_manage_routes(app.server, services.store, on_delete=lambda record: forget_results_if_unused(services, record))
    register_export_routes(app.server, services)
    app.layout = build_layout(config)
    register_callbacks(app, services)
    register_long_view(app, services)
    register_locking(app, services)
    # /m/<code>: the monitoring pages, a small Dash app of their own on the same server.
    register_monitoring(app, services, assets_folder=str(ASSETS))
    register_content_security_policy(app)
    register_upload_route(app.server, services.store, limit_bytes=config.max_upload_bytes,
                          inspect=lambda record: _inspect_upload(services, record),
                          on_discard=lambda record: forget_results_if_unused(services, record))
    ensure_demo(services)
    _seed_demo_monitoring(services)
    # Plotly reads its property schema when the first figure of a process is made
    # (about 0.1 s); pay that now rather than in the first user's first view.
    go.Figure()
    _register_start_page(app, services)
    _register_short_links(app, services)
    _register_follow_links(app, services)
    app.server.config["ordinate.services"] = services
    return app


def _seed_demo_monitoring(services: Services) -> None:
    """The demo's locked reference model with its weekly uploads (demo_data/monitoring), once per data directory."""
    demo, uploads = services.config.demo_dataset, services.config.demo_monitoring
    if demo is None or uploads is None or not Path(demo).exists():
        return
    from webapp.ui.reference_locking import seed_demo_monitoring

    try:
        seed_demo_monitoring(services, Path(uploads))
    except OrdinateError:
        log.exception("the demo reference model could not be locked; the demo runs without it")


def _inspect_upload(services: Services, record) -> dict:
    """Parse an uploaded file right away so a bad file is reported at once.

    The summary carries the private manage link: only the uploader's browser
    receives it, and only its holder can rename or delete the dataset.
    """
    table = services.compute.table(record)
    if request.headers.get("X-Ordinate-Purpose") != "batch":
        # The browser opens the default view next: have its PCA under way already.
        # (A new batch is scored against the open view's model instead.)
        recipe, _ = recipe_for(ViewState(dataset=record.token), table)
        services.compute.fit_in_background(record, recipe, parallel=False)
    return {**table_summary(record, table), "manage": manage_link(record)}


def _register_start_page(app: dash.Dash, services: Services) -> None:
    """The bare address opens the demo analysis, as a complete view URL."""

    @app.server.before_request
    def open_demo():
        if request.path != "/" or request.args:
            return None
        token = services.store.get_setting(DEMO_SETTING)
        if token and services.store.dataset(token):
            return redirect("/?" + to_query(ViewState(dataset=token)), code=302)
        return None


def _register_short_links(app: dash.Dash, services: Services) -> None:
    """/v/<id>: a saved view's short link, redirecting to its full, current-format URL."""

    @app.server.route("/v/<view_id>")
    def open_saved_view(view_id: str):
        view = services.store.view(view_id)
        if view is None:
            return _plain_page("Saved view not found",
                               "This saved view is not known here. The link may be mistyped or cut short, "
                               "or its dataset was deleted by its owner."), 404
        # parse_query upgrades links written by older versions of the URL format.
        state, _ = parse_query(view.query)
        state = state.replace(dataset=view.dataset_token, saved_view=view.view_id, present=False)
        return redirect("/?" + to_query(state), code=302)


def _register_follow_links(app: dash.Dash, services: Services) -> None:
    """/follow/<code>: an attendee's way in, redirecting to the presenter's current view, followed."""

    @app.server.route("/follow/<code>")
    def open_follow_link(code: str):
        session = services.follows.get(code)
        if session is None:
            return _plain_page("Follow link not found",
                               "This follow link is not known here. It may be mistyped or cut short, "
                               "or the presentation ended long ago."), 404
        state, _ = parse_query(session.query)
        return redirect("/?" + to_query(state.replace(follow=session.code)), code=302)


def _plain_page(title: str, message: str) -> str:
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>Ordinate</title>"
        "<link rel='stylesheet' href='/assets/ordinate.css'></head><body>"
        f"<main class='card not-found-card'><h2>{html.escape(title)}</h2><p>{html.escape(message)}</p>"
        "<p><a class='small-button' href='/'>Open the start page</a></p></main></body></html>"
    )


__all__ = ["DEMO_SETTING", "create_app", "create_services", "Services", "OrdinateError", "__version__"]

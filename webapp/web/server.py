"""``ordinate serve``: the dashboard under a production WSGI server (gunicorn).

Each worker process builds its own app with :func:`webapp.web.app.create_app` from
the same configuration; workers share nothing but the data directory, whose
stores (diskcache/SQLite) are safe across processes. Several threads per
worker keep the page responsive while a long computation runs.

Each worker finishes Dash's own set-up before it accepts a connection
(:func:`warm_up`): Dash does it lazily in its first request and marks it done
before it is, so parallel first requests under threads could be answered 500
(plotly/dash#3971) and the page would open with no plots.
"""

from __future__ import annotations

import ipaddress
import logging
import sys
from pathlib import Path

from webapp.web.access import SIGN_IN_PATH
from webapp.config import AppConfig
from webapp.store.datadir import secure_data_dir

log = logging.getLogger("ordinate.server")

THREADS_PER_WORKER = 4
# Long fits (large files, parallel analysis) must not be killed mid-way.
WORKER_TIMEOUT_SECONDS = 600
# An idle kept-alive connection is closed after this long. gunicorn's 2 s default closed
# connections that clients were just reusing: under load (tests/load) a few requests per
# thousand were reset. Longer than a reverse proxy's usual upstream idle time (nginx: 60 s),
# so the proxy, not gunicorn, closes first; idle connections wait in gthread's poller and
# hold no thread.
KEEPALIVE_SECONDS = 75


def serve(*, host: str, port: int, data_dir: Path, workers: int, max_upload_mb: float | None = None,
          access_key: str | None = None) -> int:
    from gunicorn.app.base import BaseApplication

    config = AppConfig.from_environment(data_dir=Path(data_dir), max_upload_mb=max_upload_mb,
                                        access_key=access_key, require_access_key=access_key is not None)
    # Before anything is created: the data directory and all in it stay owner-only.
    secure_data_dir(config.data_dir)
    # Build once in the parent so the demo dataset is registered before workers start.
    from webapp.web.app import create_app

    create_app(config)

    class _Application(BaseApplication):
        def load_config(self):
            settings = {
                "bind": f"{_bracketed(host)}:{port}",
                "workers": max(1, int(workers)),
                "threads": THREADS_PER_WORKER,
                "worker_class": "gthread",
                "timeout": WORKER_TIMEOUT_SECONDS,
                "keepalive": KEEPALIVE_SECONDS,
                "accesslog": None,
                "errorlog": "-",
                "loglevel": "warning",
                # View URLs hold every setting (and excluded sample labels); gunicorn
                # caps this at 8190 (0 would mean unlimited).
                "limit_request_line": 8190,
            }
            for key, value in settings.items():
                self.cfg.set(key, value)

        def load(self):
            app = create_app(config)
            warm_up(app)
            return app.server

    print(f"Ordinate is serving {config.data_dir.resolve()} at http://{_bracketed(host)}:{port}/ "
          f"({workers} worker(s)). Press Ctrl+C to stop.", file=sys.stderr, flush=True)
    _Application().run()
    return 0


def warm_up(app) -> None:
    """Run one request through ``app`` so Dash's lazy set-up is complete before real requests arrive.

    The sign-in page is public, so the request passes the access check with or
    without a key and reaches Dash's own before-request set-up (without a key
    it is a 404, after the set-up has run).
    """
    with app.server.test_client() as client:
        client.get(SIGN_IN_PATH, headers={"Accept": "text/html"})
    if not app.registered_paths:
        log.warning("Dash registered no script libraries during warm-up; the first page may load without plots")


def _bracketed(host: str) -> str:
    try:
        return f"[{host}]" if ipaddress.ip_address(host).version == 6 else host
    except ValueError:
        return host

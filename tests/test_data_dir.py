"""The data directory and everything in it are owner-only (webapp/store/datadir.py).

POSIX mode bits (stat(2)); "owner-only" means no group or other permission at
all, which is common practice for files holding secrets (like ~/.ssh).
"""

from __future__ import annotations

import os
import stat

import pytest

from webapp.web.app import create_app
from webapp.config import DEMO_DATASET, AppConfig
from webapp.store.datadir import secure_data_dir

pytestmark = pytest.mark.skipif(os.name != "posix", reason="POSIX permissions")


@pytest.fixture
def usual_umask():
    previous = os.umask(0o022)
    yield
    os.umask(previous)


def _loose(root):
    found = []
    for path in [root, *root.rglob("*")]:
        try:
            mode = stat.S_IMODE(path.lstat().st_mode)
        except FileNotFoundError:  # a result lock let go by a background fit meanwhile
            continue
        if mode & 0o077:
            found.append((str(path.relative_to(root)), oct(mode)))
    return found


def test_upload_and_fit_leave_nothing_readable_by_others(tmp_path, usual_umask):
    data_dir = tmp_path / "data"
    app = create_app(AppConfig(data_dir=data_dir, demo_dataset=DEMO_DATASET))
    services = app.server.config["ordinate.services"]
    client = app.server.test_client()
    page = client.get("/", follow_redirects=True)
    assert page.status_code == 200
    record = services.store.add_bytes(DEMO_DATASET.read_bytes(), "batches.csv")
    table = services.compute.table(record)
    from webapp.state import ViewState
    from webapp.ui.view_model import recipe_for

    recipe, _ = recipe_for(ViewState(dataset=record.token), table)
    services.compute.fitted(record, recipe)  # the complete fit, written to the results cache
    stores = {path.parent.name for path in data_dir.rglob("cache.db")}
    assert {"index", "results"} <= stores  # both SQLite stores exist
    assert stat.S_IMODE(data_dir.stat().st_mode) == 0o700
    assert _loose(data_dir) == []


def test_an_existing_data_directory_is_tightened(tmp_path, usual_umask):
    data_dir = tmp_path / "old"
    (data_dir / "index").mkdir(parents=True)
    (data_dir / "index" / "cache.db").write_bytes(b"")
    os.chmod(data_dir, 0o755)
    os.chmod(data_dir / "index" / "cache.db", 0o644)
    secure_data_dir(data_dir)
    assert _loose(data_dir) == []

"""``ordinate datasets``: list and delete datasets from the server's shell.

For administrators with access to the data directory, for example to honour a
deletion request when the uploader's private manage link is lost. The web pages
never list datasets; this command does, on the machine that holds them.
"""

from __future__ import annotations

import time
from pathlib import Path

from webapp.analysis.errors import OrdinateError

__all__ = ["list_main", "delete_main"]


def list_main(data_dir: Path) -> int:
    """Print one line per dataset, oldest first: dataset code, name, file, size, upload time, saved views."""
    services = _services(data_dir)
    records = services.store.datasets()
    if not records:
        print(f"No datasets in {data_dir}.")
        return 0
    print(f"{'dataset code':<26} {'uploaded (UTC)':<17} {'size':>9} {'views':>5}  name (file)")
    for record in records:
        views = len(services.store.views_for_dataset(record.token))
        name = record.display_name if record.display_name == record.filename else \
            f"{record.display_name} ({record.filename})"
        print(f"{record.token:<26} {_utc(record.created):<17} {_size(record.size_bytes):>9} {views:>5}  {name}")
    return 0


def delete_main(data_dir: Path, token: str, *, confirmed: bool) -> int:
    """Delete a dataset, its saved views, its file (unless shared) and its cached results.

    Without ``confirmed`` nothing is deleted: what would be deleted is printed
    and the command asks for ``--yes``.
    """
    services = _services(data_dir)
    record = services.store.dataset(token)
    if record is None:
        raise OrdinateError(f"No dataset with the dataset code '{token}' in {data_dir}; "
                            "`ordinate datasets list` shows them.")
    views = services.store.views_for_dataset(token)
    what = (f"dataset '{record.display_name}' ({record.filename}, {_size(record.size_bytes)}, uploaded "
            f"{_utc(record.created)} UTC) and its {len(views)} saved view(s)")
    if not confirmed:
        raise OrdinateError(f"This would delete the {what}; nothing was deleted. Add --yes to delete it.")
    services.store.delete_dataset(token)
    if not services.store.blob_path(record).exists():
        services.compute.forget(record.content_hash)
    print(f"Deleted the {what}. Its links no longer open; copies people downloaded and backups are not affected.")
    return 0


def _services(data_dir: Path):
    from webapp.store.services import create_services
    from webapp.config import AppConfig

    data_dir = Path(data_dir)
    # Check first: opening the store would create an empty data directory at a mistyped path.
    if not (data_dir / "index").is_dir():
        raise OrdinateError(f"'{data_dir}' is not an Ordinate data directory (it has no 'index' folder).")
    return create_services(AppConfig(data_dir=data_dir, demo_dataset=None))


def _utc(timestamp: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M", time.gmtime(timestamp))


def _size(size_bytes: int) -> str:
    if size_bytes < 1024:
        return f"{size_bytes} B"
    if size_bytes < 1024 * 1024:
        return f"{size_bytes / 1024:.1f} KB"
    return f"{size_bytes / 1024 / 1024:.1f} MB"

"""The services of one data directory: its dataset store and its result cache.

Built by :func:`create_services` for the app factory (one per worker), the
report command and the administrator commands alike, so that every entry point
opens the data directory the same way (owner-only, see
:mod:`webapp.store.datadir`). Nothing here is module-level state: each call
returns new objects over the shared directory.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path

from webapp.config import DEMO_TITLE, AppConfig
from webapp.store.compute import ComputeLayer
from webapp.store.datadir import secure_data_dir
from webapp.store.follow import FollowSessions
from webapp.store.reference_models import ReferenceModelStore
from webapp.store.storage import DataStore, DatasetRecord

__all__ = ["DEMO_SETTING", "Services", "create_services", "ensure_demo", "forget_results_if_unused"]

#: The store setting that names the demo dataset's token.
DEMO_SETTING = "demo-token"
log = logging.getLogger("ordinate")


@dataclass(frozen=True)
class Services:
    config: AppConfig
    store: DataStore
    compute: ComputeLayer
    follows: FollowSessions
    reference_models: ReferenceModelStore


def create_services(config: AppConfig) -> Services:
    secure_data_dir(config.data_dir)
    store = DataStore(config.data_dir)
    compute = ComputeLayer(store, Path(config.data_dir) / "results")
    return Services(config, store, compute, FollowSessions(store), ReferenceModelStore(config.data_dir))


def forget_results_if_unused(services: Services, record: DatasetRecord) -> None:
    """Drop cached results of a deleted dataset, unless another dataset holds the same bytes."""
    if not services.store.blob_path(record).exists():
        services.compute.forget(record.content_hash)


def ensure_demo(services: Services) -> None:
    """Register the demo dataset once per data directory (the first worker wins)."""
    demo = services.config.demo_dataset
    if demo is None or services.store.get_setting(DEMO_SETTING) or not Path(demo).exists():
        return
    record = services.store.add_bytes(Path(demo).read_bytes(), Path(demo).name, title=DEMO_TITLE)
    if not services.store.add_if_absent(DEMO_SETTING, record.token):
        log.info("another worker registered the demo dataset first")

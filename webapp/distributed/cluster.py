"""The Dask cluster a fit runs on: an embedded local cluster, or an existing one by address."""

from __future__ import annotations

import logging
import os
from contextlib import contextmanager

from webapp.analysis.errors import OrdinateError

MAX_DEFAULT_WORKERS = 4
CONNECT_TIMEOUT = "15s"


def default_workers() -> int:
    """One single-threaded worker process per core, at most ``MAX_DEFAULT_WORKERS``."""
    return max(1, min(MAX_DEFAULT_WORKERS, os.cpu_count() or 1))


@contextmanager
def dask_client(scheduler: str | None = None, workers: int | None = None, *, processes: bool = True):
    """A ``distributed.Client``; the local cluster it started, if any, is closed on leaving.

    Without ``scheduler`` a ``LocalCluster`` of ``workers`` single-threaded
    worker processes is started (Dask's nanny sets one BLAS thread per
    worker). With it, the client connects to that scheduler, whose workers
    must run the same Ordinate version and see the data at the same paths.
    """
    from distributed import Client, LocalCluster

    if workers is not None and workers < 1:
        raise OrdinateError(f"The number of Dask workers must be at least 1; got {workers}.")
    if scheduler:
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError, ValueError) as error:
            raise OrdinateError(f"Cannot reach the Dask scheduler at '{scheduler}' ({error}).") from None
        try:
            yield client
        finally:
            client.close()
        return
    cluster = LocalCluster(
        n_workers=workers or default_workers(),
        threads_per_worker=1,
        processes=processes,
        dashboard_address=":0",  # any free port: several clusters (and other services) may share the machine
        silence_logs=logging.ERROR,
    )
    try:
        client = Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()

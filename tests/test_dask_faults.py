"""A Dask worker that dies mid-fit: Dask reruns its work (same numbers) or the fit fails with a clear message.

Real LocalCluster of 2 worker processes; a piece's task ends its worker
process with ``os._exit`` (as an out-of-memory kill would). Dask's scheduler
reruns the tasks of a lost worker up to ``distributed.scheduler.allowed-failures``
times (3 by default, Dask documentation), then raises KilledWorker.
Reference numbers: the same pass with no fault. Data: scikit-learn's bundled
wine table (Forina et al., UCI) in 4 Parquet parts.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from sklearn.datasets import load_wine

from webapp.analysis.recipe import Recipe
from webapp.distributed import blocks
from webapp.distributed.cluster import dask_client
from webapp.distributed.engine import fit_long, run_pass
from webapp.distributed.sources import open_source
from webapp.store.compute import ComputeLayer
from webapp.store.long_fits import LongFits
from webapp.store.storage import DataStore


@pytest.fixture(scope="module")
def client():
    with dask_client(workers=2, processes=True) as client:
        yield client


@pytest.fixture(scope="module")
def source(tmp_path_factory):
    folder = tmp_path_factory.mktemp("wine")
    frame = load_wine(as_frame=True).frame.drop(columns="target")
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 4)):
        frame.iloc[rows].to_parquet(folder / f"part-{i}.parquet", index=False)
    return open_source(folder)


def _plan(source, client):
    # The plan of a real fit (shift, offsets), taken from the engine itself.
    return fit_long(source, Recipe(), client).plan


def test_a_worker_killed_once_is_replaced_and_the_numbers_stay(client, source, tmp_path):
    plan = _plan(source, client)
    flag = str(tmp_path / "killed-once")

    def dies_once(frame, index, path, plan):  # pickled by value: runs in the worker processes
        if index == 2 and not os.path.exists(flag):
            open(flag, "w").close()
            os._exit(1)
        return blocks.summarise(frame, index, path, plan)

    done = []
    faulty = run_pass(client, source, dies_once, blocks.merge_summaries, (plan,), (plan.sample_rows,),
                      progress=lambda i, total: done.append((i, total)))
    assert os.path.exists(flag)  # a worker really died
    clean = run_pass(client, source, blocks.summarise, blocks.merge_summaries, (plan,), (plan.sample_rows,))
    assert faulty.moments.count == clean.moments.count == 178
    np.testing.assert_array_equal(faulty.moments.cross, clean.moments.cross)
    np.testing.assert_array_equal(faulty.moments.mean, clean.moments.mean)
    assert done[-1] == (len(source.pieces), len(source.pieces))


def test_a_worker_that_keeps_dying_fails_the_fit_clearly_and_nothing_is_cached(client, source, tmp_path):
    plan = _plan(source, client)

    def always_dies(frame, index, path, plan):
        if index == 1:
            os._exit(1)
        return blocks.summarise(frame, index, path, plan)

    compute = ComputeLayer(DataStore(tmp_path / "data"), tmp_path / "results")
    fits = LongFits(compute)
    key = "longfit/test/" + "0" * 64 + "/fault"
    fits.start(key, lambda progress: run_pass(client, source, always_dies, blocks.merge_summaries, (plan,),
                                              (plan.sample_rows,), progress=lambda d, t: progress("moments", d, t)))
    status = fits.wait(key, 240)
    assert status["state"] == "failed"
    assert "A Dask worker died while reading the data, and the retries failed too" in status["message"]
    assert fits.result(key) is None and key not in compute.cache

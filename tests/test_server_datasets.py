"""Server-side datasets: `ordinate datasets add` registers data where they lie; nothing is copied.

Data: scikit-learn's bundled wine table (Forina et al., UCI), split into parts.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest
from sklearn.datasets import load_wine

from webapp.cli.main import main
from webapp.config import AppConfig
from webapp.store.services import create_services


def _frame():
    frame = load_wine(as_frame=True).frame.drop(columns="target")
    frame.insert(0, "sample", [f"w{i:03d}" for i in range(len(frame))])
    return frame


def _tree_bytes(root) -> int:
    return sum(os.path.getsize(os.path.join(d, f)) for d, _, files in os.walk(root) for f in files)


@pytest.fixture()
def parts(tmp_path):
    frame = _frame()
    (tmp_path / "pq").mkdir()
    (tmp_path / "csv").mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(tmp_path / "pq" / f"part-{i}.parquet", index=False)
        frame.iloc[rows].to_csv(tmp_path / "csv" / f"part-{i}.csv", index=False)
    return tmp_path


def _services(data_dir):
    return create_services(AppConfig(data_dir=data_dir, demo_dataset=None))


def test_registering_a_parquet_directory_copies_nothing(parts, tmp_path, capsys):
    data_dir = tmp_path / "data"
    assert main(["datasets", "add", str(parts / "pq"), "--name", "wine parts", "--data-dir", str(data_dir)]) == 0
    store = _services(data_dir).store
    [record] = store.datasets()
    assert record.server_side and record.engine == "dask" and record.scheduler == ""
    assert record.location == str(parts / "pq") and record.display_name == "wine parts"
    assert record.size_bytes == _tree_bytes(parts / "pq")
    # Nothing copied: the data directory holds no blob and is much smaller than the parts.
    assert not any((data_dir / "blobs").iterdir())
    assert record.token in capsys.readouterr().out
    assert main(["datasets", "list", "--data-dir", str(data_dir)]) == 0
    listing = capsys.readouterr().out
    assert "server-side, dask engine" in listing and str(parts / "pq") in listing


def test_registering_a_csv_glob_with_a_scheduler(parts, tmp_path):
    data_dir = tmp_path / "data"
    glob = str(parts / "csv" / "part-*.csv")
    assert main(["datasets", "add", glob, "--scheduler", "tcp://10.0.0.5:8786", "--data-dir", str(data_dir)]) == 0
    [record] = _services(data_dir).store.datasets()
    assert record.location == glob and record.scheduler == "tcp://10.0.0.5:8786"


def test_the_fingerprint_follows_the_parts(parts):
    from webapp.distributed.sources import fingerprint, open_source

    first, size = fingerprint(open_source(parts / "pq"))
    assert fingerprint(open_source(parts / "pq")) == (first, size)
    path = parts / "pq" / "part-1.parquet"
    later = time.time() + 5
    os.utime(path, (later, later))  # the same bytes, touched: the fit must not be trusted blindly
    assert fingerprint(open_source(parts / "pq"))[0] != first


def test_a_broken_source_is_refused_and_nothing_registered(parts, tmp_path, capsys):
    data_dir = tmp_path / "data"
    assert main(["datasets", "add", str(tmp_path / "nowhere"), "--data-dir", str(data_dir)]) == 2
    assert "does not exist" in capsys.readouterr().err
    assert not (data_dir / "index").exists() or _services(data_dir).store.datasets() == []


def test_deleting_never_deletes_the_users_files(parts, tmp_path):
    data_dir = tmp_path / "data"
    assert main(["datasets", "add", str(parts / "pq"), "--data-dir", str(data_dir)]) == 0
    [record] = _services(data_dir).store.datasets()
    before = sorted(os.listdir(parts / "pq"))
    assert main(["datasets", "delete", record.token, "--data-dir", str(data_dir), "--yes"]) == 0
    assert sorted(os.listdir(parts / "pq")) == before and _tree_bytes(parts / "pq") == record.size_bytes
    assert _services(data_dir).store.datasets() == []

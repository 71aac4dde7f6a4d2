"""Locked reference models on disk: frozen copies, versions, uploads, manager key, durability."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import model_to_dict
from webapp.store.reference_models import ReferenceModelStore
from tests.monitoring.wine import csv_bytes, fitted_reference, reference_and_uploads

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def wine():
    reference, uploads = reference_and_uploads()
    model, period, _ = fitted_reference(reference)
    return model, period, uploads


def _lock(store, wine, name="Wine release model"):
    model, period, _ = wine
    return store.lock(model, name=name, reference=period, data_fingerprint="f" * 64, label_column="wine")


def test_a_locked_model_reads_back_equal_and_versions_count_per_name(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    first, key = _lock(store, wine)
    second, _ = _lock(store, wine, name="  wine RELEASE model ")
    other, _ = _lock(store, wine, name="Another model")
    assert (first.version, second.version, other.version) == (1, 2, 1)
    again = ReferenceModelStore(tmp_path).get(first.code)  # another process's view of the same directory
    assert model_to_dict(again.model) == model_to_dict(wine[0])
    np.testing.assert_array_equal(again.reference.t2, wine[1].t2)
    assert [m.version for m in store.versions("Wine release model")] == [1, 2]
    assert store.check_manager_key(first.code, key) and not store.check_manager_key(first.code, key + "x")
    assert store.get("not-a-code") is None and store.get("A" * 24) is None
    with pytest.raises(OrdinateError, match="name"):
        _lock(store, wine, name="   ")


def test_a_locked_model_does_not_change_when_its_source_is_edited_or_deleted(tmp_path, wine):
    from webapp.config import AppConfig
    from webapp.state import ViewState, to_query
    from webapp.store.services import create_services
    from webapp.ui.reference_locking import lock_saved_view

    services = create_services(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    record = services.store.add_bytes(csv_bytes(reference_and_uploads()[0]), "reference.csv")
    query = to_query(ViewState(dataset=record.token, components=3))
    view = services.store.save_view(record.token, query, title="Reference", content_hash=record.content_hash,
                                    engine_version="x")
    locked, _ = lock_saved_view(services, view.view_id, "Wine release model")
    assert locked.model.components == 3 and locked.data_fingerprint == record.content_hash
    assert locked.source_view_id == view.view_id and locked.label_column == "wine"
    frozen = model_to_dict(locked.model)
    # An edited view (other scaling) is another saved view; deleting the dataset removes the source.
    services.store.save_view(record.token, to_query(ViewState(dataset=record.token, scaling="pareto")),
                             title="Edited", content_hash=record.content_hash, engine_version="x")
    assert services.store.delete_dataset(record.token)
    assert model_to_dict(services.reference_models.get(locked.code).model) == frozen
    with pytest.raises(OrdinateError, match="saved view"):
        lock_saved_view(services, view.view_id, "Wine release model")


def test_uploads_are_appended_in_order_and_only_the_manager_removes_one(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    locked, key = _lock(store, wine)
    uploads = wine[2]
    infos = [store.add_upload(locked.code, csv_bytes(u), f"later-{i}.csv", uploaded_by="QC lab")
             for i, u in enumerate(uploads, 1)]
    assert [i.sample_count for i in infos] == [len(u) for u in uploads]
    assert [u.file_name for u in store.uploads(locked.code)] == ["later-1.csv", "later-2.csv", "later-3.csv"]
    frame = store.frame(locked.code)
    assert list(frame["sample"]) == [w for u in uploads for w in u["wine"]]
    assert not store.remove_upload(locked.code, infos[1].upload_id, "wrong key")
    assert len(store.frame(locked.code)) == len(frame)
    assert store.remove_upload(locked.code, infos[1].upload_id, key)
    assert list(store.frame(locked.code)["sample"]) == [*uploads[0]["wine"], *uploads[2]["wine"]]
    assert list(store.upload_table(locked.code, infos[0].upload_id).sample_labels()) == list(uploads[0]["wine"])


def test_a_file_that_cannot_be_scored_is_refused_and_nothing_is_stored(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    locked, _ = _lock(store, wine)
    lacking = wine[2][0].drop(columns=["alcohol"])
    with pytest.raises(OrdinateError, match="alcohol"):
        store.add_upload(locked.code, csv_bytes(lacking), "lacking.csv")
    with pytest.raises(OrdinateError, match="order column 'run'"):
        store.add_upload(locked.code, csv_bytes(wine[2][0]), "no-run.csv", order_column="run")
    assert store.uploads(locked.code) == [] and len(store.frame(locked.code)) == 0
    assert list(store.file_dir.iterdir()) == []


_CHILD = textwrap.dedent("""
    import os, signal, sys
    sys.path.insert(0, {root!r})
    from pathlib import Path
    from webapp.store.reference_models import ReferenceModelStore
    store = ReferenceModelStore({data!r})
    data = Path({csv!r}).read_bytes()
    if {stage!r} == "before-rename":
        os.replace = lambda *a, **k: os.kill(os.getpid(), signal.SIGKILL)  # dies with the file written, not placed
    store.add_upload({code!r}, data, "later.csv", uploaded_by="pipeline")
    print("added", flush=True)
    os.kill(os.getpid(), signal.SIGKILL)  # no clean shutdown of diskcache or SQLite
""")


@pytest.mark.parametrize("stage", ["after-return", "before-rename"])
def test_an_upload_survives_a_kill_9_or_is_not_there_at_all(tmp_path, wine, stage):
    store = ReferenceModelStore(tmp_path)
    locked, _ = _lock(store, wine)
    csv = tmp_path / "later.csv"
    csv.write_bytes(csv_bytes(wine[2][0]))
    script = _CHILD.format(root=str(ROOT), data=str(tmp_path), csv=str(csv), code=locked.code, stage=stage)
    child = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120)
    assert child.returncode == -signal.SIGKILL
    fresh = ReferenceModelStore(tmp_path)
    if stage == "after-return":
        assert "added" in child.stdout
        (upload,) = fresh.uploads(locked.code)
        assert upload.uploaded_by == "pipeline" and upload.sample_count == len(wine[2][0])
        assert list(fresh.frame(locked.code)["sample"]) == list(wine[2][0]["wine"])
    else:
        assert "added" not in child.stdout and fresh.uploads(locked.code) == []
        assert not any(p.suffix == ".csv" for p in fresh.file_dir.iterdir())  # only the temporary part, if any
        fresh.add_upload(locked.code, csv.read_bytes(), "later.csv")  # the store still works
        assert len(fresh.uploads(locked.code)) == 1
    assert os.path.exists(fresh.index.directory)

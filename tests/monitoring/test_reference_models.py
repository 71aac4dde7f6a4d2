"""Locked reference models on disk: frozen copies, versions, uploads, manager key, durability."""

from __future__ import annotations

import hashlib
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
    # An edited view (other scaling, K) is another saved view; its model is locked as version 2.
    edited = services.store.save_view(record.token, to_query(ViewState(dataset=record.token, scaling="pareto",
                                                                       components=2)),
                                      title="Edited", content_hash=record.content_hash, engine_version="x")
    newer, _ = lock_saved_view(services, edited.view_id, "wine release MODEL")
    assert newer.version == 2 and newer.model.components == 2 and model_to_dict(newer.model) != frozen
    # Deleting the dataset removes the source of both; the versions stay readable and unchanged.
    assert services.store.delete_dataset(record.token)
    assert model_to_dict(services.reference_models.get(locked.code).model) == frozen
    assert [m.version for m in services.reference_models.versions("Wine release model")] == [1, 2]
    np.testing.assert_array_equal(services.reference_models.get(newer.code).model.loadings, newer.model.loadings)
    with pytest.raises(OrdinateError, match="saved view"):
        lock_saved_view(services, view.view_id, "Wine release model")


def test_uploads_are_appended_in_order_and_only_the_manager_removes_one(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    locked, key = _lock(store, wine)
    uploads = wine[2]
    infos = [store.add_upload(locked.code, csv_bytes(u), f"later-{i}.csv", uploaded_by="QC lab")
             for i, u in enumerate(uploads, 1)]
    assert [i.sample_count for i in infos] == [len(u) for u in uploads] and infos[0].notes == ()
    assert [u.file_name for u in store.uploads(locked.code)] == ["later-1.csv", "later-2.csv", "later-3.csv"]
    frame = store.frame(locked.code)
    assert list(frame["sample"]) == [w for u in uploads for w in u["wine"]]
    assert not store.remove_upload(locked.code, infos[1].upload_id, "wrong key")
    assert len(store.frame(locked.code)) == len(frame)
    assert store.remove_upload(locked.code, infos[1].upload_id, key)
    assert list(store.frame(locked.code)["sample"]) == [*uploads[0]["wine"], *uploads[2]["wine"]]
    assert list(store.upload_table(locked.code, infos[0].upload_id).sample_labels()) == list(uploads[0]["wine"])


def test_what_scoring_said_about_a_file_is_kept_with_its_upload(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    locked, _ = _lock(store, wine)
    upload = wine[2][0].copy()
    upload.loc[2, "alcohol"] = np.nan
    upload["operator_badge"] = 7.0
    info = store.add_upload(locked.code, csv_bytes(upload), "gaps.csv")
    (kept,) = ReferenceModelStore(tmp_path).uploads(locked.code)
    assert kept.notes == info.notes and len(info.notes) == 2
    assert "1 missing value" in info.notes[0] and "operator_badge" in info.notes[1]


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
    if {stage!r} == "inside-transaction":
        import diskcache
        setitem = diskcache.Cache.__setitem__
        def dying(self, key, value):  # the new upload list is written, its transaction not yet committed
            setitem(self, key, value)
            if key[0] == "uploads":
                os.kill(os.getpid(), signal.SIGKILL)
        diskcache.Cache.__setitem__ = dying
    store.add_upload({code!r}, data, "later.csv", uploaded_by="pipeline")
    print("added", flush=True)
    os.kill(os.getpid(), signal.SIGKILL)  # no clean shutdown of diskcache or SQLite
""")


@pytest.mark.parametrize("stage", ["after-return", "before-rename", "inside-transaction"])
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
        # Killed while writing: no upload is visible, not even part of one (SQLite rolls the transaction back).
        assert "added" not in child.stdout and fresh.uploads(locked.code) == []
        assert len(fresh.frame(locked.code)) == 0
        placed = [p for p in fresh.file_dir.iterdir() if p.suffix == ".csv"]
        assert placed == ([] if stage == "before-rename" else [fresh.file_dir / f"{hashlib.sha256(csv.read_bytes()).hexdigest()}.csv"])
        fresh.add_upload(locked.code, csv.read_bytes(), "later.csv")  # the store still works
        assert len(fresh.uploads(locked.code)) == 1
        assert list(fresh.frame(locked.code)["sample"]) == list(wine[2][0]["wine"])
    assert os.path.exists(fresh.index.directory)


def test_an_order_column_sets_production_order_and_a_bad_one_is_refused_at_upload(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    locked, _ = _lock(store, wine)
    first, second = wine[2][0].copy(), wine[2][1].copy()
    first["run"], second["run"] = range(100, 120), range(0, 20)  # the second file was made first
    store.add_upload(locked.code, csv_bytes(first), "first.csv", order_column="run")
    store.add_upload(locked.code, csv_bytes(second), "second.csv", order_column="run")
    assert store.production_order_column(locked.code) == "run"
    assert list(store.frame(locked.code)["sample"]) == [*second["wine"], *first["wine"]]
    # Refused before anything is kept, so a kept upload never breaks the frame.
    bad = second.copy()
    bad["run"] = [*map(str, range(3)), "soon", *map(str, range(4, 20))]
    with pytest.raises(OrdinateError, match="neither a number nor a date"):
        store.add_upload(locked.code, csv_bytes(bad), "bad.csv", order_column="run")
    dated = second.copy()
    dated["run"] = [f"2026-04-{d:02d}" for d in range(1, 21)]
    with pytest.raises(OrdinateError, match="earlier uploads hold numbers"):
        store.add_upload(locked.code, csv_bytes(dated), "dated.csv", order_column="run")
    assert len(store.uploads(locked.code)) == 2 and len(store.frame(locked.code)) == 40
    # An upload without the order column: the frame falls back to upload order.
    store.add_upload(locked.code, csv_bytes(wine[2][2]), "third.csv")
    assert store.production_order_column(locked.code) is None
    assert list(store.frame(locked.code)["sample"]) == [*first["wine"], *second["wine"], *wine[2][2]["wine"]]


def test_removing_the_last_upload_of_some_bytes_deletes_the_file(tmp_path, wine):
    store = ReferenceModelStore(tmp_path)
    one, key_one = _lock(store, wine)
    two, key_two = _lock(store, wine, name="Second model")
    data = csv_bytes(wine[2][0])
    a = store.add_upload(one.code, data, "same.csv")
    b = store.add_upload(two.code, data, "same.csv")
    (path,) = store.file_dir.glob("*.csv")
    assert store.remove_upload(one.code, a.upload_id, key_one) and path.exists()  # still named by model two
    assert not store.remove_upload(two.code, b.upload_id, key_one)  # another model's key
    assert store.remove_upload(two.code, b.upload_id, key_two) and not path.exists()
    again = store.add_upload(one.code, data, "same.csv")  # the same bytes can come back
    assert list(store.upload_table(one.code, again.upload_id).sample_labels()) == list(wine[2][0]["wine"])


def test_the_stored_frame_equals_scoring_every_file_again(tmp_path, wine):
    import pandas as pd

    from webapp.analysis.ingest import read_table
    from webapp.analysis.monitoring import monitoring_frame

    store = ReferenceModelStore(tmp_path)
    locked, _ = _lock(store, wine)
    files = []
    for i, upload in enumerate(wine[2]):
        dated = upload.copy()
        dated["made"] = [f"2026-0{3 - i}-01T06:{d:02d}" for d in range(len(dated))]  # later files made earlier
        files.append(csv_bytes(dated))
        store.add_upload(locked.code, files[-1], f"u{i}.csv", order_column="made")
    pairs = [(info, read_table(data, filename=info.file_name)) for info, data in zip(store.uploads(locked.code), files)]
    expected = monitoring_frame(locked.model, pairs, "made", "wine")  # the analysis layer, from the files
    assert expected["order"].iloc[0].startswith("2026-01-01T06:00")
    pd.testing.assert_frame_equal(ReferenceModelStore(tmp_path).frame(locked.code), expected)
    # An index without the scored parts (written before they were kept) scores the files again.
    fresh = ReferenceModelStore(tmp_path)
    for info in fresh.uploads(locked.code):
        fresh.index.delete(("part", locked.code, info.upload_id))
    pd.testing.assert_frame_equal(fresh.frame(locked.code), expected)

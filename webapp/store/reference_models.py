"""Locked reference models and their uploads of new samples, on disk, shared by every worker.

STAND-IN written on branch monitor-screens to the monitoring contract while the
monitor-core branch had not delivered; on a merge conflict take monitor-core's
version (the page uses only the contract's names).

Index: a diskcache (SQLite) under ``data_dir/reference-models/index``; upload
files: content-addressed blobs under ``data_dir/reference-models/blobs``,
written to a temporary file, fsynced and renamed into place before the index
names them, so an acknowledged upload survives a crash of the process.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import tempfile
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import diskcache
import pandas as pd

from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import ReferenceModel, project_table
from webapp.analysis.monitoring import ReferencePeriod, UploadInfo, monitoring_frame
from webapp.store.storage import _clean_filename, _clean_text, is_token, new_token

__all__ = ["DEMO_MODEL_SETTING", "LockedModel", "ReferenceModelStore", "seed_demo"]

DEMO_MODEL_SETTING = "demo-reference-model"
DEMO_MODEL_NAME = "Oat dessert release model (synthetic demo)"


@dataclass(frozen=True)
class LockedModel:
    code: str
    name: str
    version: int
    locked_at: str
    source_view_id: str | None
    dataset_token: str | None
    data_fingerprint: str
    model: ReferenceModel
    reference: ReferencePeriod
    order_column: str | None = None


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


class ReferenceModelStore:
    def __init__(self, data_dir: str | os.PathLike):
        root = Path(data_dir) / "reference-models"
        self.blob_dir = root / "blobs"
        self.blob_dir.mkdir(parents=True, exist_ok=True)
        self.index = diskcache.Cache(str(root / "index"), size_limit=2**40, eviction_policy="none")
        self._frames: dict = {}  # per-process memo: (code, upload ids) -> frame

    # --- models ---------------------------------------------------------------------

    def lock(self, model: ReferenceModel, *, name: str, reference: ReferencePeriod, source_view_id=None,
             dataset_token=None, data_fingerprint: str, order_column=None) -> tuple[LockedModel, str]:
        name = _clean_text(name, 120)
        if not name:
            from webapp.analysis.errors import OrdinateError

            raise OrdinateError("Give the reference model a name.")
        key = new_token()
        with self.index.transact():
            version = 1 + max((m.version for m in self.versions(name)), default=0)
            locked = LockedModel(new_token(), name, version, _now(), source_view_id, dataset_token,
                                 data_fingerprint, model, reference, order_column)
            self.index.set(("model", locked.code), locked)
            self.index.set(("key", locked.code), hashlib.sha256(key.encode()).hexdigest())
            self.index.set(("uploads", locked.code), ())
            self.index.set(("codes",), (*self.index.get(("codes",), ()), locked.code))
        return locked, key

    def get(self, code) -> LockedModel | None:
        return self.index.get(("model", code)) if is_token(code) else None

    def all(self) -> list[LockedModel]:
        return [m for m in (self.get(c) for c in self.index.get(("codes",), ())) if m is not None]

    def versions(self, name: str) -> list[LockedModel]:
        wanted = str(name).casefold()
        return sorted((m for m in self.all() if m.name.casefold() == wanted), key=lambda m: m.version)

    def check_manager_key(self, code, key) -> bool:
        stored = self.index.get(("key", code)) if is_token(code) else None
        if not stored or not isinstance(key, str) or not key:
            return False
        return hmac.compare_digest(stored, hashlib.sha256(key.encode()).hexdigest())

    # --- uploads --------------------------------------------------------------------

    def add_upload(self, code, data: bytes, file_name: str, *, uploaded_by: str = "",
                   order_column=None) -> UploadInfo:
        from webapp.analysis.errors import OrdinateError

        locked = self.get(code)
        if locked is None:
            raise OrdinateError("This monitoring link is not known here.")
        name = _clean_filename(file_name)
        scored = project_table(locked.model, read_table(data, filename=name))  # raises for a file it cannot score
        digest = hashlib.sha256(data).hexdigest()
        self._write_blob(digest, data)
        info = UploadInfo(new_token(), name, _clean_text(uploaded_by, 100), _now(), len(scored.sample_labels))
        with self.index.transact():
            self.index.set(("upload", code, info.upload_id), (info, digest))
            self.index.set(("uploads", code), (*self.index.get(("uploads", code), ()), info.upload_id))
        return info

    def _write_blob(self, digest: str, data: bytes) -> None:
        path = self.blob_dir / digest
        if path.exists():
            return
        fd, temp = tempfile.mkstemp(dir=self.blob_dir, prefix=".upload-")
        try:
            with os.fdopen(fd, "wb") as handle:
                handle.write(data)
                handle.flush()
                os.fsync(handle.fileno())
            os.replace(temp, path)
            directory = os.open(self.blob_dir, os.O_RDONLY)
            try:
                os.fsync(directory)
            finally:
                os.close(directory)
        finally:
            if os.path.exists(temp):
                os.unlink(temp)

    def uploads(self, code) -> list[UploadInfo]:
        ids = self.index.get(("uploads", code), ()) if is_token(code) else ()
        entries = [self.index.get(("upload", code, upload_id)) for upload_id in ids]
        return [entry[0] for entry in entries if entry]

    def upload_table(self, code, upload_id):
        entry = self.index.get(("upload", code, upload_id)) if is_token(code) else None
        if entry is None:
            from webapp.analysis.errors import OrdinateError

            raise OrdinateError("This upload is no longer stored; reload the page.")
        info, digest = entry
        return read_table((self.blob_dir / digest).read_bytes(), filename=info.file_name)

    def remove_upload(self, code, upload_id, manager_key) -> bool:
        if not self.check_manager_key(code, manager_key):
            return False
        with self.index.transact():
            ids = self.index.get(("uploads", code), ())
            if upload_id not in ids:
                return False
            self.index.set(("uploads", code), tuple(i for i in ids if i != upload_id))
            self.index.delete(("upload", code, upload_id))
        return True

    def frame(self, code) -> pd.DataFrame:
        locked = self.get(code)
        uploads = self.uploads(code)
        memo_key = (code, tuple(u.upload_id for u in uploads))
        if memo_key not in self._frames:
            pairs = [(info, self.upload_table(code, info.upload_id)) for info in uploads]
            self._frames = {memo_key: monitoring_frame(locked.model, pairs, locked.order_column)}
        return self._frames[memo_key].copy()


def seed_demo(services, *, demo_token: str | None, upload_files=()) -> LockedModel | None:
    """Lock the demo reference model from the demo dataset (``demo_token``) once per data directory,
    then append ``upload_files`` as its uploads."""
    from webapp.analysis.model_io import model_from_analysis
    from webapp.analysis.monitoring import reference_period
    from webapp.analysis.pipeline import analyse
    from webapp.analysis.recipe import Recipe

    existing = services.store.get_setting(DEMO_MODEL_SETTING)
    if existing and services.reference_models.get(existing):
        return services.reference_models.get(existing)
    token = demo_token
    record = services.store.dataset(token) if token else None
    if record is None:
        return None
    table = services.compute.table(record)
    analysis = analyse(table, Recipe(missing="mean"), components="auto")
    model = model_from_analysis(analysis)
    fitted = analysis.fitted
    reference = reference_period(model, fitted.prepared.sample_labels, fitted.pca.scores,
                                 analysis.diagnostics.t2, analysis.diagnostics.q)
    locked, _ = services.reference_models.lock(model, name=DEMO_MODEL_NAME, reference=reference,
                                               dataset_token=token, data_fingerprint=record.content_hash)
    if not services.store.add_if_absent(DEMO_MODEL_SETTING, locked.code):
        return services.reference_models.get(services.store.get_setting(DEMO_MODEL_SETTING))
    for path in upload_files:
        services.reference_models.add_upload(locked.code, Path(path).read_bytes(), Path(path).name,
                                             uploaded_by="demo (synthetic)")
    return locked

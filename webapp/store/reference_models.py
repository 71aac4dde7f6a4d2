"""Locked reference models and the uploads monitored against them, on disk.

Layout under ``<data dir>/reference-models/``:

* ``index/``: a diskcache (SQLite) index shared by every worker process:
  ``("model", code)`` -> the frozen model (its JSON form, the reference
  period, name, version, fingerprint, manager key); ``("uploads", code)`` ->
  the list of uploads in upload order; ``("part", code, upload id)`` -> the
  upload scored against the model (plain lists), written in the same
  transaction, so the monitoring frame is built without reading the files again.
* ``files/<sha256>.csv``: the bytes of each uploaded file, written to a
  temporary file, flushed and fsynced, then renamed into place, before the
  index entry that names it is committed (SQLite, synchronous=FULL). A process
  killed at any moment therefore leaves either no upload or a complete one; a
  file without an index entry is ignored (and reused when the same bytes
  arrive again). Removing an upload deletes its file when no other upload
  names the same bytes; both happen inside an index transaction, which
  serialises them with adding.

A locked model is a frozen copy: it holds its own model JSON, so editing or
deleting the dataset or the saved view it came from changes nothing here.
"""

from __future__ import annotations

import dataclasses
import hashlib
import hmac
import os
import secrets
import threading
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import diskcache
import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import ReferenceModel, model_from_dict, model_to_dict, project_table
from webapp.analysis.monitoring import (
    ReferencePeriod,
    UploadInfo,
    frame_from_parts,
    reference_period,
    score_upload,
    with_label_column,
)
from webapp.store.storage import TemporaryFile, is_token, new_token, replace_durably

__all__ = ["LockedModel", "ReferenceModelStore", "MAX_NAME_CHARS", "MAX_UPLOADED_BY_CHARS"]

MAX_NAME_CHARS = 120
MAX_UPLOADED_BY_CHARS = 120
_FRAME_MEMO = 16  # monitoring frames kept per process (a frame is rebuilt when the uploads change)


@dataclass(frozen=True, eq=False)
class LockedModel:
    code: str  # the monitoring link's code: /m/<code>
    name: str
    version: int
    locked_at: str  # ISO 8601, UTC
    source_view_id: str | None
    dataset_token: str | None
    data_fingerprint: str  # SHA-256 of the reference data's file
    model: ReferenceModel
    reference: ReferencePeriod
    order_column: str | None = None
    label_column: str | None = None  # the reference data's label column, used for uploads that have it
    sequence: int = 0  # 1, 2, ... in the order models were locked in this data directory

    @property
    def title(self) -> str:
        return f"{self.name} v{self.version}"


class ReferenceModelStore:
    """Locked reference models of one data directory; safe to use from several processes."""

    def __init__(self, data_dir: str | os.PathLike):
        self.root = Path(data_dir) / "reference-models"
        self.file_dir = self.root / "files"
        self.file_dir.mkdir(parents=True, exist_ok=True)
        # synchronous=FULL: a committed upload survives a power cut too, not only a killed process.
        self.index = diskcache.Cache(str(self.root / "index"), size_limit=2**40, eviction_policy="none",
                                     sqlite_synchronous=2)
        self._frames: dict[tuple, object] = {}
        self._frames_lock = threading.Lock()  # one store serves every thread of a worker

    # --- locking ---------------------------------------------------------------

    def lock(self, model: ReferenceModel, *, name: str, reference: ReferencePeriod, data_fingerprint: str,
             source_view_id: str | None = None, dataset_token: str | None = None,
             order_column: str | None = None, label_column: str | None = None) -> tuple[LockedModel, str]:
        """Freeze ``model`` under ``name``; returns the locked model and its manager key (given out once).

        The version is one more than the highest version already locked under the
        same name (names compare without regard to case or surrounding spaces).
        """
        name = _clean(name, MAX_NAME_CHARS)
        if not name:
            raise OrdinateError("Give the reference model a name, for example “Release model”.")
        code, key = new_token(), secrets.token_urlsafe(24)
        record = {
            "name": name,
            "locked_at": _now(),
            "source_view_id": source_view_id,
            "dataset_token": dataset_token,
            "data_fingerprint": str(data_fingerprint),
            "order_column": order_column,
            "label_column": label_column,
            "manager_key": key,
            "model": model_to_dict(model),
            "reference": {
                "labels": list(reference.labels),
                "scores": np.asarray(reference.scores, dtype=np.float64).tolist(),
                "t2": np.asarray(reference.t2, dtype=np.float64).tolist(),
                "q": np.asarray(reference.q, dtype=np.float64).tolist(),
            },
        }
        with self.index.transact():
            records = list(self._records())
            record["version"] = 1 + max((m["version"] for m in records if _same_name(m["name"], name)), default=0)
            record["sequence"] = 1 + max((m.get("sequence", 0) for m in records), default=0)
            self.index[("model", code)] = record
            self.index[("uploads", code)] = []
        return self.get(code), key

    def get(self, code: object) -> LockedModel | None:
        if not is_token(code):
            return None
        record = self.index.get(("model", code))
        return None if record is None else _locked(code, record)

    def versions(self, name: str) -> list[LockedModel]:
        """Every model locked under ``name``, oldest version first."""
        found = [(code, m) for code, m in self._records(with_codes=True) if _same_name(m["name"], name)]
        return [_locked(code, m) for code, m in sorted(found, key=lambda item: item[1]["version"])]

    def all(self) -> list[LockedModel]:
        """Every locked model, by name then version."""
        found = sorted(self._records(with_codes=True), key=lambda item: (item[1]["name"].casefold(), item[1]["version"]))
        return [_locked(code, m) for code, m in found]

    def check_manager_key(self, code: str, key: object) -> bool:
        record = self.index.get(("model", code)) if is_token(code) else None
        return bool(record and isinstance(key, str) and key
                    and hmac.compare_digest(record["manager_key"].encode(), key.encode()))

    # --- uploads ---------------------------------------------------------------

    def add_upload(self, code: str, data: bytes, file_name: str, *, uploaded_by: str = "",
                   order_column: str | None = None) -> UploadInfo:
        """Score a file of new samples against the model and keep it as the newest upload.

        Raises :class:`OrdinateError` (nothing stored) when the file cannot be read
        or scored, or its order column is missing, has an empty or unreadable
        value, or holds numbers where earlier uploads have dates (or the reverse).
        """
        locked = self.get(code)
        if locked is None:
            raise OrdinateError("No reference model with this monitoring link is on this server.")
        file_name = _clean(file_name, 200) or "upload.csv"
        table = with_label_column(read_table(bytes(data), filename=file_name), locked.label_column)
        projection = project_table(locked.model, table)
        column = order_column or locked.order_column
        if column is not None and column not in table.frame.columns:
            raise OrdinateError(f"“{file_name}” has no order column '{column}', which this model's uploads use; "
                                "add it to the file.")
        info = UploadInfo(upload_id=new_token(), file_name=file_name,
                          uploaded_by=_clean(uploaded_by, MAX_UPLOADED_BY_CHARS), uploaded_at=_now(),
                          sample_count=len(projection.sample_labels), order_column=column,
                          notes=tuple(projection.warnings))
        # Scoring with the order column checks every value of it (a number or a date) before anything is kept.
        part = score_upload(locked.model, info, table, order_column=column, projection=projection)
        kinds = {"date" if isinstance(v, pd.Timestamp) else "number" for v in part["order_key"] if v is not None}
        if len(kinds) > 1:
            raise OrdinateError(f"The order column '{column}' of “{file_name}” mixes numbers and dates; use one kind.")
        kind = kinds.pop() if kinds else None
        digest = hashlib.sha256(data).hexdigest()
        self._write_file(digest, data)
        with self.index.transact():
            if self.index.get(("model", code)) is None:  # removed meanwhile
                raise OrdinateError("This reference model was removed while the file was being added.")
            uploads = list(self.index.get(("uploads", code), []))
            earlier = {u.get("order_kind") for u in uploads if u.get("order_column") == column} - {None}
            if kind is not None and earlier and kind not in earlier:
                raise OrdinateError(f"The order column '{column}' of “{file_name}” holds {kind}s, but earlier "
                                    f"uploads hold {earlier.pop()}s; use the same kind in every file.")
            if not self._file_path(digest).exists():  # removed by a removal of the same bytes meanwhile
                self._write_file(digest, data)
            repeated = [(n, u) for n, u in enumerate(uploads, 1) if u["sha256"] == digest]
            if repeated:  # kept (it may be meant), but said: a pipeline run twice would count samples twice
                number, first = repeated[0]
                info = dataclasses.replace(info, notes=(*info.notes, (
                    f"The same file was already added as upload {number} ({first['uploaded_at'][:16].replace('T', ' ')} "
                    "UTC); remove one of them if it was sent twice by mistake.")))
            uploads.append({**info.__dict__, "notes": list(info.notes), "sha256": digest, "order_kind": kind})
            self.index[("part", code, info.upload_id)] = _part_record(part)
            self.index[("uploads", code)] = uploads
        return info

    def uploads(self, code: str) -> list[UploadInfo]:
        return [_upload_info(u) for u in self._upload_records(code)]

    def upload_table(self, code: str, upload_id: str):
        """The ingested table of one upload."""
        for record in self._upload_records(code):
            if record["upload_id"] == upload_id:
                locked = self.get(code)
                table = read_table(self._file_path(record["sha256"]).read_bytes(), filename=record["file_name"])
                return with_label_column(table, locked.label_column if locked else None)
        raise OrdinateError("This upload is not stored here (it may have been removed).")

    def remove_upload(self, code: str, upload_id: str, manager_key: object) -> bool:
        """Remove one upload; False when the manager key is wrong or the upload is unknown."""
        if not self.check_manager_key(code, manager_key):
            return False
        with self.index.transact():
            uploads = list(self.index.get(("uploads", code), []))
            kept = [u for u in uploads if u["upload_id"] != upload_id]
            if len(kept) == len(uploads):
                return False
            self.index[("uploads", code)] = kept
            self.index.delete(("part", code, upload_id))
            (removed,) = [u["sha256"] for u in uploads if u["upload_id"] == upload_id]
            if not any(u["sha256"] == removed for _, records in self._all_upload_records() for u in records):
                self._file_path(removed).unlink(missing_ok=True)  # the data go with the last upload naming them
        return True

    def production_order_column(self, code: str) -> str | None:
        """The order column the monitoring frame sorts by: the one every upload names, else None (upload order)."""
        return _common_order_column(self._upload_records(code))

    def frame(self, code: str):
        """The monitoring frame (:func:`webapp.analysis.monitoring.monitoring_frame`) of every upload."""
        locked = self.get(code)
        if locked is None:
            raise OrdinateError("No reference model with this monitoring link is on this server.")
        records = self._upload_records(code)
        key = (code, tuple(r["upload_id"] for r in records))
        with self._frames_lock:
            frame = self._frames.get(key)
        if frame is None:
            by_column = _common_order_column(records) is not None
            stored = [self._part(locked, record) for record in records]
            # One frame for all uploads (building one per upload costs more than the sort), keyed by
            # the order column's values, or by the upload's number for upload order.
            combined = _combined_part(stored, [r["upload_id"] for r in records], locked.model.components, by_column)
            frame = frame_from_parts(locked.model, [combined], by_order_column=True)
            with self._frames_lock:
                while len(self._frames) >= _FRAME_MEMO:
                    self._frames.pop(next(iter(self._frames)))
                self._frames[key] = frame
        return frame.copy()

    # --- internals -------------------------------------------------------------

    def _records(self, *, with_codes: bool = False):
        for key in list(self.index.iterkeys()):
            if isinstance(key, tuple) and key[0] == "model":
                record = self.index.get(key)
                if record is not None:
                    yield (key[1], record) if with_codes else record

    def _part(self, locked: LockedModel, record: dict) -> dict:
        """One upload's scored part (plain lists): from the index, else scored again from its file and kept."""
        key = ("part", locked.code, record["upload_id"])
        stored = self.index.get(key)
        if stored is None:
            table = read_table(self._file_path(record["sha256"]).read_bytes(), filename=record["file_name"])
            stored = _part_record(score_upload(locked.model, _upload_info(record), table,
                                               order_column=record.get("order_column"),
                                               label_column=locked.label_column))
            self.index.add(key, stored)  # unless another worker kept it first
        return stored

    def _all_upload_records(self):
        for key in list(self.index.iterkeys()):
            if isinstance(key, tuple) and key[0] == "uploads":
                yield key[1], self.index.get(key, [])

    def _upload_records(self, code: str) -> list[dict]:
        return list(self.index.get(("uploads", code), [])) if is_token(code) else []

    def _file_path(self, digest: str) -> Path:
        return self.file_dir / f"{digest}.csv"

    def _write_file(self, digest: str, data: bytes) -> None:
        target = self._file_path(digest)
        if target.exists() and target.stat().st_size == len(data):
            return
        with TemporaryFile(self.file_dir) as (handle, temp):
            handle.write(data)
        replace_durably(temp, target)  # the index names the file only after this

def _locked(code: str, record: dict) -> LockedModel:
    model = model_from_dict(record["model"])
    ref = record["reference"]
    reference = reference_period(model, ref["labels"], np.asarray(ref["scores"], dtype=np.float64),
                                 ref["t2"], ref["q"])
    return LockedModel(code=code, name=record["name"], version=int(record["version"]), locked_at=record["locked_at"],
                       source_view_id=record["source_view_id"], dataset_token=record["dataset_token"],
                       data_fingerprint=record["data_fingerprint"], model=model, reference=reference,
                       order_column=record.get("order_column"), label_column=record.get("label_column"),
                       sequence=int(record.get("sequence", 0)))


def _upload_info(record: dict) -> UploadInfo:
    return UploadInfo(upload_id=record["upload_id"], file_name=record["file_name"], uploaded_by=record["uploaded_by"],
                      uploaded_at=record["uploaded_at"], sample_count=int(record["sample_count"]),
                      order_column=record.get("order_column"), notes=tuple(record.get("notes", ())))


def _part_record(part) -> dict:
    """A scored part in plain lists (no pickled pandas objects in the index): dates as ISO 8601 text."""
    scores = part[[c for c in part.columns if c.startswith("PC")]].to_numpy(dtype=np.float64)
    return {
        "sample": [str(v) for v in part["sample"]],
        "t2": part["t2"].tolist(),
        "q": part["q"].tolist(),
        "t2_limit": float(part["t2_limit"].iloc[0]) if len(part) else 0.0,
        "q_limit": float(part["q_limit"].iloc[0]) if len(part) else 0.0,
        "scores": scores.tolist(),
        "order_key": [None if v is None else (v.isoformat() if isinstance(v, pd.Timestamp) else float(v))
                      for v in part["order_key"]],
    }


def _combined_part(stored: list[dict], upload_ids: list[str], k: int, by_column: bool):
    """The parts of every upload (upload order) as one part of :func:`score_upload`'s form."""
    counts = [len(part["sample"]) for part in stored]
    n = sum(counts)

    def join(name: str) -> list:
        return [v for part in stored for v in part[name]]

    frame = pd.DataFrame({
        "upload": pd.Series(np.repeat(np.array(upload_ids, dtype=object), counts), dtype=object),
        "sample": pd.Series(join("sample"), dtype=object),
        "t2": np.asarray(join("t2"), dtype=np.float64),
        "q": np.asarray(join("q"), dtype=np.float64),
        "t2_limit": np.repeat([part["t2_limit"] for part in stored], counts).astype(np.float64),
        "q_limit": np.repeat([part["q_limit"] for part in stored], counts).astype(np.float64),
    })
    frame["t2_beyond"] = frame["t2"] > frame["t2_limit"]
    frame["q_beyond"] = frame["q"] > frame["q_limit"]
    scores = np.asarray(join("scores"), dtype=np.float64).reshape(n, k)
    for a in range(k):
        frame[f"PC{a + 1}"] = scores[:, a]
    if by_column:
        keys = [v if v is None or isinstance(v, float) else pd.Timestamp(v) for v in join("order_key")]
    else:
        keys = list(np.repeat(np.arange(1, len(stored) + 1), counts).tolist())
    frame["order_key"] = pd.Series(keys, dtype=object)
    return frame


def _common_order_column(records: list[dict]) -> str | None:
    """Production order by the order column only when every upload names the same one."""
    columns = {r.get("order_column") for r in records}
    return columns.pop() if len(columns) == 1 else None


def _same_name(a: str, b: str) -> bool:
    return a.strip().casefold() == b.strip().casefold()


def _clean(text: object, limit: int) -> str:
    return "".join(ch for ch in str(text or "") if ch.isprintable()).strip()[:limit]


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")

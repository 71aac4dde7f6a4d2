"""Datasets on disk: content-addressed files plus an index of unguessable tokens.

Layout of the data directory::

    blobs/<sha256>.bin   the uploaded bytes, named by their content hash
    index/               a diskcache (SQLite) index: token -> dataset record

A dataset is reached only through its token (``secrets.token_urlsafe``, 144
random bits); the content hash identifies the bytes for caching and
provenance and never appears in a path built from user input. Files are
written to a temporary name and renamed into place, so a crash never leaves a
half-written dataset, and diskcache's SQLite index is safe to share between
worker processes.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import re
import secrets
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import BinaryIO

import diskcache

TOKEN_BYTES = 18  # 144 random bits
TOKEN_PATTERN = re.compile(r"^[A-Za-z0-9_-]{16,64}$")
_HASH_PATTERN = re.compile(r"^[0-9a-f]{64}$")
CHUNK_BYTES = 1 << 20


class UploadTooLarge(Exception):
    """The upload exceeded the configured size limit."""

    def __init__(self, limit_bytes: int):
        super().__init__(f"limit {limit_bytes} bytes")
        self.limit_bytes = limit_bytes


@dataclass(frozen=True)
class DatasetRecord:
    token: str
    content_hash: str
    filename: str
    size_bytes: int
    created: float
    title: str = ""
    manage_key: str = ""  # second secret: only its holder may rename or delete
    # Server-side data (registered by an administrator, never copied): where the parts are,
    # the engine that reads them and the Dask scheduler to use ("" = a local cluster).
    # For these, ``content_hash`` fingerprints the parts' paths, sizes and times at registration.
    location: str = ""
    engine: str = ""
    scheduler: str = ""

    @property
    def display_name(self) -> str:
        return self.title or self.filename

    @property
    def server_side(self) -> bool:
        return bool(self.location)


@dataclass(frozen=True)
class SavedView:
    """An immutable snapshot of a view: the state's query string plus words about it."""

    view_id: str
    dataset_token: str
    query: str  # the view state as written by state.to_query at save time (its version inside)
    title: str
    note: str  # Markdown source, rendered safely (no raw HTML)
    author: str
    created: float
    content_hash: str  # dataset fingerprint when saved
    engine_version: str
    parent: str | None = None  # the view this one was duplicated from


def new_token() -> str:
    """An unguessable code that never starts with '-' (a shell command would read it as an option)."""
    while True:
        token = secrets.token_urlsafe(TOKEN_BYTES)
        if not token.startswith("-"):
            return token


def is_token(value: object) -> bool:
    return isinstance(value, str) and bool(TOKEN_PATTERN.match(value))


class DataStore:
    """Datasets kept in ``data_dir``; safe to use from several processes."""

    def __init__(self, data_dir: str | os.PathLike):
        self.root = Path(data_dir)
        self.blob_dir = self.root / "blobs"
        self.blob_dir.mkdir(parents=True, exist_ok=True)
        self.index = diskcache.Cache(str(self.root / "index"), size_limit=2**40, eviction_policy="none")

    # --- writing ------------------------------------------------------------

    def add_bytes(self, data: bytes, filename: str, *, title: str = "") -> DatasetRecord:
        content_hash = hashlib.sha256(data).hexdigest()
        with self.index.transact():
            if not self._blob_path(content_hash).exists():
                with self._temporary_file() as (handle, temp_path):
                    handle.write(data)
                self._place_blob(temp_path, content_hash)
            return self._register(content_hash, filename, len(data), title)

    def add_stream(self, stream: BinaryIO, filename: str, *, limit_bytes: int, title: str = "") -> DatasetRecord:
        """Copy a request body to disk in chunks, hashing as it goes.

        Raises :class:`UploadTooLarge` as soon as more than ``limit_bytes``
        arrive; the partial file is removed.
        """
        digest, size = hashlib.sha256(), 0
        with self._temporary_file() as (handle, temp_path):
            while chunk := stream.read(CHUNK_BYTES):
                size += len(chunk)
                if size > limit_bytes:
                    handle.close()
                    os.unlink(temp_path)
                    raise UploadTooLarge(limit_bytes)
                digest.update(chunk)
                handle.write(chunk)
        content_hash = digest.hexdigest()
        with self.index.transact():
            self._place_blob(temp_path, content_hash)
            return self._register(content_hash, filename, size, title)

    def add_server_side(self, location: str, fingerprint: str, size: int, *, name: str, engine: str = "dask",
                        scheduler: str = "") -> DatasetRecord:
        """Register data that stay where they are (nothing is copied); ``fingerprint`` names their parts."""
        if not _HASH_PATTERN.match(fingerprint):
            raise ValueError("not a fingerprint")
        record = DatasetRecord(new_token(), fingerprint, _clean_filename(name), int(size), time.time(),
                               _clean_text(name, 200), new_token(), location=str(location), engine=engine,
                               scheduler=_clean_text(scheduler, 300))
        self.index.set(("dataset", record.token), asdict(record))
        return record

    def _place_blob(self, temp_path: str, content_hash: str) -> None:
        # Called inside an index transaction, as is the removal of a blob nobody uses:
        # a deletion of the same bytes can then never remove the file between its
        # placing and its registration.
        target = self._blob_path(content_hash)
        if target.exists():
            os.unlink(temp_path)
        else:
            replace_durably(temp_path, target)

    def _register(self, content_hash: str, filename: str, size: int, title: str) -> DatasetRecord:
        record = DatasetRecord(new_token(), content_hash, _clean_filename(filename), size, time.time(),
                               _clean_text(title, 200), new_token())
        with self.index.transact():
            self.index.set(("dataset", record.token), asdict(record))
            self.index.set(("blob-users", content_hash), self.index.get(("blob-users", content_hash), 0) + 1)
        return record

    # --- saved views ----------------------------------------------------------

    def save_view(self, dataset_token: str, query: str, *, title: str, note: str = "", author: str = "",
                  content_hash: str, engine_version: str, parent: str | None = None) -> SavedView:
        """Store a new immutable view; safe against concurrent saves from other processes."""
        if self.dataset(dataset_token) is None:
            raise KeyError(dataset_token)
        view = SavedView(new_token(), dataset_token, query, _clean_text(title, 200) or "Untitled view",
                         _clean_text(note, 20_000, keep_newlines=True), _clean_text(author, 100), time.time(),
                         content_hash, engine_version, parent if is_token(parent) else None)
        # One SQLite transaction: the view and its place in the list appear together or not at all.
        with self.index.transact():
            self.index.set(("view", view.view_id), asdict(view))
            order = self.index.get(("views-of", dataset_token), ())
            self.index.set(("views-of", dataset_token), (*order, view.view_id))
        return view

    def view(self, view_id: object) -> SavedView | None:
        if not is_token(view_id):
            return None
        data = self.index.get(("view", view_id))
        return SavedView(**data) if data else None

    def views_for_dataset(self, dataset_token: str) -> list[SavedView]:
        """Saved views of a dataset, oldest first."""
        ids = self.index.get(("views-of", dataset_token), ()) if is_token(dataset_token) else ()
        views = [self.view(view_id) for view_id in ids]
        return [v for v in views if v is not None]

    # --- sample sets: long lists of excluded samples, kept out of the URL ----------

    def save_sample_set(self, dataset_token: str, labels) -> str:
        """Keep a list of sample labels for a dataset; returns its code for links.

        The code is derived from the dataset and the sorted, distinct labels, so
        the same set always gets the same code. Sets are immutable and are
        deleted with their dataset.
        """
        if self.dataset(dataset_token) is None:
            raise KeyError(dataset_token)
        canonical = tuple(sorted({str(label) for label in labels}))
        digest = hashlib.sha256(json.dumps([dataset_token, canonical], ensure_ascii=False).encode("utf-8"))
        set_id = base64.urlsafe_b64encode(digest.digest()[:18]).decode("ascii")  # 144 bits, 24 characters
        with self.index.transact():
            if self.index.get(("sample-set", set_id)) is None:
                self.index.set(("sample-set", set_id), {"dataset": dataset_token, "labels": canonical})
                owned = self.index.get(("sets-of", dataset_token), ())
                self.index.set(("sets-of", dataset_token), (*owned, set_id))
        return set_id

    def sample_set(self, dataset_token: str, set_id: object) -> tuple[str, ...] | None:
        """The labels of a sample set of this dataset, or None (unknown code, or another dataset's set)."""
        if not is_token(set_id):
            return None
        data = self.index.get(("sample-set", set_id))
        if not data or data.get("dataset") != dataset_token:
            return None
        return tuple(data["labels"])

    # --- management (holders of the manage key only) -----------------------------

    def check_manage_key(self, dataset_token: str, key: object) -> bool:
        record = self.dataset(dataset_token)
        return bool(record and record.manage_key and isinstance(key, str)
                    and hmac.compare_digest(record.manage_key.encode(), key.encode()))

    def rename_dataset(self, dataset_token: str, title: str) -> DatasetRecord | None:
        with self.index.transact():
            record = self.dataset(dataset_token)
            if record is None:
                return None
            data = {**asdict(record), "title": _clean_text(title, 200)}
            self.index.set(("dataset", dataset_token), data)
        return DatasetRecord(**data)

    def delete_dataset(self, dataset_token: str) -> bool:
        """Forget a dataset and all its views; remove its file when no other record uses it."""
        with self.index.transact():
            record = self.dataset(dataset_token)
            if record is None:
                return False
            for view_id in self.index.get(("views-of", dataset_token), ()):
                self.index.delete(("view", view_id))
            self.index.delete(("views-of", dataset_token))
            for set_id in self.index.get(("sets-of", dataset_token), ()):
                self.index.delete(("sample-set", set_id))
            self.index.delete(("sets-of", dataset_token))
            self.index.delete(("dataset", dataset_token))
            if record.server_side:
                return True  # the administrator's files are never touched
            users = self.index.get(("blob-users", record.content_hash), 1) - 1
            if users > 0:
                self.index.set(("blob-users", record.content_hash), users)
            else:
                self.index.delete(("blob-users", record.content_hash))
                self._blob_path(record.content_hash).unlink(missing_ok=True)
        return True

    # --- reading ------------------------------------------------------------

    def datasets(self) -> list[DatasetRecord]:
        """Every dataset, oldest first: for administrators at the server (no page lists datasets)."""
        found = (self.index.get(key) for key in self.index.iterkeys()
                 if isinstance(key, tuple) and key[0] == "dataset")
        return sorted((DatasetRecord(**data) for data in found if data), key=lambda record: record.created)

    def dataset(self, token: object) -> DatasetRecord | None:
        if not is_token(token):
            return None
        data = self.index.get(("dataset", token))
        return DatasetRecord(**data) if data else None

    def blob_path(self, record: DatasetRecord) -> Path:
        return self._blob_path(record.content_hash)

    def read_bytes(self, record: DatasetRecord) -> bytes:
        return self.blob_path(record).read_bytes()

    # --- small settings shared by all workers --------------------------------

    def get_setting(self, name: str, default=None):
        return self.index.get(("setting", name), default)

    def set_setting(self, name: str, value) -> None:
        self.index.set(("setting", name), value)

    def add_if_absent(self, name: str, value) -> bool:
        """Atomically set a setting only if it is not set yet; True if this call set it."""
        return self.index.add(("setting", name), value)

    # --- internals ----------------------------------------------------------

    def _blob_path(self, content_hash: str) -> Path:
        if not _HASH_PATTERN.match(content_hash):
            raise ValueError("not a content hash")
        return self.blob_dir / f"{content_hash}.bin"

    def _temporary_file(self):
        return TemporaryFile(self.blob_dir)


def replace_durably(temp_path: str, target: Path) -> None:
    """Rename a flushed, fsynced temporary file into place, then fsync the directory.

    After this returns, a crash or power loss leaves the complete file under its
    name; before, at worst a stray temporary file.
    """
    os.replace(temp_path, target)
    directory = os.open(Path(target).parent, os.O_RDONLY)
    try:
        os.fsync(directory)
    finally:
        os.close(directory)


class TemporaryFile:
    """A temp file in the blob directory (same file system, so rename is atomic)."""

    def __init__(self, directory: Path):
        self.directory = directory

    def __enter__(self):
        fd, self.path = tempfile.mkstemp(dir=self.directory, prefix=".upload-", suffix=".part")
        self.handle = os.fdopen(fd, "wb")
        return self.handle, self.path

    def __exit__(self, exc_type, exc, tb):
        if not self.handle.closed:
            self.handle.flush()
            os.fsync(self.handle.fileno())
            self.handle.close()
        if exc_type is not None and os.path.exists(self.path):
            os.unlink(self.path)
        return False


def _clean_text(text: object, limit: int, *, keep_newlines: bool = False) -> str:
    """User text for titles and notes: no control characters, bounded length."""
    allowed = "\n\t" if keep_newlines else ""
    text = "".join(ch for ch in str(text or "") if ch.isprintable() or ch in allowed)
    return text.strip()[:limit]


def _clean_filename(name: str) -> str:
    base = os.path.basename(str(name or "")).strip()
    base = re.sub(r"[\x00-\x1f\x7f]", "", base)[:200]
    return base or "uploaded data"

"""The file's bytes: opening, size and binary checks, encoding detection and decoding."""

from __future__ import annotations

import codecs
import io
import mmap
import os
from collections.abc import Iterator

import numpy as np

from webapp.analysis.errors import OrdinateError

_MB = 1024 * 1024
SNIFF_BYTES = 64 * 1024
_CHECK_CHUNK_BYTES = 4 * _MB

_BINARY_SIGNATURES: tuple[tuple[bytes, str], ...] = (
    (b"PK\x03\x04", "a zip archive (an .xlsx or .ods workbook is one)"),
    (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "an old-style Excel workbook (.xls)"),
    (b"%PDF", "a PDF document"),
    (b"\x89PNG\r\n\x1a\n", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"GIF8", "a GIF image"),
    (b"\x1f\x8b", "a gzip-compressed file"),
    (b"PAR1", "a Parquet file"),
)
_BOMS: tuple[tuple[bytes, str], ...] = (
    (codecs.BOM_UTF32_LE, "utf-32"),  # before UTF-16 LE: it starts with the same two bytes
    (codecs.BOM_UTF32_BE, "utf-32"),
    (codecs.BOM_UTF8, "utf-8-sig"),
    (codecs.BOM_UTF16_LE, "utf-16"),
    (codecs.BOM_UTF16_BE, "utf-16"),
)
_CONTROL_BYTES = bytes(b for b in range(32) if b not in (9, 10, 12, 13))


class RawFile:
    """The file's bytes: held in memory, or memory-mapped from disk.

    Mapping a path instead of reading it saves a copy of the whole file; the
    checks below only scan it, and pandas then reads the path itself.
    """

    def __init__(self, buffer: bytes | mmap.mmap, path: str | None = None):
        self._buffer = buffer
        self.path = path
        self.size = len(buffer)

    def prefix(self, n_bytes: int) -> bytes:
        return bytes(self._buffer[:n_bytes])

    def find(self, needle: bytes, start: int = 0) -> int:
        return self._buffer.find(needle, start)

    def end_of_line(self, n_lines: int) -> int:
        """Bytes up to and including the ``n_lines``-th line break (the file's size if it has fewer).

        In UTF-16 and UTF-32 a line feed is one byte of a wider character; decoding a
        prefix leaves out a character cut at its end, and the caller grows its prefix
        when a record is incomplete.
        """
        end = 0
        for _ in range(n_lines):
            found = self._buffer.find(b"\n", end)
            if found < 0:
                return self.size
            end = found + 1
        return min(self.size, end + 3)  # the rest of a wide line-feed character

    def is_ascii(self) -> bool:
        if isinstance(self._buffer, bytes):
            return self._buffer.isascii()
        return self.size == 0 or int(np.frombuffer(self._buffer, dtype=np.uint8).max()) < 128

    def chunks(self, chunk_bytes: int) -> Iterator[bytes]:
        for start in range(0, self.size, chunk_bytes):
            yield self._buffer[start : start + chunk_bytes]

    def for_pandas(self) -> str | io.BytesIO:
        return self.path if self.path is not None else io.BytesIO(self._buffer)

    def open_binary(self) -> io.BufferedIOBase:
        return open(self.path, "rb") if self.path is not None else io.BytesIO(self._buffer)

    def close(self) -> None:
        if isinstance(self._buffer, mmap.mmap):
            self._buffer.close()


def open_source(source: bytes | str | os.PathLike, max_bytes: int, subject: str) -> RawFile:
    if isinstance(source, (bytes, bytearray, memoryview)):
        data = bytes(source)
        _check_size(len(data), max_bytes, subject)
        return RawFile(data)
    if not isinstance(source, (str, os.PathLike)):
        raise OrdinateError(
            f"Ordinate cannot read data of type {type(source).__name__}; "
            "give it a file path or the file's bytes."
        )
    path = os.fspath(source)
    try:
        with open(path, "rb") as handle:
            size = os.fstat(handle.fileno()).st_size
            _check_size(size, max_bytes, subject)
            if size == 0:
                return RawFile(b"", path)
            return RawFile(mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ), path)
    except FileNotFoundError as error:
        raise OrdinateError(f"{subject} was not found. Check the file name and folder.") from error
    except IsADirectoryError as error:
        raise OrdinateError(f"{subject} is a folder, not a file. Choose a CSV file.") from error
    except PermissionError as error:
        raise OrdinateError(f"{subject} could not be opened: permission denied.") from error
    except (OSError, ValueError) as error:
        raise OrdinateError(f"{subject} could not be opened ({error}).") from error


def _check_size(n_bytes: int, max_bytes: int, subject: str) -> None:
    if n_bytes > max_bytes:
        raise OrdinateError(
            f"{subject} is {_format_size(n_bytes)}, which is over the {_format_size(max_bytes, exact=True)} "
            "limit. Split it into smaller files, or remove columns you do not need."
        )


def _format_size(n_bytes: int, exact: bool = False) -> str:
    """'2.8 MB' (1 MB = 1024 * 1024 bytes); KB below a tenth of a MB; '200 MB' for round limits."""
    if n_bytes >= _MB / 10:
        size, unit = n_bytes / _MB, "MB"
    else:
        size, unit = n_bytes / 1024, "KB"
    if exact and size == round(size):
        return f"{round(size)} {unit}"
    return f"{size:.1f} {unit}"


def reject_empty_or_binary_start(raw_file: RawFile, subject: str) -> None:
    head = raw_file.prefix(SNIFF_BYTES)
    only_whitespace = raw_file.size <= SNIFF_BYTES and not head.strip()
    if only_whitespace or head in {bom for bom, _ in _BOMS}:
        raise OrdinateError(f"{subject} is empty. Choose a CSV file with a header row and data rows.")
    for signature, kind in _BINARY_SIGNATURES:
        if head.startswith(signature):
            raise OrdinateError(
                f"{subject} is {kind}, not a text table. "
                "Open it in its program and save or export it as CSV (comma- or semicolon-separated)."
            )


def reject_binary_content(raw_file: RawFile, subject: str) -> None:
    nul_at = raw_file.find(b"\x00")
    if nul_at >= 0:
        raise OrdinateError(
            f"{subject} contains binary data (a NUL byte at byte {nul_at + 1}), so it is not a text table. "
            "Export the data as CSV and try again."
        )
    head = raw_file.prefix(SNIFF_BYTES)
    n_control = len(head) - len(head.translate(None, _CONTROL_BYTES))
    if n_control > 0.01 * len(head):
        raise OrdinateError(
            f"{subject} contains binary data (control characters), so it is not a text table. "
            "Export the data as CSV and try again."
        )


# --------------------------------------------------------------------------
# Encoding
# --------------------------------------------------------------------------


def detect_encoding(raw_file: RawFile) -> str:
    head = raw_file.prefix(4096)
    for bom, encoding in _BOMS:
        if head.startswith(bom):
            return encoding
    bomless_utf16 = _guess_bomless_utf16(head)
    if bomless_utf16:
        return bomless_utf16
    if raw_file.is_ascii() or _decodes_strictly(raw_file, "utf-8"):
        return "utf-8"
    if _decodes_strictly(raw_file, "cp1252"):
        return "cp1252"
    return "latin-1"


def _guess_bomless_utf16(head: bytes) -> str | None:
    """UTF-16 text without a byte-order mark: ASCII characters leave a NUL in every other byte."""
    head = head[: len(head) // 2 * 2]
    if len(head) < 4:
        return None
    even_nuls = head[0::2].count(0) / (len(head) / 2)
    odd_nuls = head[1::2].count(0) / (len(head) / 2)
    if odd_nuls > 0.4 and even_nuls < 0.05:
        return "utf-16-le"
    if even_nuls > 0.4 and odd_nuls < 0.05:
        return "utf-16-be"
    return None


def _decodes_strictly(raw_file: RawFile, encoding: str) -> bool:
    # Chunked so that a large file is never held in memory as text.
    decoder = codecs.getincrementaldecoder(encoding)(errors="strict")
    try:
        for chunk in raw_file.chunks(_CHECK_CHUNK_BYTES):
            decoder.decode(chunk, final=False)
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return False
    return True


def decode_prefix(raw_file: RawFile, encoding: str, n_bytes: int) -> tuple[str, bool]:
    """Decode the first ``n_bytes``; a character cut at the end is left out."""
    complete = n_bytes >= raw_file.size
    decoder = codecs.getincrementaldecoder(encoding)(errors="replace")
    return decoder.decode(raw_file.prefix(n_bytes), final=complete), complete

"""Read a delimited text file of lab measurements into a checked table.

:func:`read_table` is the one way data enters the engine. It accepts raw bytes
or a path, works out how the file is written, parses it with pandas' C parser
and returns a :class:`Table` that says which columns hold numbers, which hold
text, which column names the samples and which columns could group them. Any
problem with the file becomes an :class:`~webapp.analysis.errors.OrdinateError`
worded for a lab user; no pandas, numpy or codec exception escapes.

Detection rules
---------------
Checks are made in this order; the first failure stops the read.

Size
    A file larger than ``max_bytes`` (default 200 MB) is refused before it is
    read; the message gives both sizes in MB (1 MB = 1024 * 1024 bytes; KB
    below a tenth of a MB).

Binary content
    Files starting with the signature of a workbook (.xlsx / .ods zip, old .xls),
    PDF, image or compressed archive are refused with a hint to export CSV.
    Outside UTF-16/32, a NUL byte anywhere, or more than 1 % control characters
    in the first 64 KB, marks the file as binary.

Encoding
    1. A byte-order mark decides: UTF-32, UTF-8 (reported as ``'utf-8-sig'``)
       or UTF-16 (``'utf-16'``, either byte order).
    2. Without a mark, a prefix in which about every second byte is NUL is read
       as UTF-16 of that byte order (``'utf-16-le'`` / ``'utf-16-be'``).
    3. Otherwise the whole file is checked as strict UTF-8 (``'utf-8'``);
    4. failing that as Windows-1252 (``'cp1252'``, the usual encoding of
       spreadsheet exports on Western-European Windows, e.g. 'µg/L', '°C');
    5. failing that, Latin-1 (``'latin-1'``), which decodes any byte.

Sniffing (first 64 KB only, grown when the header row is longer)
    * An Excel-style first line ``sep=;`` fixes the delimiter and is skipped.
    * Otherwise each of ``,`` ``;`` tab ``|`` is tried with the standard
      quoting rules (``"`` quotes; ``""`` inside quotes is a literal quote, so
      delimiters and line breaks inside quotes belong to the value). The header
      is the first non-blank record. A candidate scores the share of the
      following records that have exactly as many fields as the header; it
      needs at least two header fields. The highest share wins; ties go to the
      ``filename`` hint (``.tsv``/``.tab`` mean tab), then to the larger field
      count, then to the order tab, semicolon, comma, pipe.
    * Decimal mark: always ``.`` with a comma delimiter. Otherwise, if more
      sniffed data cells look like ``1,25`` than like ``1.25``, the decimal
      mark is ``,`` (European lab exports such as ``1,25;3,4``). Thousands
      separators are not interpreted: ``1.234,5`` stays text (with a warning).
    * A sniffed data record with more fields than the header is an error that
      names its line number as a text editor shows it; so is any later one,
      found by the parser.

Parsing
    pandas' C parser reads the whole file; given a path, pandas may split the
    work across threads, so callers with large uploads should pass the saved
    file's path rather than its bytes. Blank lines are kept as empty rows so
    that row numbers stay true to the file; the header names pandas reads are
    replaced by the cleaned ones below. Records with fewer fields than the
    header are padded with missing values (common practice for CSV readers).

Cells and columns
    * Missing markers (exact, after trimming spaces): empty, whitespace only,
      ``NA`` ``na`` ``N/A`` ``n/a`` ``NaN`` ``nan`` ``NAN`` ``null`` ``NULL``
      ``Null`` ``None`` ``none`` ``-`` ``--`` ``#N/A`` ``#NA`` ``<NA>``. The
      title-case ``Na`` is not a marker: it is sodium.
    * Spreadsheet error values (``#DIV/0!``, ``#VALUE!``, ...) become missing,
      with a warning per column.
    * A column is numeric when every non-missing cell parses as a number with
      the detected decimal mark; it is stored as float64 with NaN for missing.
      Infinite values (``inf``, ``-inf``, ``Infinity``) become missing, with a
      warning naming the column and the count.
    * Any other column is text (pandas ``str`` dtype, trimmed, NaN for
      missing). If at least half of its filled cells are numbers, a warning
      names the first cell that is not, by data row and file line. (For
      columns of over 1 000 filled cells, 1 000 evenly spaced cells decide
      first: if most of those are not numbers the column is plain text.)
    * A cell longer than ``max_cell_chars`` is an error naming row and column.
    * Header names are trimmed; a blank name becomes ``'column N'`` (N counts
      columns in the file from 1); repeated names become ``'pH'``,
      ``'pH (2)'``, ... Each renaming is reported in a warning.
    * Columns and rows with no value at all are dropped, with a warning giving
      the count.

Roles
    * Sample ID (``id_column``): a text column with no missing cell and no
      repeated value, and not one of the nearly numeric text columns above;
      one whose name contains a word such as id, sample, name, batch, label,
      lot, code or run is preferred, otherwise the first in file order.
      Failing a text column, an integer-valued numeric column with no missing
      and no repeated value is used when its name says it is an identifier
      (``'ID'``, ``'Sample'``, ``'Run no.'``, ``'Batch #'``...); it is then
      converted to text so that it is never taken for a variable.
    * Grouping candidates (``group_columns``): text columns other than the ID
      with between 2 and min(20, max(2, m // 2)) distinct values, where m is
      the column's number of filled cells, and integer-valued numeric columns
      with between 2 and min(10, max(2, m // 2)) distinct values (these stay
      numeric too). At least one value must repeat.

Requirements
    After cleaning, the table must have at least 3 rows and at least 2 numeric
    columns, the minimum for a principal component analysis to mean anything.
"""

from __future__ import annotations

import codecs
import csv
import io
import mmap
import os
import re
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from dataclasses import fields as dataclass_fields
from types import MappingProxyType

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError

__all__ = [
    "DEFAULT_MAX_BYTES",
    "DEFAULT_MAX_CELL_CHARS",
    "MISSING_MARKERS",
    "Table",
    "read_table",
]

DEFAULT_MAX_BYTES = 200 * 1024 * 1024
DEFAULT_MAX_CELL_CHARS = 10_000

MISSING_MARKERS: frozenset[str] = frozenset(
    {
        "", "NA", "na", "N/A", "n/a", "N/a", "NaN", "nan", "NAN",
        "null", "NULL", "Null", "None", "none", "NONE",
        "-", "--", "#N/A", "#NA", "<NA>",
    }
)
_SPREADSHEET_ERRORS: frozenset[str] = frozenset(
    {"#DIV/0!", "#VALUE!", "#REF!", "#NUM!", "#NAME?", "#NULL!", "#SPILL!", "#CALC!"}
)

_MB = 1024 * 1024
_SNIFF_BYTES = 64 * 1024
_CHECK_CHUNK_BYTES = 4 * _MB
_TEXT_SAMPLE_CELLS = 1000
_MIN_ROWS = 3
_MIN_NUMERIC_COLUMNS = 2
_MAX_TEXT_GROUPS = 20
_MAX_NUMERIC_GROUPS = 10
_DELIMITERS = ("\t", ";", ",", "|")  # tie-break order: rarest in values first

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
_EXCEL_SEP_LINE = re.compile(r'\A"?sep=(.)"?[ \t]*\r?\n?', re.IGNORECASE)
_COMMA_DECIMAL = re.compile(r"^[+-]?(\d+,\d*|,\d+)([eE][+-]?\d+)?$")
_DOT_DECIMAL = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
_PANDAS_RAGGED = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")
_PANDAS_OPEN_QUOTE = re.compile(r"EOF inside string starting at row (\d+)")
_NAME_WORDS = re.compile(r"[A-Z]+(?![a-z])|[A-Z]?[a-z]+|\d+|#")
_ID_WORDS = frozenset(
    {"id", "ids", "sample", "samples", "name", "batch", "label", "lot", "code", "run",
     "specimen", "no", "nr", "number", "num", "#", "index", "idx", "identifier", "tag"}
)
_ID_LAST_WORDS = frozenset({"id", "no", "nr", "number", "num", "#", "index", "idx", "identifier"})
_ID_WHOLE_NAMES = frozenset({"sample", "run", "batch", "lot", "specimen", "label", "code"})


@dataclass(frozen=True, eq=False)
class Table:
    """A parsed, cleaned table and what was learnt while reading it.

    Equality is identity (``eq=False``): a data frame has no single truth
    value, so field-by-field comparison would be meaningless.

    Attributes
    ----------
    frame : pandas.DataFrame
        All kept columns in file order, default ``RangeIndex``. Numeric
        columns are float64 with NaN for missing; text columns are pandas
        ``str`` with NaN for missing.
    numeric_columns, text_columns : tuple of str
        Together they name every column of ``frame`` exactly once.
    id_column : str or None
        The column that names the samples; always one of ``text_columns``.
    group_columns : tuple of str
        Columns that could colour or group samples (see module docstring).
        Numeric ones stay in ``numeric_columns`` as well.
    warnings : tuple of str
        Plain-English sentences about anything changed or suspicious.
    delimiter : str
        One of ``','``, ``';'``, ``'\\t'``, ``'|'``.
    decimal : str
        ``'.'`` or ``','``.
    encoding : str
        Python codec name the file was read with, e.g. ``'utf-8'``,
        ``'utf-8-sig'``, ``'utf-16'``, ``'cp1252'``.
    missing_counts : Mapping[str, int]
        Read-only mapping (``types.MappingProxyType``) from each numeric
        column to its number of missing cells.
    data_row_numbers : numpy.ndarray
        Read-only int64 array; for each row of ``frame``, its 1-based data row
        number in the file (the header is not counted; blank lines are), so
        row numbers survive the dropping of empty rows.
    """

    frame: pd.DataFrame
    numeric_columns: tuple[str, ...]
    text_columns: tuple[str, ...]
    id_column: str | None
    group_columns: tuple[str, ...]
    warnings: tuple[str, ...]
    delimiter: str
    decimal: str
    encoding: str
    missing_counts: Mapping[str, int]
    data_row_numbers: np.ndarray = field(repr=False)

    def __getstate__(self) -> dict:
        # MappingProxyType cannot be pickled; the compute cache pickles tables.
        state = {f.name: getattr(self, f.name) for f in dataclass_fields(self)}
        state["missing_counts"] = dict(self.missing_counts)
        return state

    def __setstate__(self, state: dict) -> None:
        for name, value in state.items():
            object.__setattr__(self, name, MappingProxyType(value) if name == "missing_counts" else value)

    @property
    def n_rows(self) -> int:
        """Number of samples (rows of ``frame``)."""
        return len(self.frame)

    def sample_labels(self) -> list[str]:
        """One label per row: the ID column's values, else ``'row N'``.

        ``N`` is the data row number in the file (1 = first row under the
        header), so a label can be found again in the original file.
        """
        if self.id_column is None:
            return [f"row {number}" for number in self.data_row_numbers.tolist()]
        return [str(value) for value in self.frame[self.id_column].tolist()]


# --------------------------------------------------------------------------
# Public entry point
# --------------------------------------------------------------------------


def read_table(
    source: bytes | str | os.PathLike,
    *,
    max_bytes: int = DEFAULT_MAX_BYTES,
    max_cell_chars: int = DEFAULT_MAX_CELL_CHARS,
    filename: str | None = None,
) -> Table:
    """Read a delimited text file of measurements (one sample per row).

    Parameters
    ----------
    source : bytes, str or os.PathLike
        The file's raw bytes, or a path to it.
    max_bytes : int
        Largest file accepted, in bytes.
    max_cell_chars : int
        Longest single value accepted, in characters.
    filename : str, optional
        Name to use in messages; its extension is a hint (``.tsv`` → tab).
        Defaults to the base name of a path source.

    Returns
    -------
    Table

    Raises
    ------
    OrdinateError
        For any file that cannot be used; the message says what and where.
    """
    if filename is None and isinstance(source, (str, os.PathLike)):
        filename = os.path.basename(os.fspath(source))
    subject = f"'{filename}'" if filename else "The file"

    raw_file = _open_source(source, max_bytes, subject)
    try:
        _reject_empty_or_binary_start(raw_file, subject)
        encoding = _detect_encoding(raw_file)
        if not encoding.startswith(("utf-16", "utf-32")):
            _reject_binary_content(raw_file, subject)
        layout = _sniff_layout(raw_file, encoding, filename, max_cell_chars, subject)
        locator = _LineLocator(raw_file, encoding, layout)
        parsed = _parse_frame(raw_file, encoding, layout, locator, subject)
        return _build_table(parsed, layout, encoding, locator, max_cell_chars, subject)
    finally:
        raw_file.close()


# --------------------------------------------------------------------------
# Bytes, size and binary checks
# --------------------------------------------------------------------------


def _within(subject: str) -> str:
    """'In 'x.csv'' or 'In the file', to open a sentence that points into the file."""
    return "In the file" if subject == "The file" else f"In {subject}"


class _RawFile:
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

    def find(self, needle: bytes) -> int:
        return self._buffer.find(needle)

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


def _open_source(source: bytes | str | os.PathLike, max_bytes: int, subject: str) -> _RawFile:
    if isinstance(source, (bytes, bytearray, memoryview)):
        data = bytes(source)
        _check_size(len(data), max_bytes, subject)
        return _RawFile(data)
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
                return _RawFile(b"", path)
            return _RawFile(mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ), path)
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


def _reject_empty_or_binary_start(raw_file: _RawFile, subject: str) -> None:
    head = raw_file.prefix(_SNIFF_BYTES)
    only_whitespace = raw_file.size <= _SNIFF_BYTES and not head.strip()
    if only_whitespace or head in {bom for bom, _ in _BOMS}:
        raise OrdinateError(f"{subject} is empty. Choose a CSV file with a header row and data rows.")
    for signature, kind in _BINARY_SIGNATURES:
        if head.startswith(signature):
            raise OrdinateError(
                f"{subject} is {kind}, not a text table. "
                "Open it in its program and save or export it as CSV (comma- or semicolon-separated)."
            )


def _reject_binary_content(raw_file: _RawFile, subject: str) -> None:
    nul_at = raw_file.find(b"\x00")
    if nul_at >= 0:
        raise OrdinateError(
            f"{subject} contains binary data (a NUL byte at byte {nul_at + 1}), so it is not a text table. "
            "Export the data as CSV and try again."
        )
    head = raw_file.prefix(_SNIFF_BYTES)
    n_control = len(head) - len(head.translate(None, _CONTROL_BYTES))
    if n_control > 0.01 * len(head):
        raise OrdinateError(
            f"{subject} contains binary data (control characters), so it is not a text table. "
            "Export the data as CSV and try again."
        )


# --------------------------------------------------------------------------
# Encoding
# --------------------------------------------------------------------------


def _detect_encoding(raw_file: _RawFile) -> str:
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


def _decodes_strictly(raw_file: _RawFile, encoding: str) -> bool:
    # Chunked so that a large file is never held in memory as text.
    decoder = codecs.getincrementaldecoder(encoding)(errors="strict")
    try:
        for chunk in raw_file.chunks(_CHECK_CHUNK_BYTES):
            decoder.decode(chunk, final=False)
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return False
    return True


def _decode_prefix(raw_file: _RawFile, encoding: str, n_bytes: int) -> tuple[str, bool]:
    """Decode the first ``n_bytes``; a character cut at the end is left out."""
    complete = n_bytes >= raw_file.size
    decoder = codecs.getincrementaldecoder(encoding)(errors="replace")
    return decoder.decode(raw_file.prefix(n_bytes), final=complete), complete


# --------------------------------------------------------------------------
# Sniffing: delimiter, decimal mark, header
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class _Record:
    first_line: int  # 1-based file line where the record starts
    last_line: int
    fields: list[str]

    @property
    def is_blank(self) -> bool:
        return all(not value.strip() for value in self.fields)


@dataclass(frozen=True)
class _Layout:
    delimiter: str
    decimal: str
    header: tuple[str, ...]
    skip_records: int  # records before the first data row (sep= line, blank lines, header)
    header_last_line: int


def _sniff_layout(
    raw_file: _RawFile, encoding: str, filename: str | None, max_cell_chars: int, subject: str
) -> _Layout:
    n_bytes = _SNIFF_BYTES
    while True:
        text, complete = _decode_prefix(raw_file, encoding, n_bytes)
        sep_line = _EXCEL_SEP_LINE.match(text)
        forced = sep_line.group(1) if sep_line and sep_line.group(1) in _DELIMITERS else None
        delimiter = forced or _choose_delimiter(text, complete, filename, subject)
        records = _split_records(text, delimiter, complete, subject)
        if forced:
            records = records[1:]
        header_at = next((i for i, record in enumerate(records) if not record.is_blank), None)
        enough = header_at is not None and len(records) - header_at >= 3
        if enough or complete:
            break
        n_bytes *= 4

    if header_at is None:
        raise OrdinateError(
            f"{subject} contains only blank lines. Choose a CSV file with a header row and data rows."
        )
    header = records[header_at]
    if len(header.fields) < 2:
        raise _no_delimiter_error(subject)
    _check_header_lengths(header, max_cell_chars, subject)
    data_records = records[header_at + 1 :]
    _check_sniffed_record_lengths(header, data_records, subject)
    return _Layout(
        delimiter=delimiter,
        decimal=_choose_decimal(data_records, delimiter),
        header=tuple(header.fields),
        skip_records=header_at + 1 + (1 if forced else 0),
        header_last_line=header.last_line,
    )


def _split_records(text: str, delimiter: str, complete: bool, subject: str) -> list[_Record]:
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, quotechar='"')
    records: list[_Record] = []
    next_line = 1
    try:
        for fields in reader:
            records.append(_Record(next_line, reader.line_num, fields))
            next_line = reader.line_num + 1
    except csv.Error as error:
        raise OrdinateError(
            f"{subject} could not be read near line {next_line}: a value there is extremely long, "
            "usually because a quotation mark (\") is opened and never closed."
        ) from error
    if not complete and records:
        records.pop()  # the prefix may end in the middle of this record
    return records


def _choose_delimiter(text: str, complete: bool, filename: str | None, subject: str) -> str:
    hinted = "\t" if filename and filename.lower().endswith((".tsv", ".tab")) else None
    best_key: tuple | None = None
    best = None
    for rank, delimiter in enumerate(_DELIMITERS):
        records = [r for r in _split_records(text, delimiter, complete, subject) if not r.is_blank]
        if not records or len(records[0].fields) < 2:
            continue
        n_fields = len(records[0].fields)
        rows = records[1:201]
        share = sum(len(r.fields) == n_fields for r in rows) / len(rows) if rows else 1.0
        key = (share, delimiter == hinted, n_fields, -rank)
        if best_key is None or key > best_key:
            best_key, best = key, delimiter
    if best is None:
        raise _no_delimiter_error(subject)
    return best


def _no_delimiter_error(subject: str) -> OrdinateError:
    return OrdinateError(
        f"{subject} has only one column: no comma, semicolon, tab or '|' separates the values in its "
        "header row. Ordinate needs a table with at least two numeric columns; "
        "export the data as CSV with one column per variable."
    )


def _choose_decimal(records: Sequence[_Record], delimiter: str) -> str:
    if delimiter == ",":
        return "."
    comma = dot = 0
    for record in records[:500]:
        for value in record.fields:
            value = value.strip()
            if _COMMA_DECIMAL.match(value):
                comma += 1
            elif _DOT_DECIMAL.match(value):
                dot += 1
    return "," if comma > dot else "."


def _check_header_lengths(header: _Record, max_cell_chars: int, subject: str) -> None:
    for position, name in enumerate(header.fields, start=1):
        if len(name) > max_cell_chars:
            raise OrdinateError(
                f"{_within(subject)}, the name of column {position} in the header "
                f"(line {header.first_line}) is {len(name):,} characters long; "
                f"the limit is {max_cell_chars:,}. "
                "Check for a quotation mark (\") that is never closed."
            )


def _check_sniffed_record_lengths(header: _Record, records: Sequence[_Record], subject: str) -> None:
    n_fields = len(header.fields)
    longer = [r for r in records if len(r.fields) > n_fields]
    if not longer:
        return
    first = longer[0]
    filled = [r for r in records if not r.is_blank]
    header_short_by_one = all(len(r.fields) == n_fields + 1 for r in filled)
    raise _ragged_error(subject, first.first_line, len(first.fields), n_fields, header_short_by_one)


def _ragged_error(
    subject: str, line: int, n_seen: int, n_expected: int, header_short_by_one: bool = False
) -> OrdinateError:
    message = (
        f"{_within(subject)}, line {line} has {n_seen} values "
        f"but the header row names only {n_expected} columns. "
    )
    if header_short_by_one:
        message += (
            "Every data row has one value more than the header, so the header probably lacks a name "
            "for the first column (some programs write row names that way): add a name such as "
            "'sample' at the start of the header row."
        )
    else:
        message += (
            "Check that line for an extra separator, or for a value containing the separator "
            "that should be in quotation marks."
        )
    return OrdinateError(message)


# --------------------------------------------------------------------------
# Mapping rows back to file lines
# --------------------------------------------------------------------------


class _LineLocator:
    """Turns data row positions into the line numbers a text editor shows.

    Without quotation marks every record is one line, so the answer is
    arithmetic. With them a record may span lines; then the file is scanned
    with the csv module, which only happens on the way to an error or warning.
    """

    def __init__(self, raw_file: _RawFile, encoding: str, layout: _Layout):
        self._raw_file = raw_file
        self._encoding = encoding
        self._layout = layout
        self._one_line_per_record: bool | None = None  # decided on first use: it costs a pass over the data

    def line_of_data_row(self, row_index: int) -> int:
        """File line where data row ``row_index`` (0-based, blank rows counted) starts."""
        if self._one_line_per_record is None:
            self._one_line_per_record = self._raw_file.find(b'"') < 0
        if self._one_line_per_record:
            return self._layout.header_last_line + 1 + row_index
        target = self._layout.skip_records + row_index
        for index, (first_line, _fields) in enumerate(self._records()):
            if index == target:
                return first_line
        return self._layout.header_last_line + 1 + row_index

    def line_of_record(self, record_index: int) -> int:
        """File line where record ``record_index`` (0-based from the file start) starts."""
        for index, (first_line, _fields) in enumerate(self._records()):
            if index == record_index:
                return first_line
        return record_index + 1

    def first_longer_record(self, n_fields: int) -> tuple[int, int] | None:
        """(line, field count) of the first data record with more than ``n_fields`` fields."""
        for index, (first_line, fields) in enumerate(self._records()):
            if index >= self._layout.skip_records and len(fields) > n_fields:
                return first_line, len(fields)
        return None

    def _records(self) -> Iterator[tuple[int, list[str]]]:
        with io.TextIOWrapper(
            self._raw_file.open_binary(), encoding=self._encoding, errors="replace", newline=""
        ) as text:
            reader = csv.reader(text, delimiter=self._layout.delimiter, quotechar='"')
            next_line = 1
            try:
                for fields in reader:
                    yield next_line, fields
                    next_line = reader.line_num + 1
            except csv.Error:
                return


# --------------------------------------------------------------------------
# Main parse
# --------------------------------------------------------------------------


def _parse_frame(
    raw_file: _RawFile, encoding: str, layout: _Layout, locator: _LineLocator, subject: str
) -> pd.DataFrame:
    n_fields = len(layout.header)
    try:
        with warnings.catch_warnings():
            # Mixed types across the parser's chunks are settled column by column below. (Should
            # threads race on this context, the worst outcome is that warning staying silenced.)
            warnings.simplefilter("ignore", pd.errors.DtypeWarning)
            frame = pd.read_csv(
                raw_file.for_pandas(),
                sep=layout.delimiter,
                decimal=layout.decimal,
                encoding=encoding,
                header=0,  # names come from the sniffed header; pandas' own are dropped
                skiprows=layout.skip_records - 1,
                skip_blank_lines=False,
                na_values=sorted(MISSING_MARKERS),
                keep_default_na=False,
                quotechar='"',
                engine="c",
            )
    except pd.errors.EmptyDataError as error:
        raise _header_only_error(subject) from error
    except pd.errors.ParserError as error:
        raise _translate_parser_error(error, locator, n_fields, subject) from error
    except UnicodeError as error:
        codec = encoding.upper().replace("-SIG", "").replace("-LE", "").replace("-BE", "")
        reason = getattr(error, "reason", str(error))
        raise OrdinateError(
            f"{subject} looks like {codec} text, but part of it is not valid {codec} ({reason}). "
            "Save it again as CSV, choosing UTF-8 as the encoding."
        ) from error
    except MemoryError as error:
        raise OrdinateError(
            f"{subject} is too large to load in the memory available. Split it into smaller files."
        ) from error
    except (ValueError, OverflowError, csv.Error) as error:
        raise _unreadable_error(subject, f"the parser reports: {error}") from error
    if not frame.index.equals(pd.RangeIndex(len(frame))):
        # pandas took the first values as row labels: the first data row is longer than the
        # header. The sniffer reports that case itself unless it counted the fields differently.
        raise _ragged_error_from_scan(locator, n_fields, subject)
    frame.columns = range(frame.shape[1])
    if frame.shape[1] != n_fields:  # the csv module and pandas split the header differently
        raise _unreadable_error(
            subject,
            f"its header row splits into {n_fields} columns one way and {frame.shape[1]} another; "
            "check the quotation marks in the header row",
        )
    return frame


def _translate_parser_error(
    error: Exception, locator: _LineLocator, n_fields: int, subject: str
) -> OrdinateError:
    text = str(error)
    ragged = _PANDAS_RAGGED.search(text)
    if ragged:
        pandas_count = (int(ragged.group(2)), int(ragged.group(3)))
        return _ragged_error_from_scan(locator, n_fields, subject, pandas_count)
    open_quote = _PANDAS_OPEN_QUOTE.search(text)
    if open_quote:
        line = locator.line_of_record(int(open_quote.group(1)))
        return OrdinateError(
            f"{_within(subject)}, a quotation mark (\") opened on line {line} is never closed, "
            "so the rest of the file would be read as a single value. Close or remove that quotation mark."
        )
    return _unreadable_error(subject, f"the parser reports: {text}")


def _ragged_error_from_scan(
    locator: _LineLocator, n_fields: int, subject: str, pandas_count: tuple[int, int] | None = None
) -> OrdinateError:
    """Name the first record longer than the header, found by scanning the file.

    ``pandas_count`` is the parser's (1-based record number, field count), used
    only when the scan finds nothing (the csv module and pandas disagree).
    """
    found = locator.first_longer_record(n_fields)
    if found is not None:
        return _ragged_error(subject, *found, n_fields)
    if pandas_count is not None:
        record, n_seen = pandas_count
        return _ragged_error(subject, locator.line_of_record(record - 1), n_seen, n_fields)
    return _unreadable_error(subject, "some rows have more values than the header row names")


def _unreadable_error(subject: str, reason: str) -> OrdinateError:
    return OrdinateError(
        f"{subject} could not be read as a table ({reason}). "
        "Check that it is a plain CSV export with one header row."
    )


def _header_only_error(subject: str) -> OrdinateError:
    return OrdinateError(
        f"{subject} has a header row but no data rows below it. "
        f"Add at least {_MIN_ROWS} samples, one per row."
    )


# --------------------------------------------------------------------------
# Cleaning and classification
# --------------------------------------------------------------------------


def _build_table(
    parsed: pd.DataFrame,
    layout: _Layout,
    encoding: str,
    locator: _LineLocator,
    max_cell_chars: int,
    subject: str,
) -> Table:
    notes: list[str] = []
    names = _clean_names(layout.header, notes)
    if len(parsed) == 0:
        raise _header_only_error(subject)

    numeric, looks_numeric = _settle_column_types(
        parsed, names, layout.decimal, locator, max_cell_chars, subject, notes
    )
    parsed.columns = names
    missing = parsed.isna().to_numpy()  # one mask serves empty columns, empty rows and missing counts
    frame, missing = _drop_empty_columns(parsed, missing, layout.header, notes)
    _note_unnamed_columns(frame, layout.header, notes)
    frame, missing, row_numbers = _drop_empty_rows(frame, missing, notes)
    _require_rows(len(frame), subject)

    numeric = [name for name in numeric if name in frame.columns]
    text_columns = [name for name in frame.columns if name not in numeric]
    id_column = _find_id_column(frame, numeric, [n for n in text_columns if n not in looks_numeric])
    if id_column is not None and id_column in numeric:
        frame[id_column] = _integers_as_text(frame[id_column])
        numeric.remove(id_column)
        text_columns = [name for name in frame.columns if name not in numeric]
    _require_numeric_columns(numeric, text_columns, looks_numeric, subject)

    missing_per_column = dict(zip(frame.columns, missing.sum(axis=0).tolist()))
    return Table(
        frame=frame,
        numeric_columns=tuple(numeric),
        text_columns=tuple(text_columns),
        id_column=id_column,
        group_columns=_find_group_columns(frame, numeric, text_columns, id_column),
        warnings=tuple(notes),
        delimiter=layout.delimiter,
        decimal=layout.decimal,
        encoding=encoding,
        missing_counts=MappingProxyType({name: int(missing_per_column[name]) for name in numeric}),
        data_row_numbers=row_numbers,
    )


def _settle_column_types(
    parsed: pd.DataFrame,
    names: Sequence[str],
    decimal: str,
    locator: _LineLocator,
    max_cell_chars: int,
    subject: str,
    notes: list[str],
) -> tuple[list[str], dict[str, str]]:
    """Make every column float64 or trimmed text, in place; columns are still numbered.

    Returns the numeric column names, and for each nearly numeric text column
    a description of its first cell that is not a number.
    """
    numeric: list[str] = []
    looks_numeric: dict[str, str] = {}
    for position, name in enumerate(names):
        series = parsed[position]
        if _is_plain_numeric(series):
            values = series.to_numpy(dtype=np.float64)
            finished = _finish_numeric(values, name, notes)
            if finished is not values or series.dtype != np.float64:
                parsed[position] = finished
            numeric.append(name)
            continue
        as_text = series.astype("str")  # also turns mixed chunks and True/False into text
        _check_cell_lengths(as_text, name, max_cell_chars, locator, subject)
        text, values, stray = _classify_text_column(as_text, decimal, name, notes)
        if values is not None:
            parsed[position] = _finish_numeric(values, name, notes)
            numeric.append(name)
            continue
        parsed[position] = text
        if stray is not None:
            looks_numeric[name] = _describe_stray_cell(name, stray, text, locator, notes)
    return numeric, looks_numeric


def _require_rows(n_rows: int, subject: str) -> None:
    if n_rows == 0:
        raise OrdinateError(
            f"{subject} has a header row but every row below it is empty. Add at least {_MIN_ROWS} samples."
        )
    if n_rows < _MIN_ROWS:
        raise OrdinateError(
            f"{subject} has only {n_rows} data row{'s' if n_rows != 1 else ''}; "
            f"a principal component analysis needs at least {_MIN_ROWS} samples (rows)."
        )


def _clean_names(raw_names: Sequence[str], notes: list[str]) -> list[str]:
    """Trimmed, unique names; a blank one becomes 'column N' (see _note_unnamed_columns)."""
    names = [name.strip() for name in raw_names]
    for position, name in enumerate(names, start=1):
        if not name:
            names[position - 1] = f"column {position}"
    taken = set(names)
    seen: dict[str, int] = {}
    renamed: list[str] = []
    for position, name in enumerate(names):
        if name not in seen:
            seen[name] = 1
            continue
        copy = seen[name]
        while True:
            copy += 1
            candidate = f"{name} ({copy})"
            if candidate not in taken:
                break
        seen[name] = copy
        taken.add(candidate)
        names[position] = candidate
        renamed.append(f"'{candidate}'")
    if renamed:
        notes.append(
            "Some column names appear more than once in the header; the repeats are renamed "
            f"{', '.join(renamed)} so that each column has its own name."
        )
    return names


def _note_unnamed_columns(frame: pd.DataFrame, raw_header: Sequence[str], notes: list[str]) -> None:
    # Called after empty columns are dropped: a nameless empty column is not worth two notes.
    kept = set(frame.columns)
    positions = [
        position
        for position, name in enumerate(raw_header, start=1)
        if not name.strip() and f"column {position}" in kept
    ]
    if positions:
        listed = ", ".join(str(p) for p in positions)
        several = len(positions) > 1
        notes.append(
            f"{len(positions)} column{'s have' if several else ' has'} no name in the header "
            f"(position {listed}); {'they are' if several else 'it is'} called 'column N' after "
            f"{'their positions' if several else 'its position'}."
        )


def _is_plain_numeric(series: pd.Series) -> bool:
    dtype = series.dtype
    return pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)


def _finish_numeric(values: np.ndarray, name: str, notes: list[str]) -> np.ndarray:
    """Infinite values become missing, with a note; returns ``values`` itself when there are none."""
    infinite = np.isinf(values)
    n_infinite = int(infinite.sum())
    if not n_infinite:
        return values
    notes.append(
        f"Column '{name}' had {n_infinite} cell{'s' if n_infinite > 1 else ''} reading an infinite "
        f"value ('inf', '-inf' or 'Infinity'); "
        f"{'they are' if n_infinite > 1 else 'it is'} treated as missing."
    )
    return np.where(infinite, np.nan, values)


def _check_cell_lengths(
    text: pd.Series, name: str, max_cell_chars: int, locator: _LineLocator, subject: str
) -> None:
    lengths = text.str.len()
    too_long = (lengths > max_cell_chars).to_numpy(dtype=bool, na_value=False)
    if not too_long.any():
        return
    row_index = int(np.argmax(too_long))
    raise OrdinateError(
        f"{_within(subject)}, the value in column '{name}', row {row_index + 1} (line "
        f"{locator.line_of_data_row(row_index)} of the file) is {int(lengths.iloc[row_index]):,} characters "
        f"long; the limit is {max_cell_chars:,}. Check for a quotation mark (\") that is never closed."
    )


def _classify_text_column(
    raw_text: pd.Series, decimal: str, name: str, notes: list[str]
) -> tuple[pd.Series, np.ndarray | None, tuple[int, int] | None]:
    """Decide whether a column pandas left as text is really numeric.

    Returns the trimmed text (missing markers as NaN); the float values when
    every filled cell is a number, else None; and, for a text column in which
    at least half the filled cells are numbers, the row index of the first
    cell that is not and the number of such cells.
    """
    text = raw_text.str.strip()
    missing = text.isna() | text.isin(MISSING_MARKERS)
    spreadsheet_error = text.isin(_SPREADSHEET_ERRORS)
    n_errors = int(spreadsheet_error.sum())
    if n_errors:
        notes.append(
            f"Column '{name}' had {n_errors} spreadsheet error cell{'s' if n_errors > 1 else ''} "
            f"(such as '{text[spreadsheet_error].iloc[0]}'); {'they are' if n_errors > 1 else 'it is'} "
            "treated as missing."
        )
    missing |= spreadsheet_error
    text = text.mask(missing)

    filled = text[~missing]
    if len(filled) == 0:
        return text, None, None
    if len(filled) > _TEXT_SAMPLE_CELLS:
        # Columns of names or comments fail on a spread-out sample: no need to convert them whole.
        spread = np.linspace(0, len(filled) - 1, _TEXT_SAMPLE_CELLS).astype(np.intp)
        if _as_numbers(filled.iloc[spread], decimal).isna().mean() > 0.5:
            return text, None, None
    parsed = _as_numbers(filled, decimal)
    not_number = parsed.isna()
    if not not_number.any():
        values = np.full(len(text), np.nan)
        values[(~missing).to_numpy()] = parsed.to_numpy(dtype=np.float64)
        return text, values, None
    if not_number.mean() <= 0.5:
        return text, None, (int(not_number.idxmax()), int(not_number.sum()))
    return text, None, None


def _as_numbers(strings: pd.Series, decimal: str) -> pd.Series:
    """Float value of each trimmed string, NaN where it is not a number."""
    if decimal == ",":
        # Under a decimal comma a dot can only be a thousands separator, which is not supported.
        strings = strings.mask(strings.str.contains(".", regex=False), "not a number")
        strings = strings.str.replace(",", ".", regex=False)
    return pd.to_numeric(strings, errors="coerce")


def _describe_stray_cell(
    name: str, stray: tuple[int, int], text: pd.Series, locator: _LineLocator, notes: list[str]
) -> str:
    row_index, n_stray = stray
    value = str(text.iloc[row_index])
    shown = value if len(value) <= 40 else value[:37] + "..."
    where = f"row {row_index + 1} (line {locator.line_of_data_row(row_index)} of the file) reads '{shown}'"
    others = f" ({n_stray} cells in all are not numbers)" if n_stray > 1 else ""
    notes.append(
        f"Column '{name}' looks numeric but {where}{others}; it is treated as text. "
        "Fix or blank those cells to use it as a variable."
    )
    return where


def _drop_empty_columns(
    frame: pd.DataFrame, missing: np.ndarray, raw_header: Sequence[str], notes: list[str]
) -> tuple[pd.DataFrame, np.ndarray]:
    empty = missing.all(axis=0)
    if not empty.any():
        return frame, missing
    positions = np.flatnonzero(empty)
    # A nameless empty column is usually a separator at the end of every line: not worth naming.
    named = [f"'{frame.columns[p]}'" for p in positions if raw_header[p].strip()]
    n_unnamed = len(positions) - len(named)
    parts = named + ([f"{n_unnamed} without a name"] if n_unnamed else [])
    notes.append(
        f"Removed {len(positions)} empty column{'s' if len(positions) > 1 else ''} ({', '.join(parts)}): "
        "no row has a value there."
    )
    return frame.iloc[:, np.flatnonzero(~empty)], missing[:, ~empty]


def _drop_empty_rows(
    frame: pd.DataFrame, missing: np.ndarray, notes: list[str]
) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    row_numbers = np.arange(1, len(frame) + 1, dtype=np.int64)
    empty = missing.all(axis=1)
    n_empty = int(empty.sum())
    if n_empty:
        frame = frame.loc[~empty].reset_index(drop=True)
        missing = missing[~empty]
        row_numbers = row_numbers[~empty]
        notes.append(
            f"Removed {n_empty} empty row{'s' if n_empty > 1 else ''} (blank lines or rows with no values)."
        )
    row_numbers.flags.writeable = False
    return frame, missing, row_numbers


# --------------------------------------------------------------------------
# Roles: sample ID and grouping candidates
# --------------------------------------------------------------------------


def _name_words(name: str) -> list[str]:
    return [word.lower() for word in _NAME_WORDS.findall(name)]


def _find_id_column(frame: pd.DataFrame, numeric: Sequence[str], text_columns: Sequence[str]) -> str | None:
    unique_text = [name for name in text_columns if _is_complete_and_unique(frame[name])]
    if unique_text:
        preferred = [name for name in unique_text if _ID_WORDS.intersection(_name_words(name))]
        return (preferred or unique_text)[0]
    for name in numeric:
        words = _name_words(name)
        says_identifier = bool(words) and (words[-1] in _ID_LAST_WORDS or " ".join(words) in _ID_WHOLE_NAMES)
        if says_identifier and _is_integer_valued(frame[name]) and _is_complete_and_unique(frame[name]):
            return name
    return None


def _is_complete_and_unique(series: pd.Series) -> bool:
    return bool(series.notna().all() and series.is_unique)


def _is_integer_valued(series: pd.Series) -> bool:
    values = series.to_numpy(dtype=np.float64)
    head = values[:64]
    if not _all_whole_numbers(head[~np.isnan(head)]):  # most measurement columns fail here, cheaply
        return False
    values = values[~np.isnan(values)]
    return values.size > 0 and _all_whole_numbers(values)


def _all_whole_numbers(values: np.ndarray) -> bool:
    return bool(np.all(values == np.round(values)) and np.all(np.abs(values) < 2**53))


def _integers_as_text(series: pd.Series) -> pd.Series:
    return pd.Series(series.to_numpy(dtype=np.int64).astype(str), dtype="str", copy=False)


def _find_group_columns(
    frame: pd.DataFrame, numeric: Sequence[str], text_columns: Sequence[str], id_column: str | None
) -> tuple[str, ...]:
    groups = []
    for name in frame.columns:
        if name == id_column:
            continue
        if name in text_columns and _has_few_repeated_values(frame[name], _MAX_TEXT_GROUPS):
            groups.append(name)
        elif (
            name in numeric
            and _is_integer_valued(frame[name])
            and _has_few_repeated_values(frame[name], _MAX_NUMERIC_GROUPS)
        ):
            groups.append(name)
    return tuple(groups)


def _has_few_repeated_values(series: pd.Series, cap: int) -> bool:
    """Between 2 and min(cap, max(2, n_filled // 2)) distinct values, at least one of them repeated."""
    n_filled = int(series.notna().sum())
    n_distinct = series.nunique()
    return 2 <= n_distinct <= min(cap, max(2, n_filled // 2)) and n_distinct < n_filled


def _require_numeric_columns(
    numeric: Sequence[str], text_columns: Sequence[str], looks_numeric: Mapping[str, str], subject: str
) -> None:
    if len(numeric) >= _MIN_NUMERIC_COLUMNS:
        return
    hint = ""
    if looks_numeric:
        examples = "; ".join(f"in '{name}', {where}" for name, where in list(looks_numeric.items())[:3])
        hint = f" Some text columns are nearly numeric: {examples}. Fix or blank those cells."
    if not numeric:
        raise OrdinateError(
            f"{subject} has no numeric column: every column holds text ({len(text_columns)} columns). "
            f"A principal component analysis needs at least {_MIN_NUMERIC_COLUMNS} columns of numbers."
            + hint
        )
    raise OrdinateError(
        f"{subject} has only one numeric column ('{numeric[0]}'); a principal component analysis needs "
        f"at least {_MIN_NUMERIC_COLUMNS}." + hint
    )

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

import os

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.columns import build_table
from webapp.analysis.ingest.parse import LineLocator, parse_frame
from webapp.analysis.ingest.sniff import sniff_layout
from webapp.analysis.ingest.source import (
    detect_encoding,
    open_source,
    reject_binary_content,
    reject_empty_or_binary_start,
)
from webapp.analysis.ingest.table import DEFAULT_MAX_BYTES, DEFAULT_MAX_CELL_CHARS, MISSING_MARKERS, Table
from webapp.analysis.ingest.transpose import transpose_table

__all__ = [
    "DEFAULT_MAX_BYTES",
    "DEFAULT_MAX_CELL_CHARS",
    "MISSING_MARKERS",
    "OrdinateError",
    "Table",
    "read_table",
    "transpose_table",
]


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

    raw_file = open_source(source, max_bytes, subject)
    try:
        reject_empty_or_binary_start(raw_file, subject)
        encoding = detect_encoding(raw_file)
        if not encoding.startswith(("utf-16", "utf-32")):
            reject_binary_content(raw_file, subject)
        layout = sniff_layout(raw_file, encoding, filename, max_cell_chars, subject)
        locator = LineLocator(raw_file, encoding, layout)
        parsed = parse_frame(raw_file, encoding, layout, locator, subject)
        return build_table(parsed, layout, encoding, locator, max_cell_chars, subject)
    finally:
        raw_file.close()
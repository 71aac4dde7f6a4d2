"""Sniffing: the delimiter, the decimal mark and the header row, from the first records."""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Sequence
from dataclasses import dataclass

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.source import SNIFF_BYTES, RawFile, decode_prefix
from webapp.analysis.ingest.table import within

_DELIMITERS = ("\t", ";", ",", "|")  # tie-break order: rarest in values first
_EXCEL_SEP_LINE = re.compile(r'\A"?sep=(.)"?[ \t]*\r?\n?', re.IGNORECASE)
_COMMA_DECIMAL = re.compile(r"^[+-]?(\d+,\d*|,\d+)([eE][+-]?\d+)?$")
_DOT_DECIMAL = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
_SNIFF_LINES = 5  # the header and enough rows to compare field counts (the last may be cut)


@dataclass(frozen=True)
class _Record:
    first_line: int  # 1-based file line where the record starts
    last_line: int
    fields: list[str]

    @property
    def is_blank(self) -> bool:
        return all(not value.strip() for value in self.fields)


@dataclass(frozen=True)
class Layout:
    delimiter: str
    decimal: str
    header: tuple[str, ...]
    skip_records: int  # records before the first data row (sep= line, blank lines, header)
    header_last_line: int


def sniff_layout(
    raw_file: RawFile, encoding: str, filename: str | None, max_cell_chars: int, subject: str
) -> Layout:
    n_bytes = max(SNIFF_BYTES, raw_file.end_of_line(_SNIFF_LINES))
    while True:
        text, complete = decode_prefix(raw_file, encoding, n_bytes)
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
    return Layout(
        delimiter=delimiter,
        decimal=_choose_decimal(data_records, delimiter),
        header=tuple(header.fields),
        skip_records=header_at + 1 + (1 if forced else 0),
        header_last_line=header.last_line,
    )


def _split_records(text: str, delimiter: str, complete: bool, subject: str) -> list[_Record]:
    try:
        return _records_of(text, delimiter, complete)
    except _UnreadableRecord as error:
        raise _long_value_error(subject, error.line) from error


def _long_value_error(subject: str, line: int) -> OrdinateError:
    return OrdinateError(
        f"{subject} could not be read near line {line}: a value there is extremely long, "
        "usually because a quotation mark (\") is opened and never closed."
    )


class _UnreadableRecord(Exception):
    def __init__(self, line: int):
        super().__init__(line)
        self.line = line


def _records_of(text: str, delimiter: str, complete: bool) -> list[_Record]:
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, quotechar='"')
    records: list[_Record] = []
    next_line = 1
    try:
        for fields in reader:
            records.append(_Record(next_line, reader.line_num, fields))
            next_line = reader.line_num + 1
    except csv.Error as error:  # a field over the csv module's size limit
        raise _UnreadableRecord(next_line) from error
    if not complete and records:
        records.pop()  # the prefix may end in the middle of this record
    return records


def _choose_delimiter(text: str, complete: bool, filename: str | None, subject: str) -> str:
    hinted = "\t" if filename and filename.lower().endswith((".tsv", ".tab")) else None
    best_key: tuple | None = None
    best = None
    unreadable: _UnreadableRecord | None = None
    for rank, delimiter in enumerate(_DELIMITERS):
        if delimiter not in text:
            continue
        try:
            records = [r for r in _records_of(text, delimiter, complete) if not r.is_blank]
        except _UnreadableRecord as error:
            # Split by the wrong delimiter a wide row is one huge field: that rules the candidate out.
            unreadable = unreadable or error
            continue
        if not records or len(records[0].fields) < 2:
            continue
        n_fields = len(records[0].fields)
        rows = records[1:201]
        share = sum(len(r.fields) == n_fields for r in rows) / len(rows) if rows else 1.0
        key = (share, delimiter == hinted, n_fields, -rank)
        if best_key is None or key > best_key:
            best_key, best = key, delimiter
    if best is None and unreadable is not None:
        raise _long_value_error(subject, unreadable.line)
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
                f"{within(subject)}, the name of column {position} in the header "
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
    raise ragged_error(subject, first.first_line, len(first.fields), n_fields, header_short_by_one)


def ragged_error(
    subject: str, line: int, n_seen: int, n_expected: int, header_short_by_one: bool = False
) -> OrdinateError:
    message = (
        f"{within(subject)}, line {line} has {n_seen} values "
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
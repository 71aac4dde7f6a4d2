"""Parsing the whole file with pandas, and mapping data rows back to file lines."""

from __future__ import annotations

import csv
import io
import re
import warnings
from collections.abc import Iterator

import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.sniff import Layout, ragged_error
from webapp.analysis.ingest.source import RawFile
from webapp.analysis.ingest.table import MISSING_MARKERS, header_only_error, within

_PANDAS_RAGGED = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")
_PANDAS_OPEN_QUOTE = re.compile(r"EOF inside string starting at row (\d+)")


class LineLocator:
    """Turns data row positions into the line numbers a text editor shows.

    Without quotation marks every record is one line, so the answer is
    arithmetic. With them a record may span lines; then the file is scanned
    once with the csv module, on the way to the first error or warning that
    needs it, and the start line of every record is kept for the others.
    """

    def __init__(self, raw_file: RawFile, encoding: str, layout: Layout):
        self._raw_file = raw_file
        self._encoding = encoding
        self._layout = layout
        self._one_line_per_record: bool | None = None  # decided on first use: it costs a pass over the data
        self._record_lines: list[int] | None = None

    def line_of_data_row(self, row_index: int) -> int:
        """File line where data row ``row_index`` (0-based, blank rows counted) starts."""
        if self._one_line_per_record is None:
            self._one_line_per_record = self._raw_file.find(b'"') < 0
        if self._one_line_per_record:
            return self._layout.header_last_line + 1 + row_index
        return self._line_of_record_or(self._layout.skip_records + row_index,
                                       self._layout.header_last_line + 1 + row_index)

    def line_of_record(self, record_index: int) -> int:
        """File line where record ``record_index`` (0-based from the file start) starts."""
        return self._line_of_record_or(record_index, record_index + 1)

    def first_longer_record(self, n_fields: int) -> tuple[int, int] | None:
        """(line, field count) of the first data record with more than ``n_fields`` fields."""
        for index, (first_line, fields) in enumerate(self._records()):
            if index >= self._layout.skip_records and len(fields) > n_fields:
                return first_line, len(fields)
        return None

    def _line_of_record_or(self, record_index: int, fallback: int) -> int:
        if self._record_lines is None:
            self._record_lines = [first_line for first_line, _fields in self._records()]
        if record_index < len(self._record_lines):
            return self._record_lines[record_index]
        return fallback

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


def parse_frame(
    raw_file: RawFile, encoding: str, layout: Layout, locator: LineLocator, subject: str
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
        raise header_only_error(subject) from error
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
    error: Exception, locator: LineLocator, n_fields: int, subject: str
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
            f"{within(subject)}, a quotation mark (\") opened on line {line} is never closed, "
            "so the rest of the file would be read as a single value. Close or remove that quotation mark."
        )
    return _unreadable_error(subject, f"the parser reports: {text}")


def _ragged_error_from_scan(
    locator: LineLocator, n_fields: int, subject: str, pandas_count: tuple[int, int] | None = None
) -> OrdinateError:
    """Name the first record longer than the header, found by scanning the file.

    ``pandas_count`` is the parser's (1-based record number, field count), used
    only when the scan finds nothing (the csv module and pandas disagree).
    """
    found = locator.first_longer_record(n_fields)
    if found is not None:
        return ragged_error(subject, *found, n_fields)
    if pandas_count is not None:
        record, n_seen = pandas_count
        return ragged_error(subject, locator.line_of_record(record - 1), n_seen, n_fields)
    return _unreadable_error(subject, "some rows have more values than the header row names")


def _unreadable_error(subject: str, reason: str) -> OrdinateError:
    return OrdinateError(
        f"{subject} could not be read as a table ({reason}). "
        "Check that it is a plain CSV export with one header row."
    )

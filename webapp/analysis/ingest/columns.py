"""Column typing and cleaning: numbers or text, names, missing cells, stray cells, empty rows."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from types import MappingProxyType

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.parse import LineLocator
from webapp.analysis.ingest.roles import find_group_columns, find_id_column, integers_as_text
from webapp.analysis.ingest.sniff import Layout
from webapp.analysis.ingest.table import MIN_ROWS, MISSING_MARKERS, Table, header_only_error, within

_SPREADSHEET_ERRORS: frozenset[str] = frozenset(
    {"#DIV/0!", "#VALUE!", "#REF!", "#NUM!", "#NAME?", "#NULL!", "#SPILL!", "#CALC!"}
)
_TEXT_SAMPLE_CELLS = 1000
_MIN_NUMERIC_COLUMNS = 2


def build_table(
    parsed: pd.DataFrame,
    layout: Layout,
    encoding: str,
    locator: LineLocator,
    max_cell_chars: int,
    subject: str,
) -> Table:
    notes: list[str] = []
    names = _clean_names(layout.header, notes)
    if len(parsed) == 0:
        raise header_only_error(subject)

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
    id_column = find_id_column(frame, numeric, [n for n in text_columns if n not in looks_numeric])
    if id_column is not None and id_column in numeric:
        frame[id_column] = integers_as_text(frame[id_column])
        numeric.remove(id_column)
        text_columns = [name for name in frame.columns if name not in numeric]
    _require_numeric_columns(numeric, text_columns, looks_numeric, subject)

    missing_per_column = dict(zip(frame.columns, missing.sum(axis=0).tolist()))
    return Table(
        frame=frame,
        numeric_columns=tuple(numeric),
        text_columns=tuple(text_columns),
        id_column=id_column,
        group_columns=find_group_columns(frame, numeric, text_columns, id_column),
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
    locator: LineLocator,
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
            f"{subject} has a header row but every row below it is empty. Add at least {MIN_ROWS} samples."
        )
    if n_rows < MIN_ROWS:
        raise OrdinateError(
            f"{subject} has only {n_rows} data row{'s' if n_rows != 1 else ''}; "
            f"a principal component analysis needs at least {MIN_ROWS} samples (rows)."
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
    text: pd.Series, name: str, max_cell_chars: int, locator: LineLocator, subject: str
) -> None:
    lengths = text.str.len()
    too_long = (lengths > max_cell_chars).to_numpy(dtype=bool, na_value=False)
    if not too_long.any():
        return
    row_index = int(np.argmax(too_long))
    raise OrdinateError(
        f"{within(subject)}, the value in column '{name}', row {row_index + 1} (line "
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
    name: str, stray: tuple[int, int], text: pd.Series, locator: LineLocator, notes: list[str]
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
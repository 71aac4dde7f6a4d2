"""Column typing: each column becomes float64 numbers or trimmed text, with notes on what changed.

Numeric columns are handled as one block: a spectra export has tens of
thousands of them, and pandas' per-column access costs far more than the work.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.parse import LineLocator
from webapp.analysis.ingest.table import MISSING_MARKERS, within

_SPREADSHEET_ERRORS: frozenset[str] = frozenset(
    {"#DIV/0!", "#VALUE!", "#REF!", "#NUM!", "#NAME?", "#NULL!", "#SPILL!", "#CALC!"}
)
_TEXT_SAMPLE_CELLS = 1000
# Squares of values up to 1e150 (1e300), summed over as many as 10^8 rows, stay below the
# largest double, 1.8e308 (numpy.finfo(float).max): variances and covariances cannot overflow.
LARGEST_USABLE_MAGNITUDE = 1e150
_MAX_COLUMNS_NAMED = 5


@dataclass(frozen=True)
class TypedColumns:
    frame: pd.DataFrame  # named columns in file order
    numeric: list[str]
    looks_numeric: dict[str, str]  # nearly numeric text column -> where its first stray cell is


def settle_column_types(
    parsed: pd.DataFrame,
    names: Sequence[str],
    decimal: str,
    locator: LineLocator,
    max_cell_chars: int,
    subject: str,
    notes: list[str],
) -> TypedColumns:
    """Every column as float64 (NaN for missing) or trimmed text; notes in column order."""
    dtypes = parsed.dtypes.tolist()
    plain = [position for position, dtype in enumerate(dtypes) if _is_plain_numeric(dtype)]
    plain_set = set(plain)
    notes_at: list[tuple[int, str]] = []
    converted: dict[int, np.ndarray] = {}
    text_columns: dict[int, pd.Series] = {}
    looks_numeric: dict[str, str] = {}
    for position, name in enumerate(names):
        if position in plain_set:
            continue
        column_notes: list[str] = []
        as_text = parsed.iloc[:, position].astype("str")  # also turns mixed chunks and True/False into text
        _check_cell_lengths(as_text, name, max_cell_chars, locator, subject)
        text, values, stray = _classify_text_column(as_text, decimal, name, column_notes)
        if values is not None:
            converted[position] = values
        else:
            text_columns[position] = text
            if stray is not None:
                looks_numeric[name] = _describe_stray_cell(name, stray, text, locator, column_notes)
        notes_at.extend((position, note) for note in column_notes)

    numeric_positions = sorted(plain + list(converted))
    block = _numeric_block(parsed, plain, converted, numeric_positions)
    numeric = [names[position] for position in numeric_positions]
    block = _infinite_as_missing(block, numeric, numeric_positions, notes_at)
    _refuse_huge_values(block, numeric, locator, subject)
    notes.extend(note for _, note in sorted(notes_at, key=lambda item: item[0]))
    frame = _assemble(block, numeric, {names[p]: text for p, text in text_columns.items()}, names)
    return TypedColumns(frame, numeric, looks_numeric)


def _is_plain_numeric(dtype) -> bool:
    return pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)


def _numeric_block(
    parsed: pd.DataFrame, plain: list[int], converted: dict[int, np.ndarray], positions: list[int]
) -> np.ndarray:
    """One (n_rows, n_numeric) float64 array, columns in file order."""
    if len(plain) == parsed.shape[1]:
        return parsed.to_numpy(dtype=np.float64)  # selecting columns would cost a step per column
    if not converted:
        return parsed.iloc[:, plain].to_numpy(dtype=np.float64)
    block = np.empty((len(parsed), len(positions)))
    where = {position: j for j, position in enumerate(positions)}
    if plain:
        block[:, [where[p] for p in plain]] = parsed.iloc[:, plain].to_numpy(dtype=np.float64)
    for position, values in converted.items():
        block[:, where[position]] = values
    return block


def _infinite_as_missing(
    block: np.ndarray, numeric: list[str], positions: list[int], notes_at: list[tuple[int, str]]
) -> np.ndarray:
    infinite = np.isinf(block)
    counts = infinite.sum(axis=0)
    if not counts.any():
        return block
    for j in np.flatnonzero(counts).tolist():
        n_infinite = int(counts[j])
        notes_at.append((positions[j], (
            f"Column '{numeric[j]}' had {n_infinite} cell{'s' if n_infinite > 1 else ''} reading an infinite "
            f"value ('inf', '-inf' or 'Infinity'); "
            f"{'they are' if n_infinite > 1 else 'it is'} treated as missing."
        )))
    return np.where(infinite, np.nan, block)


def _refuse_huge_values(block: np.ndarray, numeric: list[str], locator: LineLocator, subject: str) -> None:
    """Values whose squares overflow double precision would turn variances into infinity."""
    huge = np.abs(block) > LARGEST_USABLE_MAGNITUDE  # NaN compares False
    columns = np.flatnonzero(huge.any(axis=0)).tolist()
    if not columns:
        return
    first = columns[0]
    row_index = int(np.argmax(huge[:, first]))
    named = ", ".join(f"'{numeric[j]}'" for j in columns[:_MAX_COLUMNS_NAMED])
    more = f" and {len(columns) - _MAX_COLUMNS_NAMED} more" if len(columns) > _MAX_COLUMNS_NAMED else ""
    several = len(columns) > 1
    where_column = f" in '{numeric[first]}'" if several else ""
    raise OrdinateError(
        f"{within(subject)}, column{'s' if several else ''} {named}{more} hold{'' if several else 's'} values "
        f"too large to analyse (such as {block[row_index, first]:.3g}{where_column}, "
        f"row {row_index + 1}, line {locator.line_of_data_row(row_index)} of the file). "
        f"Numbers beyond ±{LARGEST_USABLE_MAGNITUDE:.0e} cannot be squared and summed in double precision. "
        "Rescale the column (for example, change its units) or correct the values, and load the file again."
    )


def _assemble(
    block: np.ndarray, numeric: list[str], text: dict[str, pd.Series], names: Sequence[str]
) -> pd.DataFrame:
    numbers = pd.DataFrame(block, columns=numeric, copy=False)
    if not text:
        return numbers
    frame = pd.concat([numbers, pd.DataFrame(text)], axis=1)
    return frame if list(frame.columns) == list(names) else frame[list(names)]


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

"""Column typing and cleaning: numbers or text, names, missing cells, stray cells, empty rows."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from types import MappingProxyType

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.parse import LineLocator
from webapp.analysis.ingest.column_types import settle_column_types
from webapp.analysis.ingest.roles import (
    find_group_columns,
    find_id_column,
    integers_as_text,
    unnamed_leading_label,
)
from webapp.analysis.ingest.sniff import Layout
from webapp.analysis.ingest.table import MIN_ROWS, Table, header_only_error

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

    typed = settle_column_types(parsed, names, layout.decimal, locator, max_cell_chars, subject, notes)
    numeric, looks_numeric = typed.numeric, typed.looks_numeric
    missing = typed.frame.isna().to_numpy()  # one mask serves empty columns, empty rows and missing counts
    frame, missing = _drop_empty_columns(typed.frame, missing, layout.header, notes)
    frame, missing, row_numbers = _drop_empty_rows(frame, missing, notes)
    _require_rows(len(frame), subject)

    kept = set(frame.columns)
    numeric = [name for name in numeric if name in kept]
    text_columns = _other_columns(frame, numeric)
    id_column = unnamed_leading_label(frame, layout.header[0], numeric)
    _note_unnamed_columns(frame, layout.header, notes, id_column)
    if id_column is None:
        id_column = find_id_column(frame, numeric, [n for n in text_columns if n not in looks_numeric])
    if id_column is not None and id_column in numeric:
        frame[id_column] = integers_as_text(frame[id_column])
        numeric.remove(id_column)
        text_columns = _other_columns(frame, numeric)
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


def _other_columns(frame: pd.DataFrame, numeric: Sequence[str]) -> list[str]:
    numeric_set = set(numeric)
    return [name for name in frame.columns if name not in numeric_set]


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


def _note_unnamed_columns(
    frame: pd.DataFrame, raw_header: Sequence[str], notes: list[str], leading_label: str | None
) -> None:
    # Called after empty columns are dropped: a nameless empty column is not worth two notes.
    if leading_label is not None:
        notes.append(
            f"The first column has no name in the header and holds a different value on every row "
            f"(such as the row counter 0, 1, 2, ... that some programs write); it is used to label the "
            f"samples ('{leading_label}'), not as a variable."
        )
    kept = set(frame.columns) - {leading_label}
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
"""The table that ingest returns, the limits it applies and wording shared by its steps."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from dataclasses import fields as dataclass_fields
from types import MappingProxyType

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError

DEFAULT_MAX_BYTES = 200 * 1024 * 1024
DEFAULT_MAX_CELL_CHARS = 10_000

MISSING_MARKERS: frozenset[str] = frozenset(
    {
        "", "NA", "na", "N/A", "n/a", "N/a", "NaN", "nan", "NAN",
        "null", "NULL", "Null", "None", "none", "NONE",
        "-", "--", "#N/A", "#NA", "<NA>",
    }
)
MIN_ROWS = 3


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

def within(subject: str) -> str:
    """'In 'x.csv'' or 'In the file', to open a sentence that points into the file."""
    return "In the file" if subject == "The file" else f"In {subject}"


def header_only_error(subject: str) -> OrdinateError:
    return OrdinateError(
        f"{subject} has a header row but no data rows below it. "
        f"Add at least {MIN_ROWS} samples, one per row."
    )

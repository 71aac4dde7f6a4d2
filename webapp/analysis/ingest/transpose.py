"""The transposed layout: one variable per row, one sample per column.

Spectrometers and omics pipelines often export a spectrum per column: the first
column names the variables (wavelengths, m/z values, gene names) and the header
holds the sample labels. :func:`transpose_table` turns such a table, read as
usual by :func:`~webapp.analysis.ingest.read_table`, into the usual layout:

* the first column's values become the variable names (numbers written as
  the shortest text that reads back the same: ``1100``, ``1000.25``), so that a
  column of positions gives a variable axis;
* every other numeric column becomes one sample, labelled by its header, in a
  text column ``sample`` (``sample (2)`` and so on if a variable is called that);
  other text columns cannot be samples and are left out with a warning;
* ``data_row_numbers`` then count samples by their column in the file (1 = the
  first column), so a label can still be found in the file.
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest.table import MIN_ROWS, Table


def transpose_table(table: Table, subject: str = "The file") -> Table:
    """``table`` read with variables as rows, returned with samples as rows (module rules)."""
    frame = table.frame
    name_column = frame.columns[0]
    names = _variable_names(frame[name_column], name_column, subject)
    samples = [c for c in table.numeric_columns if c != name_column]
    left_out = [c for c in frame.columns[1:] if c not in table.numeric_columns]
    if len(samples) < MIN_ROWS:
        raise OrdinateError(
            f"{subject}, read with variables as rows, has {len(samples)} numeric sample column(s); "
            f"PCA needs at least {MIN_ROWS}. Is it laid out with samples as rows instead?"
        )
    values = frame[samples].to_numpy(dtype=np.float64, na_value=np.nan).T
    label = _free_name("sample", names)
    out = pd.DataFrame(values, columns=names)
    out.insert(0, label, pd.Series(samples, dtype="str"))
    missing = np.isnan(values).sum(axis=0)
    warnings = list(table.warnings) + [
        f"Read with variables as rows: {len(samples)} samples (columns of the file) by {len(names)} variables "
        f"(rows, named by the column '{name_column}')."
    ]
    if left_out:
        shown = ", ".join(f"'{c}'" for c in left_out[:6]) + (f" and {len(left_out) - 6} more" if len(left_out) > 6 else "")
        warnings.append(f"Left out {len(left_out)} column(s) holding text, which cannot be samples: {shown}.")
    columns = list(frame.columns)
    row_numbers = np.array([columns.index(s) + 1 for s in samples], dtype=np.int64)
    row_numbers.setflags(write=False)
    return Table(
        frame=out,
        numeric_columns=tuple(names),
        text_columns=(label,),
        id_column=label,
        group_columns=(),
        warnings=tuple(warnings),
        delimiter=table.delimiter,
        decimal=table.decimal,
        encoding=table.encoding,
        missing_counts=MappingProxyType({name: int(n) for name, n in zip(names, missing)}),
        data_row_numbers=row_numbers,
    )


def _variable_names(column: pd.Series, name_column: str, subject: str) -> list[str]:
    if pd.api.types.is_numeric_dtype(column):
        names = [_number_text(v) for v in column.to_numpy(dtype=np.float64, na_value=np.nan)]
    else:
        names = [None if pd.isna(v) else str(v) for v in column.astype(object)]
    blank = [i for i, name in enumerate(names) if name in (None, "")]
    if blank:
        raise OrdinateError(
            f"{subject}, read with variables as rows, has {len(blank)} row(s) with no variable name in its first "
            f"column '{name_column}' (first at data row {blank[0] + 1}). Every row needs a name."
        )
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in seen:
            raise OrdinateError(
                f"{subject}, read with variables as rows, names the variable '{name}' twice in its first column "
                f"(data rows {seen[name] + 1} and {i + 1}). Variable names must differ."
            )
        seen[name] = i
    return names


def _number_text(value: float) -> str | None:
    if not np.isfinite(value):
        return None
    return str(int(value)) if float(value).is_integer() and abs(value) < 1e15 else repr(float(value))


def _free_name(name: str, taken) -> str:
    taken, candidate, n = set(taken), name, 1
    while candidate in taken:
        n += 1
        candidate = f"{name} ({n})"
    return candidate

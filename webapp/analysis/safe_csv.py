"""CSV text that is safe to open in a spreadsheet (pure: no I/O, no web).

Used by the downloads of the dashboard and the monitoring page
(``webapp.web.exports``) and by ``ordinate project --csv``.

Formula injection (OWASP, "CSV Injection"; ASVS 5.0 requirement 1.2.10):
spreadsheet programs run a cell whose text starts with ``=``, ``+``, ``-`` or
``@`` as a formula, and sample labels and column names come from users'
files. :func:`escape_csv_cell` prefixes such text with a single quote, which
makes spreadsheets show it as text; numbers are left alone.
"""

from __future__ import annotations

import csv
import io
import math
import numbers
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["FORMULA_TRIGGERS", "UTF8_BOM", "escape_csv_cell", "to_safe_csv"]

#: Prepended to every CSV: without it Excel reads UTF-8 files as the local
#: code page and mangles names such as "T²" or "Viskosität".
UTF8_BOM = "\ufeff"

#: First characters that make a spreadsheet read text as a formula or that can
#: hide a formula (OWASP: = + - @ tab carriage return; ASVS 1.2.10 adds NUL;
#: line feed is added for the same reason as carriage return).
FORMULA_TRIGGERS = frozenset("=+-@\t\r\n\0")
#: The formula characters, also in their full-width forms (U+FF1D, U+FF0B,
#: U+FF0D, U+FF20), which some East Asian spreadsheet set-ups accept; checked
#: after leading whitespace too, because some importers trim it.
_FORMULA_STARTS = frozenset("=+-@\uff1d\uff0b\uff0d\uff20")
_QUOTE = "'"


def escape_csv_cell(value: Any) -> Any:
    """A cell value that a spreadsheet will not run as a formula.

    Only text (Python ``str``) is changed, and only when

    * its first character is one of ``=`` ``+`` ``-`` ``@``, tab, carriage
      return, line feed or NUL, or
    * its first character after leading whitespace is ``=`` ``+`` ``-`` ``@``
      (or their full-width forms ＝ ＋ － ＠);

    it is then returned with a single quote ``'`` in front (OWASP, "CSV
    Injection"). Numbers of any type are returned unchanged, so a negative
    number stays a number; the *text* ``"-12"`` (a sample label, say) is
    escaped to ``"'-12"``, which a spreadsheet shows as the text -12.
    """
    if not isinstance(value, str) or not value:
        return value
    if value[0] in FORMULA_TRIGGERS or value[0] in _FORMULA_STARTS or value.lstrip()[:1] in _FORMULA_STARTS:
        return _QUOTE + value
    return value


def to_safe_csv(frame: pd.DataFrame) -> str:
    """The frame as CSV text that is safe to open in a spreadsheet.

    Every text cell *and every column header* goes through
    :func:`escape_csv_cell`. The text starts with a UTF-8 byte-order mark
    (:data:`UTF8_BOM`) so that Excel detects UTF-8; encode it as UTF-8.
    RFC 4180 layout: comma separated, fields quoted when they hold a comma,
    quote or line break, lines ending in CRLF. The index is not written.
    Numbers are written in full precision (the shortest text that reads
    back to the same float64); missing values as empty cells; infinity as
    ``inf``.
    """
    buffer = io.StringIO()
    buffer.write(UTF8_BOM)
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow([_cell_text(name) for name in frame.columns])
    for row in frame.itertuples(index=False, name=None):
        writer.writerow([_cell_text(value) for value in row])
    return buffer.getvalue()


def _cell_text(value: Any) -> str:
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "TRUE" if value else "FALSE"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        return "" if math.isnan(number) else repr(number)
    if isinstance(value, str):
        return escape_csv_cell(value)
    return escape_csv_cell(str(value))

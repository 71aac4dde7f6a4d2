"""Where the parts of a long dataset are, what columns they share, and how one piece is read.

A source is one of: a Parquet file; a directory of Parquet parts (``*.parquet``
files directly inside it, hidden and ``_``-prefixed files ignored); a glob of
CSV (or TSV) parts; a single CSV file. Everything that can be checked before
the fit is checked here, on the machine that starts it, so that a missing or
unreadable part names the file and a schema that differs between parts names
the column:

* Parquet: every part's footer (schema and row groups) is read; the data are
  cut into pieces of whole row groups of about ``PIECE_BYTES`` each;
* CSV: the first part is read in full with the in-memory engine's reader
  (:func:`webapp.analysis.ingest.read_table`, same parsing rules), every other
  part's header line is compared with it; each CSV part is one piece, read
  whole by one worker, so keep parts to a few hundred MB.
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError

PIECE_BYTES = 128 * 2**20
CSV_SUFFIXES = (".csv", ".tsv", ".txt")
PARQUET_SUFFIXES = (".parquet", ".parq", ".pq")
MAX_CSV_PART_BYTES = 8 * 2**30
_GLOB_CHARACTERS = set("*?[")


@dataclass(frozen=True)
class Piece:
    """One partition: a CSV part, or some row groups of a Parquet part."""

    path: str
    kind: str  # "parquet" or "csv"
    row_groups: tuple[int, ...] = ()
    rows: int | None = None  # known from the Parquet footer; None for CSV


@dataclass(frozen=True, eq=False)
class Source:
    given: str
    kind: str
    pieces: tuple[Piece, ...]
    columns: tuple[str, ...]
    numeric_columns: tuple[str, ...]
    text_columns: tuple[str, ...]
    head: pd.DataFrame  # the first rows of the first piece (for the shift and the ID column)

    @property
    def files(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(piece.path for piece in self.pieces))

    @property
    def meta(self) -> pd.DataFrame:
        return self.head.iloc[:0]

    def row_offsets(self) -> np.ndarray | None:
        """Rows before each piece, when the footers tell (Parquet); else None."""
        if any(piece.rows is None for piece in self.pieces):
            return None
        return np.concatenate([[0], np.cumsum([piece.rows for piece in self.pieces])[:-1]]).astype(np.int64)


def open_source(path: str | os.PathLike) -> Source:
    """Find and check the parts of ``path``; raise OrdinateError naming what is wrong."""
    given = str(path)
    files = _part_files(given)
    kinds = {_kind_of(f) for f in files}
    if None in kinds:
        odd = next(f for f in files if _kind_of(f) is None)
        raise OrdinateError(f"The part '{odd}' is neither Parquet nor CSV; name the parts *.parquet or *.csv.")
    if len(kinds) > 1:
        raise OrdinateError(f"The parts of '{given}' mix Parquet and CSV files; use one kind.")
    kind = kinds.pop()
    return _parquet_source(given, files) if kind == "parquet" else _csv_source(given, files)


class PieceFrame:
    """The rows of one piece: its numeric columns as one float64 matrix in column order, the rest as a frame.

    Parquet pieces are read straight from Arrow into the matrix (one copy, no
    pandas block in between); ``frame[name]`` gives any column as a pandas
    Series (for the label column). :meth:`take_numbers` hands the matrix over
    without a copy when all its columns are asked for, in order (the common
    case); a piece is read by the task that uses it, so nobody else sees it.
    """

    def __init__(self, numbers: np.ndarray, numeric: tuple[str, ...], others: pd.DataFrame):
        self.numbers = numbers
        self.numeric = tuple(numeric)
        self.others = others
        self._handed_over = False

    def __len__(self) -> int:
        return self.numbers.shape[0]

    @property
    def columns(self) -> tuple[str, ...]:
        return (*self.numeric, *self.others.columns)

    def __getitem__(self, name: str) -> pd.Series:
        if name in self.others.columns:
            return self.others[name]
        return pd.Series(self.numbers[:, self.numeric.index(name)], name=name)

    def take_numbers(self, variables) -> np.ndarray | None:
        """The ``variables`` as a private float64 matrix in column order; None if one of them is not numeric here."""
        where = {name: j for j, name in enumerate(self.numeric)}
        if any(v not in where for v in variables):
            return None
        columns = [where[v] for v in variables]
        if columns == list(range(len(self.numeric))) and not self._handed_over:
            self._handed_over = True
            return self.numbers
        out = np.empty((len(self), len(columns)), order="F")
        for k, j in enumerate(columns):
            out[:, k] = self.numbers[:, j]
        return out


def read_piece(piece: Piece, columns: tuple[str, ...]) -> PieceFrame:
    """The rows of one piece with ``columns`` (checked)."""
    try:
        if piece.kind == "parquet":
            import pyarrow.parquet as pq

            # A memory-mapped file is decoded without first being copied into a read buffer.
            frame = _arrow_piece(pq.ParquetFile(piece.path, memory_map=True).read_row_groups(list(piece.row_groups)))
        else:
            from webapp.analysis.ingest import read_table

            frame = _pandas_piece(read_table(piece.path, max_bytes=MAX_CSV_PART_BYTES).frame)
    except OrdinateError as error:
        raise OrdinateError(f"The part '{piece.path}' cannot be read: {error}") from None
    except FileNotFoundError:
        raise OrdinateError(f"The part '{piece.path}' is missing (it was there when the fit started).") from None
    except Exception as error:  # pyarrow and OS errors: name the file, never a traceback
        raise OrdinateError(f"The part '{piece.path}' cannot be read ({error}).") from None
    present = set(frame.columns)
    missing = [c for c in columns if c not in present]
    if missing:
        raise OrdinateError(f"The part '{piece.path}' lacks the column '{missing[0]}' that the other parts have.")
    return frame


def _arrow_piece(table) -> PieceFrame:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.types as t

    numeric = [f.name for f in table.schema
               if (t.is_integer(f.type) or t.is_floating(f.type) or t.is_decimal(f.type))]
    numbers = table.select(numeric)
    for i, field in enumerate(numbers.schema):
        if field.type != pa.float64():
            numbers = numbers.set_column(i, field.name, pc.cast(numbers.column(i), pa.float64()))
    others = table.select([name for name in table.column_names if name not in set(numeric)]).to_pandas()
    return PieceFrame(_float_matrix(numbers), tuple(numeric), others)


def _float_matrix(numbers) -> np.ndarray:
    """The float64 columns of an Arrow table as one private, writable, column-ordered matrix.

    pyarrow's own conversion (multi-threaded, one consolidated block, whose
    transpose is the column-ordered matrix) costs a third of copying column by
    column from Python. pandas hands the block out read-only; the frame is
    dropped here, so the matrix is private and made writable (the transforms
    and the moments work in place), unless it were to share memory with Arrow's
    buffers (which may map the file), when it is copied.
    """
    # Without the schema's pandas metadata, which would bring back the columns' pandas types (Int64, ...).
    matrix = numbers.replace_schema_metadata(None).to_pandas(split_blocks=False).to_numpy()
    arrow_buffers = (chunk.to_numpy(zero_copy_only=False) for column in numbers.columns for chunk in column.chunks
                     if len(chunk))
    private = matrix.dtype == np.float64 and matrix.flags.f_contiguous and not any(
        np.may_share_memory(matrix, buffer) for buffer in arrow_buffers)
    if not private:
        return _copied_column_by_column(numbers)
    try:
        matrix.flags.writeable = True
    except ValueError:
        return _copied_column_by_column(numbers)
    return matrix


def _copied_column_by_column(numbers) -> np.ndarray:
    matrix = np.empty((numbers.num_rows, numbers.num_columns), order="F")
    for j, column in enumerate(numbers.columns):
        start = 0
        for chunk in column.chunks:  # chunk by chunk: one copy, straight into the matrix
            stop = start + len(chunk)
            matrix[start:stop, j] = chunk.to_numpy(zero_copy_only=False)
            start = stop
    return matrix


def _pandas_piece(frame: pd.DataFrame) -> PieceFrame:
    numeric = [c for c in frame.columns
               if pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])]
    numbers = np.empty((len(frame), len(numeric)), order="F")
    for j, name in enumerate(numeric):
        numbers[:, j] = frame[name].to_numpy(dtype=np.float64, na_value=np.nan)
    return PieceFrame(numbers, tuple(numeric), frame[[c for c in frame.columns if c not in set(numeric)]])


# --- finding the parts ---------------------------------------------------------


def _part_files(given: str) -> list[str]:
    if _GLOB_CHARACTERS & set(given):
        files = sorted(f for f in glob.glob(given) if os.path.isfile(f))
        if not files:
            raise OrdinateError(f"No file matches '{given}'.")
        return [os.path.abspath(f) for f in files]
    path = Path(given)
    if not path.exists():
        raise OrdinateError(f"The data path '{given}' does not exist.")
    if path.is_dir():
        try:
            entries = sorted(path.iterdir())
        except PermissionError:
            raise OrdinateError(f"The directory '{given}' cannot be read (permission denied).") from None
        files = [str(p.resolve()) for p in entries
                 if p.is_file() and not p.name.startswith((".", "_")) and p.suffix.lower() in PARQUET_SUFFIXES]
        if not files:
            raise OrdinateError(f"The directory '{given}' holds no Parquet parts (*.parquet).")
        return files
    return [str(path.resolve())]


def _kind_of(file: str) -> str | None:
    suffix = Path(file).suffix.lower()
    return "parquet" if suffix in PARQUET_SUFFIXES else ("csv" if suffix in CSV_SUFFIXES else None)


# --- Parquet -------------------------------------------------------------------


def _parquet_source(given: str, files: list[str]) -> Source:
    import pyarrow.parquet as pq

    pieces, reference, reference_file = [], None, None
    for file in files:
        try:
            handle = pq.ParquetFile(file)
        except PermissionError:
            raise OrdinateError(f"The part '{file}' cannot be read (permission denied).") from None
        except Exception as error:
            raise OrdinateError(f"The part '{file}' cannot be read as Parquet ({error}).") from None
        schema = handle.schema_arrow
        if reference is None:
            reference, reference_file, first = schema, file, handle
        else:
            _compare_schemas(reference, reference_file, schema, file)
        pieces += _row_group_pieces(file, handle)
    if not pieces:
        raise OrdinateError(f"The Parquet data at '{given}' hold no rows.")
    # The first rows only (for the shift and the ID column), not a whole row group.
    batch = next(first.iter_batches(batch_size=1000), None) if first.metadata.num_row_groups else None
    head = (batch.to_pandas() if batch is not None else reference.empty_table().to_pandas())
    numeric, text = _column_kinds(head)
    return Source(given, "parquet", tuple(pieces), tuple(head.columns), numeric, text, head)


def _compare_schemas(reference, reference_file: str, schema, file: str) -> None:
    for field in reference:
        if schema.get_field_index(field.name) < 0:
            raise OrdinateError(
                f"The parts differ in their columns: '{field.name}' is in '{reference_file}' but not in '{file}'."
            )
        other = schema.field(field.name).type
        if not _same_kind(field.type, other):
            raise OrdinateError(
                f"The parts differ in the column '{field.name}': {field.type} in '{reference_file}', {other} in '{file}'."
            )
    extra = [name for name in schema.names if reference.get_field_index(name) < 0]
    if extra:
        raise OrdinateError(
            f"The parts differ in their columns: '{extra[0]}' is in '{file}' but not in '{reference_file}'."
        )


def _same_kind(a, b) -> bool:
    import pyarrow.types as t

    def kind(x):
        if t.is_integer(x) or t.is_floating(x) or t.is_decimal(x):
            return "number"
        if t.is_string(x) or t.is_large_string(x) or getattr(t, "is_string_view", lambda _: False)(x):
            return "text"
        return str(x)

    return kind(a) == kind(b)


def _row_group_pieces(file: str, handle) -> list[Piece]:
    meta = handle.metadata
    pieces, groups, rows, size = [], [], 0, 0
    for g in range(meta.num_row_groups):
        group = meta.row_group(g)
        groups.append(g)
        rows += group.num_rows
        size += group.num_rows * max(meta.num_columns, 1) * 8
        if size >= PIECE_BYTES:
            pieces.append(Piece(file, "parquet", tuple(groups), rows))
            groups, rows, size = [], 0, 0
    if groups:
        pieces.append(Piece(file, "parquet", tuple(groups), rows))
    return pieces


# --- CSV -----------------------------------------------------------------------


def _csv_source(given: str, files: list[str]) -> Source:
    from webapp.analysis.ingest import read_table

    first = files[0]
    try:
        table = read_table(first, max_bytes=MAX_CSV_PART_BYTES)
    except OrdinateError as error:
        raise OrdinateError(f"The part '{first}' cannot be read: {error}") from None
    except OSError as error:
        raise OrdinateError(f"The part '{first}' cannot be read ({error.strerror or error}).") from None
    header = _header_names(first, table.delimiter)
    for file in files[1:]:
        names = _header_names(file, table.delimiter)
        if names != header:
            column = next((a for a, b in zip(header, names) if a != b), None)
            if column is None:
                longer, other = (header, file) if len(header) > len(names) else (names, first)
                column = longer[min(len(header), len(names))]
            raise OrdinateError(
                f"The parts differ in their columns: '{first}' and '{file}' differ at the column '{column}'."
            )
    frame = table.frame
    numeric = tuple(c for c in table.numeric_columns)
    text = tuple(c for c in frame.columns if c not in numeric)
    return Source(given, "csv", tuple(Piece(f, "csv") for f in files), tuple(frame.columns), numeric, text,
                  frame.head(1000))


def _header_names(file: str, delimiter: str) -> list[str]:
    import csv

    try:
        with open(file, encoding="utf-8-sig", errors="replace", newline="") as handle:
            for row in csv.reader(handle, delimiter=delimiter):
                if any(cell.strip() for cell in row):
                    return [cell.strip() for cell in row]
    except OSError as error:
        raise OrdinateError(f"The part '{file}' cannot be read ({error.strerror or error}).") from None
    raise OrdinateError(f"The part '{file}' is empty.")


def _column_kinds(frame: pd.DataFrame) -> tuple[tuple[str, ...], tuple[str, ...]]:
    numeric = tuple(c for c in frame.columns
                    if pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c]))
    return numeric, tuple(c for c in frame.columns if c not in numeric)


# --- fingerprint -----------------------------------------------------------------


def fingerprint(source: Source) -> tuple[str, int]:
    """SHA-256 of the parts' absolute paths, sizes and modification times, and their total size.

    Cheap (one ``stat`` per part): it names the data for the result cache, so a
    part that is rewritten, added or removed gives another fingerprint and a new fit.
    """
    import hashlib
    import json

    entries = []
    for file in source.files:
        try:
            info = os.stat(file)
        except FileNotFoundError:
            raise OrdinateError(f"The part '{file}' is missing.") from None
        entries.append([file, info.st_size, info.st_mtime_ns])
    text = json.dumps(entries, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest(), sum(entry[1] for entry in entries)


def location_of(given: str) -> str:
    """The absolute form of a data path or glob, as stored for a server-side dataset."""
    return os.path.abspath(os.path.expanduser(str(given)))

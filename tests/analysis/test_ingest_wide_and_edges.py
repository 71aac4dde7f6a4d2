"""Ingest of wide files, messy wide files, data-frame exports and extreme values.

References: pandas.read_csv of the same file for parsed values (pandas is also
the reference for its own ``DataFrame.to_csv`` format: an unnamed first column
holding the row index 0..n-1); numpy.finfo(float).max = 1.8e308 for the range
of double precision.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table


def _wide_file(tmp_path, n_rows, n_columns, seed):
    frame = pd.DataFrame(np.random.default_rng(seed).standard_normal((n_rows, n_columns)),
                         columns=[f"{1000 + 0.5 * j:.1f} nm" for j in range(n_columns)])
    path = tmp_path / f"spectra_{n_rows}x{n_columns}.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("shape", [(500, 8_000), (5, 100_000)])
def test_wide_file_matches_pandas_read_csv(tmp_path, shape):
    path = _wide_file(tmp_path, *shape, seed=shape[1])
    with path.open() as handle:
        assert len(handle.readline()) > 64 * 1024  # the header alone is longer than a fixed sniff
    table = read_table(path)
    reference = pd.read_csv(path)  # reference: pandas.read_csv, C engine
    assert table.frame.shape == shape
    assert table.numeric_columns == tuple(reference.columns)
    np.testing.assert_array_equal(table.frame.to_numpy(dtype=np.float64), reference.to_numpy(dtype=np.float64))


def test_wide_file_given_as_bytes(tmp_path):
    path = _wide_file(tmp_path, 4, 20_000, seed=1)
    table = read_table(path.read_bytes(), filename="spectra.csv")
    np.testing.assert_array_equal(table.frame.to_numpy(), pd.read_csv(path).to_numpy())


def test_stray_cells_in_a_quoted_file_name_their_file_lines(tmp_path):
    # Quotes force the line map (a quoted value spans two lines); several stray cells in
    # several columns must each name the line a text editor shows (counted by hand below).
    lines = ['sample,"a","b","c"', '"S1\nsecond line",1,2,3', "S2,1,x,3", "S3,2,2,3", "S4,3,2,y",
             "S5,4,2,3", "S6,z,2,3", "S7,5,2,3"]
    lines = [line + (",d,e" if i == 0 else f",{i},{i * i}") for i, line in enumerate(lines)]
    path = tmp_path / "messy.csv"
    path.write_text("\n".join(lines) + "\n")
    table = read_table(path)
    assert table.text_columns == ("sample", "a", "b", "c")
    by_column = {note.split("'")[1]: note for note in table.warnings if "looks numeric" in note}
    # File lines: header 1; S1 starts on 2 and ends on 3; S2 is line 4, S4 line 6, S6 line 8.
    assert "row 6 (line 8 of the file) reads 'z'" in by_column["a"]
    assert "row 2 (line 4 of the file) reads 'x'" in by_column["b"]
    assert "row 4 (line 6 of the file) reads 'y'" in by_column["c"]


def test_pandas_to_csv_index_becomes_the_sample_label(tmp_path):
    frame = pd.DataFrame({"Cu": [1.5, 3.0, 2.5, 4.0, 3.5], "Zn": [2.25, 4.5, 1.75, 3.5, 2.0]})
    path = tmp_path / "export.csv"
    frame.to_csv(path)  # pandas' default: the index 0..n-1 under an empty header cell
    assert path.read_text().startswith(",Cu,Zn\n0,")
    table = read_table(path)
    assert table.numeric_columns == ("Cu", "Zn")
    assert table.id_column == "column 1"
    assert table.sample_labels() == ["0", "1", "2", "3", "4"]
    np.testing.assert_array_equal(table.frame["Cu"].to_numpy(), pd.read_csv(path, index_col=0)["Cu"].to_numpy())
    notice = [note for note in table.warnings if "first column has no name" in note]
    assert len(notice) == 1 and "label the samples" in notice[0]
    assert not any("called 'column N'" in note for note in table.warnings)


def test_pandas_to_csv_text_index_becomes_the_sample_label(tmp_path):
    frame = pd.DataFrame({"Cu": [1.5, 3.0, 2.5], "Zn": [2.25, 4.5, 1.75]}, index=["lot7", "lot8", "lot9"])
    path = tmp_path / "export.csv"
    frame.to_csv(path)
    table = read_table(path)
    assert table.id_column == "column 1" and table.sample_labels() == ["lot7", "lot8", "lot9"]
    assert table.numeric_columns == ("Cu", "Zn")


def test_unnamed_leading_measurements_stay_a_variable():
    # Common practice: a nameless column of non-whole measurements is data, not a row counter.
    table = read_table(b",Cu,Zn\n0.5,1,2\n0.7,2,1\n0.2,3,5\n")
    assert table.numeric_columns == ("column 1", "Cu", "Zn") and table.id_column is None


def test_unnamed_leading_column_with_repeats_stays_a_variable():
    table = read_table(b",Cu,Zn\n1,1,2\n1,2,1\n2,3,5\n")
    assert "column 1" in table.numeric_columns and table.id_column is None


def test_values_whose_squares_overflow_are_refused_naming_the_column():
    # 1e308 squared exceeds numpy.finfo(float).max (1.8e308).
    with pytest.raises(OrdinateError) as caught:
        read_table(b"a,b\n1,2\n-1e308,5\n2,1\n1e308,4\n", filename="extreme.csv")
    message = str(caught.value)
    assert "'a'" in message and "'b'" not in message
    assert "row 2, line 3 of the file" in message
    assert "Rescale" in message and "units" in message


def test_several_huge_columns_are_all_named():
    with pytest.raises(OrdinateError, match=r"columns 'a', 'c' hold values too large"):
        read_table(b"a,b,c\n1e200,2,3\n1,5,-1e160\n2,1,1\n")


def test_large_but_usable_values_are_kept():
    table = read_table(b"a,b\n1e149,2\n-3e149,5\n2e149,1\n")  # below the 1e150 bound
    np.testing.assert_array_equal(table.frame["a"].to_numpy(), [1e149, -3e149, 2e149])

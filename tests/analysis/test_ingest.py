"""Tests for webapp.analysis.ingest.read_table.

References used below:
- pandas.read_csv (general-purpose reference library) for parsed values;
- RFC 4180 ("Common Format and MIME Type for CSV Files") for quoting rules:
  fields containing the delimiter, line breaks or quotes are enclosed in
  double quotes, and a quote inside is written twice;
- Python's codecs (utf-8, utf-8-sig, utf-16-le/-be, cp1252) to produce the
  encoded bytes; the byte-order marks are those of the Unicode standard;
- file signatures (PNG, zip) as published by their formats.
Other rules (missing markers, decimal comma with semicolon delimiter) are
common practice in lab and spreadsheet exports and are marked so.
"""

from __future__ import annotations

import io
import math
import zipfile

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import (
    DEFAULT_MAX_BYTES,
    DEFAULT_MAX_CELL_CHARS,
    Table,
    read_table,
)

PLAIN = "sample,Cu,Zn,Fe\nS1,1.5,2.25,10\nS2,3.0,4.5,12\nS3,2.5,1.75,11\nS4,4.0,3.5,13\n"


def read_error(source, **kwargs) -> str:
    """Read bad input and return the OrdinateError message (never a traceback)."""
    with pytest.raises(OrdinateError) as caught:
        read_table(source, **kwargs)
    message = str(caught.value)
    assert "Traceback" not in message
    assert message.strip()
    return message


# --------------------------------------------------------------------------
# Round trip against pandas (reference library)
# --------------------------------------------------------------------------


def test_plain_file_matches_pandas_read_csv(tmp_path):
    path = tmp_path / "plain.csv"
    path.write_text(PLAIN, encoding="utf-8")
    table = read_table(path)
    reference = pd.read_csv(path)  # reference: pandas.read_csv, default C engine
    assert isinstance(table, Table)
    assert list(table.frame.columns) == list(reference.columns)
    for name in ("Cu", "Zn", "Fe"):
        np.testing.assert_array_equal(table.frame[name].to_numpy(), reference[name].to_numpy(dtype=float))
        assert table.frame[name].dtype == np.float64
    assert table.frame["sample"].tolist() == reference["sample"].tolist()
    assert table.numeric_columns == ("Cu", "Zn", "Fe")
    assert table.text_columns == ("sample",)
    assert (table.delimiter, table.decimal, table.encoding) == (",", ".", "utf-8")
    assert table.n_rows == 4
    assert isinstance(table.frame.index, pd.RangeIndex)


def test_path_and_bytes_give_the_same_table(tmp_path):
    path = tmp_path / "plain.csv"
    path.write_bytes(PLAIN.encode())
    from_path = read_table(path)
    from_str_path = read_table(str(path))
    from_bytes = read_table(PLAIN.encode(), filename="plain.csv")
    pd.testing.assert_frame_equal(from_path.frame, from_bytes.frame)
    pd.testing.assert_frame_equal(from_str_path.frame, from_bytes.frame)


def test_large_file_read_from_path_matches_pandas(tmp_path):
    # Over 5 MB, so pandas may split the read across threads; values must not change.
    rng = np.random.default_rng(7)
    values = rng.normal(size=(60_000, 6)) * [1, 10, 100, 0.01, 1e4, 3]
    reference_frame = pd.DataFrame(values, columns=[f"x{i}" for i in range(6)])
    path = tmp_path / "large.csv"
    reference_frame.to_csv(path, index=False)
    table = read_table(path)
    reference = pd.read_csv(io.BytesIO(path.read_bytes()))  # reference: pandas.read_csv on bytes (serial)
    np.testing.assert_array_equal(table.frame.to_numpy(), reference.to_numpy())
    assert table.warnings == ()


# --------------------------------------------------------------------------
# Delimiters and decimal marks
# --------------------------------------------------------------------------


@pytest.mark.parametrize("delimiter", [",", ";", "\t", "|"])
def test_each_delimiter_is_detected(delimiter):
    text = PLAIN.replace(",", delimiter)
    table = read_table(text.encode())
    reference = pd.read_csv(io.StringIO(text), sep=delimiter)  # reference: pandas.read_csv, sep given
    assert table.delimiter == delimiter
    assert table.decimal == "."
    columns = ["Cu", "Zn", "Fe"]
    np.testing.assert_array_equal(table.frame[columns].to_numpy(), reference[columns].to_numpy())


def test_decimal_comma_with_semicolon_delimiter():
    # Common practice: European lab exports write 1,25;3,4.
    text = "Probe;pH;Leitfähigkeit\nA;7,25;1,5e2\nB;6,80;2,25e2\nC;7,05;1,75e2\n"
    table = read_table(text.encode("utf-8"))
    reference = pd.read_csv(io.StringIO(text), sep=";", decimal=",")  # reference: pandas.read_csv
    assert (table.delimiter, table.decimal) == (";", ",")
    np.testing.assert_array_equal(table.frame["pH"].to_numpy(), reference["pH"].to_numpy())
    np.testing.assert_array_equal(table.frame["Leitfähigkeit"].to_numpy(), [150.0, 225.0, 175.0])
    assert table.frame["pH"].tolist() == [7.25, 6.80, 7.05]


def test_semicolon_with_decimal_point_stays_point():
    table = read_table(b"a;b\n1.5;2.5\n3.25;4\n5;6.75\n")
    assert (table.delimiter, table.decimal) == (";", ".")
    assert table.frame["a"].tolist() == [1.5, 3.25, 5.0]


def test_thousands_separators_do_not_crash_and_stay_text():
    # Thousands separators are not interpreted (by design); they must not crash.
    text = "id;a;b;c\nA;1.234,5;2;3\nB;3,4;1;4\nC;5;6;5\nD;1;2;9\n"
    table = read_table(text.encode())
    assert table.decimal == ","
    assert "a" in table.text_columns
    assert table.numeric_columns == ("b", "c")
    assert any("Column 'a'" in w and "'1.234,5'" in w for w in table.warnings)

    quoted = b'id,a,b,c\nA,"1,234",2,3\nB,5,1,4\nC,6,6,5\n'
    table = read_table(quoted)
    assert table.frame["a"].tolist() == ["1,234", "5", "6"]
    assert "a" in table.text_columns


def test_tsv_filename_breaks_a_delimiter_tie():
    # Both tab and comma split every line consistently; comma gives more fields,
    # but the .tsv name decides for tab.
    text = b"a\tb\tc,d,e,f\n1\t2\t3,4,5,6\n5\t6\t7,8,9,1\n9\t1\t2,3,4,5\n"
    as_tsv = read_table(text, filename="export.tsv")
    assert as_tsv.delimiter == "\t" and as_tsv.numeric_columns == ("a", "b")
    as_csv = read_table(text, filename="export.csv")
    assert as_csv.delimiter == "," and as_csv.numeric_columns == ("d", "e", "f")


def test_excel_sep_line_fixes_the_delimiter():
    table = read_table(b"sep=;\nid;a;b\nx;1;2\ny;3;4\nz;5;7\n")
    assert table.delimiter == ";"
    assert list(table.frame.columns) == ["id", "a", "b"]
    assert table.frame["b"].tolist() == [2.0, 4.0, 7.0]


def test_crlf_line_endings():
    table = read_table(PLAIN.replace("\n", "\r\n").encode())
    assert table.frame["Fe"].tolist() == [10.0, 12.0, 11.0, 13.0]
    assert table.frame["sample"].tolist() == ["S1", "S2", "S3", "S4"]


# --------------------------------------------------------------------------
# Encodings
# --------------------------------------------------------------------------


def test_utf8_with_bom():
    table = read_table(b"\xef\xbb\xbf" + PLAIN.encode())
    assert table.encoding == "utf-8-sig"
    assert table.frame.columns[0] == "sample"  # no stray U+FEFF in the first name


def test_utf8_without_bom_keeps_non_ascii_names():
    table = read_table("id,Zn (µg/L),T (°C)\na,1,20\nb,2,21\nc,3,22\n".encode("utf-8"))
    assert table.encoding == "utf-8"
    assert table.numeric_columns == ("Zn (µg/L)", "T (°C)")


@pytest.mark.parametrize(
    ("bom", "codec"),
    [(b"\xff\xfe", "utf-16-le"), (b"\xfe\xff", "utf-16-be")],  # Unicode byte-order marks
)
def test_utf16_with_bom(bom, codec):
    text = "Probe;Zn (µg/L);T (°C)\nA;1,5;20\nB;2,5;21\nC;3,5;22\n"
    table = read_table(bom + text.encode(codec))
    assert table.encoding == "utf-16"
    assert (table.delimiter, table.decimal) == (";", ",")
    assert table.numeric_columns == ("Zn (µg/L)", "T (°C)")
    assert table.frame["Zn (µg/L)"].tolist() == [1.5, 2.5, 3.5]


def test_utf16_without_bom_is_recognised():
    table = read_table(PLAIN.encode("utf-16-le"))
    assert table.encoding == "utf-16-le"
    assert table.frame["Zn"].tolist() == [2.25, 4.5, 1.75, 3.5]


def test_cp1252_header_with_micro_and_degree():
    text = "Probe;Zn (µg/L);T (°C)\nA;1,5;20\nB;2,5;21\nC;3,5;22\n"
    data = text.encode("cp1252")
    assert b"\xb5" in data and b"\xb0" in data  # µ and ° as single cp1252 bytes, not UTF-8
    table = read_table(data)
    assert table.encoding == "cp1252"
    assert table.numeric_columns == ("Zn (µg/L)", "T (°C)")


def test_cp1252_euro_sign_in_text():
    data = "item,price,qty\nA \u20ac,1,2\nB,2,3\nC,3,4\n".encode("cp1252")  # € is 0x80 in cp1252
    table = read_table(data)
    assert table.encoding == "cp1252"
    assert table.frame["item"].tolist()[0] == "A \u20ac"


def test_utf32_with_bom():
    table = read_table(PLAIN.encode("utf-32"))  # Python writes the UTF-32 byte-order mark
    assert table.encoding == "utf-32"
    assert table.frame["Cu"].tolist() == [1.5, 3.0, 2.5, 4.0]


def test_invalid_bytes_after_a_utf8_bom_raise_ordinate_error_from_the_codec_error():
    with pytest.raises(OrdinateError) as caught:
        read_table(b"\xef\xbb\xbfa,b\n1,2\n3,\xff\n5,6\n")
    assert isinstance(caught.value.__cause__, UnicodeDecodeError)
    assert "UTF-8" in str(caught.value) and "Traceback" not in str(caught.value)


def test_bytes_undefined_in_cp1252_fall_back_to_latin1():
    data = b"name,a,b\nx\x81y,1,2\nq,3,4\nr,5,6\n"  # 0x81 is unassigned in cp1252
    table = read_table(data)
    assert table.encoding == "latin-1"
    assert table.frame["name"].tolist()[0] == "x\x81y"


# --------------------------------------------------------------------------
# Quoting (RFC 4180)
# --------------------------------------------------------------------------


def test_quoted_fields_with_delimiter_newline_and_doubled_quote():
    data = b'name,a,b\n"Smith, J.",1,2\n"two\nlines",3,4\n"say ""hi""",5,6\n'
    table = read_table(data)
    assert table.frame["name"].tolist() == ["Smith, J.", "two\nlines", 'say "hi"']
    assert table.frame["a"].tolist() == [1.0, 3.0, 5.0]
    assert table.id_column == "name"


def test_quoted_numbers_are_numbers():
    table = read_table(b'"a","b"\n"1.5","2"\n"3","4"\n"5","6"\n')
    assert table.numeric_columns == ("a", "b")
    assert table.frame["a"].tolist() == [1.5, 3.0, 5.0]


# --------------------------------------------------------------------------
# Missing values, infinities, stray text
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "marker", ["", " ", "NA", "na", "N/A", "n/a", "NaN", "nan", "null", "NULL", "-", "#N/A"]
)
def test_missing_markers_are_counted(marker):
    # Common practice: these spellings mean "no value" in lab and spreadsheet exports.
    data = f"a,b\n1,{marker}\n2,5\n3,{marker}\n4,7\n".encode()
    table = read_table(data)
    assert table.numeric_columns == ("a", "b")
    assert table.missing_counts["b"] == 2
    assert table.missing_counts["a"] == 0
    assert math.isnan(table.frame["b"][0]) and table.frame["b"][1] == 5.0


def test_missing_markers_in_text_column_and_sodium_kept():
    data = b"element,a,b\nNa,1,2\nNA,3,4\nK,5,6\n-,7,8\n"
    table = read_table(data)
    values = table.frame["element"].tolist()
    assert values[0] == "Na"  # the symbol for sodium is not a missing marker
    assert values[2] == "K"
    assert pd.isna(values[1]) and pd.isna(values[3])


def test_missing_counts_is_read_only():
    table = read_table(PLAIN.encode())
    with pytest.raises(TypeError):
        table.missing_counts["Cu"] = 5  # type: ignore[index]


def test_infinite_values_become_missing_with_warning():
    data = b"a,pH\n1,inf\n2,-inf\n3,Infinity\n4,7.1\n5,7.2\n"
    table = read_table(data)
    assert table.missing_counts["pH"] == 3
    assert np.isnan(table.frame["pH"].to_numpy()[:3]).all()
    assert not np.isinf(table.frame["pH"].to_numpy()).any()
    messages = [w for w in table.warnings if "'pH'" in w]
    assert len(messages) == 1 and "3 cells" in messages[0] and "missing" in messages[0]


def test_spreadsheet_error_cells_become_missing_with_warning():
    table = read_table(b"a,b\n1,#DIV/0!\n2,3\n3,4\n")
    assert table.missing_counts["b"] == 1
    assert any("'b'" in w and "#DIV/0!" in w for w in table.warnings)


def test_stray_text_in_numeric_column_gives_text_column_and_warning():
    rows = [f"S{i},{i}.5,{i * 2},{i % 3}.1" for i in range(1, 14)]
    rows[12] = "S13,<0.5,26,0.1"  # data row 13 = line 14 of the file
    data = ("sample,Mg,Ca,K\n" + "\n".join(rows) + "\n").encode()
    table = read_table(data)
    assert "Mg" in table.text_columns and "Mg" not in table.numeric_columns
    warning = next(w for w in table.warnings if "'Mg'" in w)
    assert "row 13" in warning and "line 14" in warning and "'<0.5'" in warning
    assert table.id_column == "sample"  # the nearly numeric column is never taken for an ID


def test_whitespace_around_numbers_and_text_is_trimmed():
    table = read_table(b"id,a,b\n  x ,  1.5 , 2\ny,3,  4\nz,5,6\n")
    assert table.frame["a"].tolist() == [1.5, 3.0, 5.0]
    assert table.frame["id"].tolist() == ["x", "y", "z"]


# --------------------------------------------------------------------------
# Empty rows and columns, header names
# --------------------------------------------------------------------------


def test_empty_rows_and_columns_are_dropped_with_counts():
    data = b"id,a,empty,b,\nx,1,,2,\n,,,,\n\ny,3,,4,\nz,5,,6,\n"
    table = read_table(data)
    assert list(table.frame.columns) == ["id", "a", "b"]
    assert table.n_rows == 3
    assert any("2 empty rows" in w for w in table.warnings)
    column_warning = next(w for w in table.warnings if "empty column" in w)
    assert "2 empty columns" in column_warning and "'empty'" in column_warning
    # Row numbers keep pointing at the file: data rows 1, 4 and 5.
    assert table.data_row_numbers.tolist() == [1, 4, 5]
    assert table.frame["a"].tolist() == [1.0, 3.0, 5.0]


def test_row_labels_follow_file_rows_after_dropping():
    table = read_table(b"a,b\n1,2\n,\n3,4\n5,6\n")
    assert table.id_column is None
    assert table.sample_labels() == ["row 1", "row 3", "row 4"]


def test_duplicate_column_names_are_made_unique():
    table = read_table(b"pH,pH,Cu,pH\n1,2,3,4\n2,3,4,5\n3,4,5,7\n")
    assert list(table.frame.columns) == ["pH", "pH (2)", "Cu", "pH (3)"]
    assert table.frame["pH (3)"].tolist() == [4.0, 5.0, 7.0]
    assert any("'pH (2)'" in w and "'pH (3)'" in w for w in table.warnings)


def test_renaming_avoids_names_already_taken():
    table = read_table(b"pH,pH (2),pH\n1,2,3\n2,3,4\n3,4,6\n")
    assert list(table.frame.columns) == ["pH", "pH (2)", "pH (3)"]


def test_blank_header_names_get_position_names():
    table = read_table(b"a,,b, \n1,2,3,4\n2,3,4,5\n3,4,5,7\n")
    assert list(table.frame.columns) == ["a", "column 2", "b", "column 4"]
    assert any("no name" in w and "2, 4" in w for w in table.warnings)


def test_trailing_separator_on_every_line_gives_one_note():
    table = read_table(b"id,a,b,\nx,1,2,\ny,3,4,\nz,5,6,\n")
    assert list(table.frame.columns) == ["id", "a", "b"]
    assert len(table.warnings) == 1 and "1 without a name" in table.warnings[0]


def test_rows_with_fewer_fields_are_padded():
    # Common practice for CSV readers: short rows are padded with missing values.
    table = read_table(b"a,b,c\n1,2\n3,4,5\n6,7,8\n")
    assert table.frame["c"].isna().tolist() == [True, False, False]
    assert table.missing_counts["c"] == 1
    assert table.frame["b"].tolist() == [2.0, 4.0, 7.0]


def test_blank_lines_before_header_are_skipped():
    table = read_table(b"\n\nid,a,b\nx,1,2\ny,3,4\nz,5,6\n")
    assert list(table.frame.columns) == ["id", "a", "b"]
    assert table.n_rows == 3


# --------------------------------------------------------------------------
# Sample ID and grouping columns
# --------------------------------------------------------------------------


def test_id_column_prefers_an_id_like_name():
    data = b"comment,Batch ID,line,a,b\nok,B1,L1,1,2\nfine,B2,L1,2,3\nlow,B3,L2,3,5\nhigh,B4,L2,4,4\n"
    table = read_table(data)
    assert table.id_column == "Batch ID"
    assert table.sample_labels() == ["B1", "B2", "B3", "B4"]
    assert "line" in table.group_columns
    assert "Batch ID" not in table.group_columns


def test_first_unique_text_column_is_id_without_id_like_name():
    table = read_table(b"where,a,b\nnorth,1,2\nsouth,2,3\neast,3,5\n")
    assert table.id_column == "where"


def test_no_id_when_text_repeats_or_has_gaps():
    table = read_table(b"site,a,b\nA,1,2\nA,2,3\nB,3,5\nB,4,6\n")
    assert table.id_column is None
    assert table.group_columns == ("site",)
    table = read_table(b"site,a,b\nA,1,2\n,2,3\nC,3,5\n")
    assert table.id_column is None


def test_integer_column_named_as_identifier_becomes_text_id():
    table = read_table(b"Sample No,a,b\n101,1.5,2\n102,2.5,3\n103,3.5,5\n")
    assert table.id_column == "Sample No"
    assert "Sample No" in table.text_columns and "Sample No" not in table.numeric_columns
    assert table.sample_labels() == ["101", "102", "103"]


def test_unique_integer_measurement_is_not_taken_for_an_id():
    table = read_table(b"Viscosity,a,b\n1200,1.5,2\n1350,2.5,3\n1410,3.5,5\n")
    assert table.id_column is None
    assert "Viscosity" in table.numeric_columns


def test_integer_coded_groups_stay_numeric_and_are_candidates():
    data = b"shift,a,b\n1,1.1,2\n2,2.2,3\n1,3.3,5\n2,4.4,6\n3,5.5,1\n3,6.6,2\n"
    table = read_table(data)
    assert "shift" in table.group_columns
    assert "shift" in table.numeric_columns
    assert "a" not in table.group_columns


def test_too_many_distinct_text_values_is_not_a_group():
    lines = ["tag,a,b"] + [f"T{i % 25},{i},{i * 0.5}" for i in range(100)]
    table = read_table(("\n".join(lines) + "\n").encode())
    assert "tag" not in table.group_columns  # 25 distinct values > 20


# --------------------------------------------------------------------------
# Errors
# --------------------------------------------------------------------------


def test_empty_file(tmp_path):
    assert "empty" in read_error(b"")
    assert "empty" in read_error(b"  \n\n ")
    path = tmp_path / "nothing.csv"
    path.write_bytes(b"")
    assert "'nothing.csv'" in read_error(path)


def test_header_only():
    assert "no data rows" in read_error(b"a,b,c\n", filename="x.csv")


def test_binary_png():
    png = b"\x89PNG\r\n\x1a\n" + bytes(range(256))  # PNG signature (PNG specification)
    assert "PNG image" in read_error(png)


def test_binary_xlsx_zip():
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("xl/workbook.xml", "<workbook/>")
    message = read_error(buffer.getvalue(), filename="data.xlsx")
    assert "'data.xlsx'" in message and "CSV" in message and "workbook" in message


def test_binary_nul_bytes():
    message = read_error(b"a,b\n1,2\n3,\x00\x004\n5,6\n")
    assert "binary" in message and "byte 11" in message  # 'a,b\n1,2\n3,' is 10 bytes


def test_ragged_row_names_the_file_line():
    message = read_error(b"a,b\n1,2\n3,4\n5,6,7\n8,9\n")
    assert "line 4" in message and "3 values" in message and "2 columns" in message


def test_ragged_first_data_row():
    message = read_error(b"a,b\n1,2,3\n3,4\n5,6\n")
    assert "line 2" in message


def test_ragged_line_counts_blank_lines_and_quoted_newlines():
    data = b'id,a,b\n"two\nlines",1,2\n\nx,3,4\ny,5,6,7\n'
    message = read_error(data)
    assert "line 6" in message  # as a text editor counts: the quoted break and the blank line count


def test_ragged_row_far_beyond_the_sniffed_prefix():
    lines = ["a,b,c"] + [f"{i},{i + 1},{i + 2}" for i in range(20_000)] + ["1,2,3,4"]
    message = read_error(("\n".join(lines) + "\n").encode())
    assert "line 20002" in message


def test_ragged_header_missing_first_name_gets_a_hint():
    message = read_error(b"a,b\nr1,1,2\nr2,3,4\nr3,5,6\n")
    assert "line 2" in message and "first column" in message


def test_unclosed_quote_names_its_line():
    message = read_error(b'a,b\n1,2\n3,"4\n5,6\n')
    assert "line 3" in message and "quotation mark" in message


def test_fewer_than_two_numeric_columns():
    message = read_error(b"id,a,note\nx,1,ok\ny,2,bad\nz,3,fine\n")
    assert "only one numeric column" in message and "'a'" in message


def test_fewer_than_two_numeric_columns_names_stray_cell():
    message = read_error(b"a,b\n1,2\n2,n.d.\n3,4\n")
    assert "'b'" in message and "row 2" in message and "'n.d.'" in message


def test_fewer_than_three_rows():
    message = read_error(b"a,b\n1,2\n3,4\n")
    assert "only 2 data rows" in message and "at least 3" in message


def test_all_text():
    message = read_error(b"name,colour\nx,red\ny,blue\nz,green\n")
    assert "no numeric column" in message


def test_single_column_file():
    assert "only one column" in read_error(b"value\n1\n2\n3\n")


def test_file_over_size_limit_bytes_and_path(tmp_path):
    data = PLAIN.encode() * 40_000  # about 2.8 MB
    message = read_error(data, max_bytes=2 * 2**20)
    assert f"is {len(data) / 2**20:.1f} MB" in message and "over the 2 MB limit" in message
    path = tmp_path / "big.csv"
    path.write_bytes(data)
    message = read_error(path, max_bytes=2 * 2**20)
    assert "'big.csv'" in message and "2 MB limit" in message
    assert DEFAULT_MAX_BYTES == 200 * 1024 * 1024


def test_small_size_limit_is_worded_in_kilobytes():
    message = read_error(b"a,b\n" + b"1,2\n" * 1000, max_bytes=2048)  # 4004 bytes
    assert "is 3.9 KB" in message and "over the 2 KB limit" in message


def test_cell_over_length_limit_names_row_and_column():
    data = b"id,a,b\nx,1,2\ny,3,4\n" + b"z" * 50 + b",5,6\n"
    message = read_error(data, max_cell_chars=20)
    assert "'id'" in message and "row 3" in message and "line 4" in message
    assert DEFAULT_MAX_CELL_CHARS == 10_000
    assert read_table(data).n_rows == 3  # within the default limit


def test_missing_path(tmp_path):
    assert "not found" in read_error(tmp_path / "absent.csv")


def test_directory_path(tmp_path):
    assert "folder" in read_error(tmp_path)


def test_unsupported_source_type():
    assert "file path" in read_error(12)  # type: ignore[arg-type]


# --------------------------------------------------------------------------
# Larger files: chunked parsing and line arithmetic
# --------------------------------------------------------------------------


def test_stray_cell_deep_in_a_large_file():
    lines = ["a,b,c"] + [f"{i},{i * 0.5},{i % 7}" for i in range(150_000)]
    lines[140_001] = "140000,<LOD,0"  # data row 140 001, file line 140 002
    table = read_table(("\n".join(lines) + "\n").encode())
    assert table.text_columns == ("b",)
    warning = next(w for w in table.warnings if "'b'" in w)
    assert "row 140001" in warning and "line 140002" in warning and "'<LOD'" in warning


# --------------------------------------------------------------------------
# Property: numeric tables written with any delimiter/decimal/encoding read back
# --------------------------------------------------------------------------

finite_floats = st.floats(
    min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False, allow_subnormal=False
)


@st.composite
def written_tables(draw):
    n_rows = draw(st.integers(min_value=3, max_value=12))
    n_cols = draw(st.integers(min_value=2, max_value=5))
    cells = draw(st.lists(finite_floats, min_size=n_rows * n_cols, max_size=n_rows * n_cols))
    values = np.array(cells).reshape(n_rows, n_cols)
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    decimal = "." if delimiter == "," else draw(st.sampled_from([".", ","]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252"]))
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    names = [f"v{j} (µg/L)" for j in range(n_cols)]
    lines = [delimiter.join(names)]
    for row in values:
        lines.append(delimiter.join(repr(float(x)).replace(".", decimal) for x in row))
    data = (newline.join(lines) + newline).encode(encoding)
    return values, names, delimiter, encoding, data


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(written_tables())
def test_written_numeric_tables_read_back_equal(case):
    values, names, delimiter, encoding, data = case
    table = read_table(data)
    assert table.delimiter == delimiter
    assert table.numeric_columns == tuple(names)
    assert table.encoding == ("utf-16" if encoding == "utf-16" else encoding)
    # repr() round-trips floats exactly; allow only the last bit for the parser.
    np.testing.assert_allclose(table.frame[names].to_numpy(), values, rtol=1e-15, atol=0)


# --------------------------------------------------------------------------
# Property: whatever the bytes, the only exception is OrdinateError
# --------------------------------------------------------------------------

awkward_cells = st.sampled_from(
    [
        "1", "2.5", "1,5", "-3e2", "", " ", "NA", "Na", "inf", "1e400", "<0.5", '"a,b"', '"x\ny"', 'a"b', '"',
        "#DIV/0!", "True", "99999999999999999999999", "µ", "sep=;", "-", "1.234,5", "\r", "\x00",
    ]
)


@st.composite
def awkward_files(draw):
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    rows = draw(st.lists(st.lists(awkward_cells, max_size=6), max_size=8))
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    encoding = draw(st.sampled_from(["utf-8", "utf-16", "cp1252", "utf-8-sig"]))
    return newline.join(delimiter.join(row) for row in rows).encode(encoding, errors="replace")


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(st.binary(max_size=400), awkward_files()))
def test_any_input_gives_a_table_or_an_ordinate_error(data):
    try:
        table = read_table(data)
    except OrdinateError as error:
        assert "Traceback" not in str(error)
        return
    assert len(table.numeric_columns) >= 2 and table.n_rows >= 3
    assert sorted(table.numeric_columns + table.text_columns) == sorted(table.frame.columns)
    assert all(table.frame[name].dtype == np.float64 for name in table.numeric_columns)
    assert len(table.sample_labels()) == table.n_rows

"""The transposed layout (variables as rows): webapp/analysis/ingest/transpose.py."""

import numpy as np
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import read_table, transpose_table
from webapp.analysis.variable_axis import table_axis


def test_rows_become_variables_and_header_cells_become_samples():
    text = "nm,S1,S2,S3,note\n" + "\n".join(f"{1000 + 0.25 * i},{i},{2 * i},{i * i},x" for i in range(12)) + "\n"
    table = transpose_table(read_table(text.encode()))
    assert table.id_column == "sample" and table.sample_labels() == ["S1", "S2", "S3"]
    assert table.numeric_columns[:2] == ("1000", "1000.25")
    np.testing.assert_array_equal(table.frame["1000.5"].to_numpy(), [2.0, 4.0, 4.0])
    assert table_axis(table).span() == (1000.0, 1002.75)
    assert any("text, which cannot be samples: 'note'" in w for w in table.warnings)
    assert table.data_row_numbers.tolist() == [2, 3, 4]  # columns of the file


def test_text_variable_names_and_a_clash_with_the_label_column():
    text = "gene,A,B,C\nsample,1,2,3\ng2,4,5,7\ng3,1,1,2\n"
    table = transpose_table(read_table(text.encode()))
    assert table.id_column == "sample (2)" and table.numeric_columns == ("sample", "g2", "g3")


def test_repeated_or_blank_variable_names_are_refused():
    with pytest.raises(OrdinateError, match="names the variable 'g2' twice"):
        transpose_table(read_table(b"gene,A,B,C\ng2,1,2,3\ng2,4,5,7\ng3,1,1,2\n"))
    with pytest.raises(OrdinateError, match="needs a name"):
        transpose_table(read_table(b"gene,A,B,C\ng1,1,2,3\n,4,5,7\ng3,1,1,2\n"))


def test_too_few_sample_columns_suggest_the_other_layout():
    with pytest.raises(OrdinateError, match="Is it laid out with samples as rows instead"):
        transpose_table(read_table(b"gene,A,B\ng1,1,2\ng2,4,5\ng3,1,1\n"))

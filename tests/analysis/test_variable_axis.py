"""Variable axis: numeric column names read as ordered positions (rule in webapp/analysis/variable_axis.py)."""

import numpy as np
import pytest

from webapp.analysis.ingest import read_table
from webapp.analysis.variable_axis import parse_position, table_axis, variable_axis


@pytest.mark.parametrize(
    "name, expected",
    [
        ("1000.25", ("", 1000.25, "")),
        ("4000 cm-1", ("", 4000.0, "cm-1")),
        ("m/z 301.1", ("m/z", 301.1, "")),
        ("1100nm", ("", 1100.0, "nm")),
        ("nm_1100", ("nm", 1100.0, "")),
        ("RT 12.5 min", ("RT", 12.5, "min")),
        ("ppm -0.5", ("ppm", -0.5, "")),
        ("1e3", ("", 1000.0, "")),
    ],
)
def test_positions_are_read_with_prefix_and_unit(name, expected):
    assert parse_position(name) == expected


@pytest.mark.parametrize("name", ["X1", "A2B3", "12-14", "1.2.3", "moisture", "", "pH"])
def test_labels_with_numbers_glued_in_are_not_positions(name):
    assert parse_position(name) is None


def test_wavenumbers_with_unit_form_a_decreasing_axis_and_other_columns_stay_apart():
    names = [f"{4000 - 4 * i} cm-1" for i in range(50)] + ["moisture"]
    axis = variable_axis(names)
    assert axis is not None
    assert axis.unit == "cm-1" and axis.prefix == ""
    np.testing.assert_array_equal(axis.positions, 4000.0 - 4 * np.arange(50))
    assert axis.names == tuple(names[:50])
    assert axis.other == ("moisture",)
    assert not axis.increasing
    assert axis.span() == (3804.0, 4000.0)


def test_mass_to_charge_prefix():
    axis = variable_axis([f"m/z {100 + 0.5 * i:.1f}" for i in range(12)])
    assert axis.prefix == "m/z" and axis.positions[1] == 100.5


def test_too_few_or_too_mixed_or_unordered_columns_have_no_axis():
    assert variable_axis([str(1000 + i) for i in range(9)]) is None  # fewer than 10
    mixed = [str(1000 + i) for i in range(10)] + [f"chem{i}" for i in range(2)]  # 10 of 12 = 83 % < 90 %
    assert variable_axis(mixed) is None
    shuffled = [str(v) for v in (1000, 1002, 1001, 1003, 1004, 1005, 1006, 1007, 1008, 1009)]
    assert variable_axis(shuffled) is None
    repeated = [str(1000 + i) for i in range(10)] + ["1009"]
    assert variable_axis(repeated) is None
    assert variable_axis([f"X{i}" for i in range(30)]) is None


def test_two_units_take_the_common_one_when_it_is_nearly_all():
    names = [f"{1100 + 2 * i} nm" for i in range(19)] + ["5 s"]  # 19 of 20 = 95 %
    axis = variable_axis(names)
    assert axis.unit == "nm" and axis.other == ("5 s",)


def test_axis_of_an_ingested_table_leaves_out_the_label_column():
    header = "sample," + ",".join(f"{1100 + 2 * i}" for i in range(12))
    rows = "\n".join(f"s{r}," + ",".join(str(r + i) for i in range(12)) for r in range(4))
    table = read_table((header + "\n" + rows + "\n").encode())
    axis = table_axis(table)
    assert axis.names[0] == "1100" and len(axis.names) == 12
    assert table_axis(read_table(b"a,b,c\n1,2,3\n4,5,6\n7,8,10\n")) is None

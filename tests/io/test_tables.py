"""Reading CSV series with the units in their header (and writing 1-D tables)."""

import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex.errors import InputError
from gridflex.io.tables import read_csv_quantities, write_csv


def test_columns_are_read_in_si_from_the_units_in_the_header(tmp_path):
    # Ma = 1e6 years, ft = 0.3048 m (gridflex.units; common practice)
    path = tmp_path / "sea.csv"
    path.write_text("note,age (Ma),level [ft]\na,0,0\nb,2.5,100\n\nc,4,-10\n")
    out = read_csv_quantities(path, {"age": "time", "level": "length"}, "[basin] sea_level_file")
    assert_allclose(out["age"], [0.0, 2.5e6, 4e6])
    assert_allclose(out["level"], [0.0, 30.48, -3.048])


def test_a_table_written_by_write_csv_reads_back(tmp_path):
    table = xr.Dataset(
        {"level": ("age", [1.0, -2.0], {"units": "m"})},
        coords={"age": ("age", [1e3, 2e3], {"units": "yr"})},
    )
    path = write_csv(table, tmp_path / "t.csv")
    out = read_csv_quantities(path, {"age": "time", "level": "length"}, "x")
    assert_allclose(out["age"], [1e3, 2e3])
    assert_allclose(out["level"], [1.0, -2.0])


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("age,level [m]\n1,2\n", r"column 'age' has no unit; .*'age \[yr\]'"),
        ("age [Ma],lvl [m]\n1,2\n", r"no column 'level' in the header"),
        ("age [Ma],level [kg/m^3]\n1,2\n", r"unit 'kg/m\^3' is not a length"),
        ("age [Ma],level [m]\n1,x\n", r"row 2, column 'level': expected a finite number, got 'x'"),
        ("age [Ma],level [m]\n1,nan\n", r"row 2, column 'level'"),
        ("age [Ma],level [m]\n", r"at least one row of values"),
    ],
)
def test_bad_tables_are_refused_naming_the_key_file_and_cell(tmp_path, text, message):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=r"\[basin\] sea_level_file \(.*bad.csv\).*" + message):
        read_csv_quantities(path, {"age": "time", "level": "length"}, "[basin] sea_level_file")


def test_a_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="cannot read the CSV file"):
        read_csv_quantities(tmp_path / "none.csv", {"age": "time"}, "k")

"""Units of scenario quantities and of grid files (gridflex.units): one table for both."""

from __future__ import annotations

import pytest

from gridflex.errors import InputError
from gridflex.units import FOOT, parse_quantity, unit_factor


@pytest.mark.parametrize(
    ("unit", "dimension", "factor"),
    [
        ("m", "length", 1.0),
        ("km", "length", 1e3),
        ("cm", "length", 1e-2),
        ("mm", "length", 1e-3),
        ("ft", "length", 0.3048),  # international foot (1959 agreement, from memory)
        ("feet", "length", 0.3048),
        ("kg m-3", "density", 1.0),
        ("g cm-3", "density", 1e3),
        ("g/cm^3", "density", 1e3),
        ("Pa", "pressure", 1.0),
        ("kPa", "pressure", 1e3),
        ("MPa", "pressure", 1e6),
    ],
)
def test_unit_factors_to_si(unit, dimension, factor):
    # SI prefixes and the international foot (common practice; from memory)
    assert unit_factor(unit, dimension, "here") == pytest.approx(factor, rel=1e-15)


def test_the_foot_is_the_international_foot():
    assert FOOT == 0.3048  # exact by definition (international yard and pound, 1959)
    assert parse_quantity("1000 ft", "length", "x") == pytest.approx(304.8, rel=1e-15)


def test_a_unit_of_another_quantity_says_what_it_is():
    with pytest.raises(InputError, match=r"here: unit 'Pa' is not a length \(it is a pressure\)"):
        unit_factor("Pa", "length", "here")
    with pytest.raises(InputError, match=r"unit 'furlong' is not a length; use one of m, "):
        unit_factor("furlong", "length", "here")

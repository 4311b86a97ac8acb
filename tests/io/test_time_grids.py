"""Grids through time: CF time axes in every calendar, ages before present, missing values
and the CRS of an ice history, with real NetCDF files."""

from __future__ import annotations

import datetime

import netCDF4
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from rasterio.crs import CRS

from gridflex.errors import InputError
from gridflex.io.time_grids import (
    CALENDAR_YEAR_DAYS,
    calendar_year_days,
    read_history,
    read_series,
    years_from_cf,
)
from tests.helpers import write_time_grid

KYR_111 = 111_000.0


def _layers(n: int, shape: tuple[int, int] = (3, 4)) -> np.ndarray:
    """Layer k holds the value k + 1 everywhere: the time order of the data is visible."""
    return np.stack([np.full(shape, k + 1.0) for k in range(n)])


# --- calendars ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("calendar", "days_per_year"),
    [
        # CF conventions 1.8 section 4.4.1: noleap/365_day have 365 days every year,
        # all_leap/366_day 366, 360_day twelve months of 30 days; in the real-day calendars
        # a day is a day and gridflex's year is the Julian year of 365.25 days
        ("standard", 365.25),
        ("gregorian", 365.25),
        ("proleptic_gregorian", 365.25),
        ("julian", 365.25),
        ("noleap", 365.0),
        ("365_day", 365.0),
        ("all_leap", 366.0),
        ("366_day", 366.0),
        ("360_day", 360.0),
    ],
)
def test_111_kyr_of_days_is_111_kyr_in_every_calendar(tmp_path, calendar, days_per_year):
    # before: noleap read as -110 924 years (76 years short), 360_day as -109 405 (1595)
    days = np.array([-KYR_111, -21_000.0, 0.0]) * days_per_year
    path = write_time_grid(
        tmp_path / "ice.nc",
        "thk",
        days,
        _layers(3),
        time_attrs={"units": "days since 1950-01-01", "calendar": calendar},
    )
    history = read_history(path, "thk")
    assert_allclose(history.time.values, [-KYR_111, -21_000.0, 0.0], rtol=0, atol=1e-6)
    assert calendar_year_days(calendar.upper(), "t") == days_per_year  # CF: case-insensitive
    assert CALENDAR_YEAR_DAYS[calendar] == days_per_year


def test_origin_in_another_year_counts_the_calendars_own_days():
    # 360_day (CF 1.8 section 4.4.1): 0001-01-01 to 1950-01-01 is 1949 x 360 days
    days = np.array([(1949 - KYR_111) * 360.0, 1949 * 360.0])
    got = years_from_cf(days, "days since 0001-01-01", "360_day", "1950-01-01", "t")
    assert_allclose(got, [-KYR_111, 0.0], rtol=0, atol=1e-9)
    # proleptic Gregorian: the day count from Python's own proleptic Gregorian ordinals
    # (Python documentation, datetime.date.toordinal)
    span = datetime.date(1950, 1, 1).toordinal() - datetime.date(1, 1, 1).toordinal()
    got = years_from_cf(
        np.array([span]), "days since 0001-01-01", "proleptic_gregorian", "1950-01-01", "t"
    )
    assert_allclose(got, [0.0], atol=1e-9)
    got = years_from_cf(np.array([0.0]), "days since 0001-01-01", None, "1950-01-01", "t")
    # no calendar is "standard" (CF 1.8 section 4.4.1): Julian dates before 1582-10-15, and
    # Julian 0001-01-01 is proleptic Gregorian 0000-12-30, two days earlier (from memory)
    assert_allclose(got, [-(span + 2) / 365.25], atol=1e-9)


@pytest.mark.parametrize(
    ("units", "calendar", "values", "expected"),
    [
        ("hours since 1950-01-01", "noleap", [-KYR_111 * 365 * 24], [-KYR_111]),
        ("seconds since 1950-01-01 00:00:00", "360_day", [-360 * 86400.0], [-1.0]),
        ("years since 1950-01-01", "365_day", [-KYR_111, 0.0], [-KYR_111, 0.0]),
        ("years since 1950-01-01", "standard", [-21_000.0], [-21_000.0]),
        # 1950 to 2000 is 50 years of 365 days in noleap (CF 1.8 section 4.4.1)
        ("kyr since 2000-01-01", "noleap", [-111.0], [-KYR_111 + 50.0]),
        ("ka", None, [-21.0, 0.0], [-21_000.0, 0.0]),
        ("years", None, [-500.0], [-500.0]),
        (None, None, [-500.0], [-500.0]),
    ],
)
def test_time_units(units, calendar, values, expected):
    got = years_from_cf(np.array(values), units, calendar, "1950-01-01", "f: variable 't'")
    assert_allclose(got, expected, rtol=0, atol=1e-6)


@pytest.mark.parametrize(
    ("units", "calendar", "match"),
    [
        ("months since 1950-01-01", "360_day", r"f: time unit 'months'.*months are not"),
        ("days since 1950-01-01", "none", r"f: calendar 'none' is not understood"),
        ("days since 1950-01-01", "lunar", r"f: calendar 'lunar'"),
        ("fortnights", None, r"f: time unit 'fortnights' is not understood"),
        ("Ma BP", None, r"f: age unit 'Ma BP' is not understood"),
        ("days since 1950-02-30", "noleap", r"f: cannot place '1950-02-30'"),
    ],
)
def test_time_units_refused(units, calendar, match):
    with pytest.raises(InputError, match=match):
        years_from_cf(np.array([0.0]), units, calendar, "1950-01-01", "f")


# --- ages before present -----------------------------------------------------------------


@pytest.mark.parametrize(
    ("time_name", "time_attrs"),
    [
        ("time", {"units": "ka BP"}),
        ("time", {"units": "cal kyr BP"}),
        ("age", {"units": "ka"}),
        ("t", {"units": "kyr", "positive": "down"}),
        ("time", {"units": "years before present"}),
    ],
)
def test_ages_before_present_run_forward(tmp_path, time_name, time_attrs):
    # ages, youngest first as cores are stored: time = -age (common practice: BP counts
    # back from 1950), oldest state first
    ages = np.array([0.0, 10.0, 21.0])
    if time_attrs["units"].startswith("years"):
        ages = ages * 1e3
    path = write_time_grid(
        tmp_path / "ice.nc", "thk", ages, _layers(3), time_name=time_name, time_attrs=time_attrs
    )
    history = read_history(path, "thk")
    assert_allclose(history.time.values, [-21_000.0, -10_000.0, 0.0])
    # the layer of age 21 ka (stored last, value 3) is now the first
    assert_array_equal(history.values[:, 0, 0], [3.0, 2.0, 1.0])


def test_ages_move_with_the_time_reference(tmp_path):
    path = write_time_grid(
        tmp_path / "ice.nc", "thk", [21.0, 0.0], _layers(2), time_attrs={"units": "ka BP"}
    )
    history = read_history(path, "thk", reference="2000-01-01")
    # 1950-01-01 to 2000-01-01: 18262 days (Python's proleptic Gregorian ordinals)
    shift = (datetime.date(2000, 1, 1) - datetime.date(1950, 1, 1)).days / 365.25
    assert_allclose(history.time.values, [-21_000.0 - shift, -shift])


def test_cf_dates_stored_backwards_are_sorted(tmp_path):
    days = np.array([0.0, -5000.0, -10_000.0]) * 365.0
    path = write_time_grid(
        tmp_path / "ice.nc",
        "thk",
        days,
        _layers(3),
        time_attrs={"units": "days since 1950-01-01", "calendar": "noleap"},
    )
    history = read_history(path, "thk")
    assert_allclose(history.time.values, [-10_000.0, -5000.0, 0.0])
    assert_array_equal(history.values[:, 1, 1], [3.0, 2.0, 1.0])


@pytest.mark.parametrize(
    ("time_name", "time_attrs", "times", "match"),
    [
        ("record", {"units": "ka"}, [0.0, 1.0], r"cannot tell whether axis 'record'"),
        ("time", {"units": "ka"}, [21.0, 0.0], r"axis 'time' runs backwards.*'ka BP'"),
        ("age", {"units": "days since 1950-01-01"}, [0.0, 1.0], r"named as an age"),
        ("time", {"units": "ka BP", "positive": "up"}, [0.0, 1.0], r"cannot be told"),
        ("time", {"units": "yr", "positive": "sideways"}, [0.0, 1.0], r"positive='sideways'"),
        ("time", {"units": "yr"}, [0.0, 5.0, 2.0], r"not in order"),
        ("time", {"units": "yr"}, [0.0, 0.0], r"not in order"),
    ],
)
def test_axes_whose_direction_cannot_be_told_are_refused(
    tmp_path, time_name, time_attrs, times, match
):
    path = write_time_grid(
        tmp_path / "ice.nc",
        "thk",
        times,
        _layers(len(times)),
        time_name=time_name,
        time_attrs=time_attrs,
    )
    with pytest.raises(InputError, match=rf"ice\.nc: variable 'thk': .*{match}"):
        read_history(path, "thk")


# --- missing values ----------------------------------------------------------------------


def test_netcdf_default_fill_values_are_missing(tmp_path):
    # NetCDF Users Guide (attribute conventions): without _FillValue, unwritten cells hold
    # the default fill value of the type, 9.96921e36 for float32
    values = _layers(2).astype(np.float32)
    values[1, 0, :] = netCDF4.default_fillvals["f4"]
    path = write_time_grid(
        tmp_path / "ice.nc", "thk", [0.0, 100.0], values, time_attrs={"units": "yr"}
    )
    history = read_history(path, "thk")
    assert np.isnan(history.values[1, 0]).all()
    assert np.nanmax(history.values) == 2.0
    # a variable written with nothing in it at all
    empty = write_time_grid(tmp_path / "empty.nc", "thk", [0.0], None, time_attrs={"units": "yr"})
    assert np.isnan(read_history(empty, "thk").values).all()


def test_fill_missing_and_valid_range_are_missing_and_packing_is_applied(tmp_path):
    # CF conventions 1.8 section 2.5.1 (_FillValue, missing_value, valid_min/valid_max)
    # and section 8.1 (scale_factor, add_offset)
    raw = np.array([[[-9999, -1, 4], [6000, 10, 20]]], dtype=np.int16)
    path = write_time_grid(
        tmp_path / "ice.nc",
        "thk",
        [0.0],
        raw,
        time_attrs={"units": "yr"},
        attrs={
            "units": "m",
            "missing_value": np.int16(-1),
            "valid_max": np.int16(5000),
            "scale_factor": 0.5,
            "add_offset": 100.0,
        },
        dtype="i2",
        fill_value=np.int16(-9999),
        shape=(2, 3),
    )
    got = read_history(path, "thk").values[0]
    assert_array_equal(np.isnan(got), [[True, True, False], [True, False, False]])
    assert_allclose(got[~np.isnan(got)], [102.0, 105.0, 110.0])
    packed = read_history(path, "thk").attrs
    assert "scale_factor" not in packed and packed["units"] == "m"


def test_series_has_the_same_rules_and_keeps_its_units(tmp_path):
    path = tmp_path / "sea.nc"
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("age", 3)
        t = nc.createVariable("age", "f8", ("age",))
        t[:] = [0.0, 10.0, 20.0]
        t.units = "ka BP"
        v = nc.createVariable("sl", "f4", ("age",))
        v.set_auto_maskandscale(False)
        v[:] = np.array([0.0, -0.05, netCDF4.default_fillvals["f4"]], dtype=np.float32)
        v.units = "km"
    series = read_series(path, "sl")
    assert_allclose(series.time.values, [-20_000.0, -10_000.0, 0.0])
    assert np.isnan(series.values[0]) and series.values[2] == 0.0
    assert series.attrs["units"] == "km"


# --- grid ------------------------------------------------------------------------------


def test_history_carries_the_crs_of_its_grid_mapping(tmp_path):
    laea = "+proj=laea +lat_0=60 +lon_0=10 +datum=WGS84 +units=m +no_defs"
    path = write_time_grid(
        tmp_path / "ice.nc", "thk", [0.0], _layers(1), time_attrs={"units": "yr"}, crs=laea
    )
    history = read_history(path, "thk")
    assert CRS.from_wkt(history.attrs["crs_wkt"]) == CRS.from_user_input(laea)
    plain = write_time_grid(
        tmp_path / "plain.nc", "thk", [0.0], _layers(1), time_attrs={"units": "yr"}
    )
    assert read_history(plain, "thk").attrs["crs_wkt"] == ""
    lonlat = write_time_grid(
        tmp_path / "ll.nc", "thk", [0.0], _layers(1), time_attrs={"units": "yr"}, crs="EPSG:4326"
    )
    with pytest.raises(InputError, match=r"ll\.nc: variable 'thk': .*geographic CRS"):
        read_history(lonlat, "thk")

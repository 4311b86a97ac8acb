"""Grids through time in NetCDF: reading ice histories and series, a CF time axis for outputs.

Inside gridflex a time is a number of years after a reference date (``time_reference``,
1 January 1950 by default), negative before it. The year is the Julian year of
:data:`gridflex.constants.DAYS_PER_YEAR` (365.25 days).

**Reading a time axis.** The rule for the CF calendars (CF conventions 1.8 section 4.4.1):
a time is the time elapsed since the reference, in years of the file's calendar.

* ``<unit> since <date>`` with ``days``, ``hours``, ``minutes`` or ``seconds``: the days
  elapsed from the reference date to each time, counted in the file's calendar, divided by
  the days in a year of that calendar: 365.25 in the calendars of real days (``standard``,
  ``gregorian``, ``proleptic_gregorian``, ``julian``; the Julian year), 365 in ``noleap`` /
  ``365_day``, 366 in ``all_leap`` / ``366_day`` and 360 in ``360_day``: one model year is
  one year. (111 000 model years of a ``noleap`` run are 111 000 years, not the 110 924
  Julian years their day count would make.)
* ``<years|year|yr|kyr|ka> since <date>``: a count of years of the calendar, plus the
  time from the reference to ``<date>`` by the rule above. (udunits makes a "year"
  365.242198781 days; a file that counts years means years, so that is not used.)
* a plain unit ``yr``, ``year``, ``years``, ``kyr`` or ``ka`` (no unit: years), numbers
  after the reference;
* ``months since``, calendar ``none`` and unknown calendars are refused.

**Ages before present.** Units ``<year unit> BP`` (``"ka BP"``, ``"kyr BP"``,
``"years BP"``, ``"cal yr BP"``, or ``... before present``), an axis named ``age``, or the
attribute ``positive = "down"`` make the axis an age before 1950-01-01
(:data:`gridflex.constants.PRESENT_DATE`): time = -age (moved to the reference date when it
is not 1950), so the history runs forward, the oldest state first. An age name or
``positive = "down"`` with ``since`` units, or ``positive = "up"`` with BP units, is a
contradiction and refused. An axis with a plain unit (or none) that is not named like
time (``time``, ``standard_name = "time"`` or ``axis = "T"``) or age is refused: its
direction cannot be told. Times are sorted to increase, the data with them; only a plain
time axis that runs backwards is refused (it may be ages without their "BP").

**Missing values** (CF conventions 1.8 section 2.5.1; NetCDF Users Guide, attribute
conventions): ``_FillValue``, ``missing_value``, the netCDF default fill value of the
variable's type (``netCDF4.default_fillvals``, e.g. 9.96921e36 for float32) when no
``_FillValue`` is set, and values outside ``valid_min`` / ``valid_max`` / ``valid_range``
become NaN; ``scale_factor`` and ``add_offset`` are then applied.

**Written files** carry a CF time axis, ``days since <reference>`` in the proleptic
Gregorian calendar (days = years x 365.25, so reading it back gives the same years), and
the same times in years as the auxiliary coordinate ``time_years``.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from rasterio.crs import CRS

from gridflex.constants import DAYS_PER_YEAR, PRESENT_DATE
from gridflex.errors import InputError
from gridflex.gis.geometry import GridGeometry
from gridflex.io.netcdf import NETCDF_LOCK, input_file
from gridflex.io.rasters import grid_mapping_crs, netcdf_missing, refuse_fill_like
from gridflex.units import DIMENSIONS, unit_factor

__all__ = [
    "CALENDAR_YEAR_DAYS",
    "DAYS_PER_YEAR",
    "DEFAULT_TIME_REFERENCE",
    "calendar_year_days",
    "cf_time_axis",
    "check_time_reference",
    "read_history",
    "read_series",
    "years_from_cf",
]

DEFAULT_TIME_REFERENCE = PRESENT_DATE
CALENDAR = "proleptic_gregorian"

CALENDAR_YEAR_DAYS: dict[str, float] = {
    "standard": DAYS_PER_YEAR,
    "gregorian": DAYS_PER_YEAR,
    "proleptic_gregorian": DAYS_PER_YEAR,
    "julian": DAYS_PER_YEAR,
    "noleap": 365.0,
    "365_day": 365.0,
    "all_leap": 366.0,
    "366_day": 366.0,
    "360_day": 360.0,
}
"""Days in one year of each CF calendar (CF conventions 1.8 section 4.4.1): the Julian
year where a day is a real day, the calendar's own year in the model calendars."""

_DAY_UNITS = {
    **dict.fromkeys(("days", "day", "d"), 1.0),
    **dict.fromkeys(("hours", "hour", "hrs", "hr", "h"), 1.0 / 24.0),
    **dict.fromkeys(("minutes", "minute", "mins", "min"), 1.0 / 1440.0),
    **dict.fromkeys(("seconds", "second", "secs", "sec", "s"), 1.0 / 86400.0),
}
_SINCE = re.compile(r"^\s*(\S+)\s+since\s+(\S.*?)\s*$", re.IGNORECASE)
_BEFORE_PRESENT = re.compile(
    r"^\s*(?:cal\.?\s+)?(?P<unit>.*?)\s*(?:BP|B\.P\.|before\s+present)\s*$", re.IGNORECASE
)
_AGE_NAME = re.compile(r"^ages?(?:[_ ].*)?$", re.IGNORECASE)
_PACKING = ("_FillValue", "missing_value", "valid_min", "valid_max", "valid_range")


def calendar_year_days(calendar: str | None, where: str) -> float:
    """Days in one year of the CF *calendar* (``standard`` when None).

    Raises
    ------
    InputError
        Calendar ``none`` or one CF does not define, naming *where*.

    Examples
    --------
    >>> calendar_year_days("360_day", "t")
    360.0
    >>> calendar_year_days(None, "t")
    365.25
    """
    name = "standard" if calendar is None else str(calendar).strip().lower() or "standard"
    if name not in CALENDAR_YEAR_DAYS:
        raise InputError(
            f"{where}: calendar {calendar!r} is not understood; use one of "
            f"{', '.join(CALENDAR_YEAR_DAYS)}"
        )
    return CALENDAR_YEAR_DAYS[name]


def _days_between(reference: str, date: str, calendar: str, where: str) -> float:
    """Days from *reference* to *date* (negative when *date* is earlier), in *calendar*."""
    import warnings

    import cftime

    try:
        with warnings.catch_warnings():  # dates before year 1 are fine for a time span
            warnings.simplefilter("ignore", cftime.CFWarning)
            instant = cftime.num2date(0.0, f"days since {date}", calendar=calendar)
            days = cftime.date2num(instant, f"days since {reference}", calendar=calendar)
    except (ValueError, TypeError) as exc:
        raise InputError(
            f"{where}: cannot place {date!r} against the reference date {reference!r} in "
            f"the {calendar!r} calendar ({exc})"
        ) from exc
    return float(days)


def _plain_year_factor(unit: str) -> float | None:
    """Years per *unit* for ``yr``, ``years``, ``kyr``, ``ka`` ... (None for others)."""
    return DIMENSIONS["time"].get(unit.strip().lower())


def _unit_kind(units: str | None) -> str:
    """``"since"`` (CF date units), ``"age"`` (before present) or ``"plain"``."""
    text = "" if units is None else str(units).strip()
    if _SINCE.match(text):
        return "since"
    if text and _BEFORE_PRESENT.match(text):
        return "age"
    return "plain"


def years_from_cf(
    values: np.ndarray, units: str | None, calendar: str | None, reference: str, where: str
) -> np.ndarray:
    """Times of a file in years after *reference* (see the module notes for the rule).

    Parameters
    ----------
    values : numpy.ndarray
        Raw numbers of the time variable.
    units : str or None
        Its ``units``: ``"<unit> since <date>"`` (CF), a plain year unit (``yr``,
        ``year``, ``years``, ``kyr``, ``ka``), an age ``"<year unit> BP"`` (returned as
        time = -age), or None (years).
    calendar : str or None
        CF calendar (``standard`` if None); used only with ``since`` units.
    reference : str
        Date that is year 0, e.g. ``"1950-01-01"``.
    where : str
        File and variable, for messages.

    Returns
    -------
    numpy.ndarray
        Years (float64) after *reference*, in the order given.

    Raises
    ------
    InputError
        Unknown unit or calendar, ``months since``, a date the calendar does not have.

    Examples
    --------
    >>> years_from_cf(np.array([-40515000.0]), "days since 1950-01-01", "365_day",
    ...               "1950-01-01", "t")
    array([-111000.])
    >>> years_from_cf(np.array([21.0, 0.0]), "ka BP", None, "1950-01-01", "t")
    array([-21000.,      0.])
    """
    raw = np.asarray(values, dtype=np.float64)
    text = "" if units is None else str(units).strip()
    if not text:
        return raw
    since = _SINCE.match(text)
    if since:
        unit, date = since.group(1).lower(), since.group(2)
        year_days = calendar_year_days(calendar, where)
        name = "standard" if calendar is None else str(calendar).strip().lower() or "standard"
        offset = _days_between(reference, date, name, where) / year_days
        per_year = _plain_year_factor(unit)
        if per_year is not None:
            return raw * per_year + offset
        if unit in _DAY_UNITS:
            return raw * (_DAY_UNITS[unit] / year_days) + offset
        raise InputError(
            f"{where}: time unit {unit!r} in {text!r} is not understood; use days, hours, "
            "minutes, seconds or years since a date (months are not a fixed time)"
        )
    age = _BEFORE_PRESENT.match(text)
    if age:
        per_year = _plain_year_factor(age.group("unit"))
        if per_year is None:
            raise InputError(
                f"{where}: age unit {text!r} is not understood; use e.g. 'ka BP', "
                f"'kyr BP' or 'years BP' ({', '.join(DIMENSIONS['time'])} before present)"
            )
        return (_present_offset(reference, where) - raw * per_year) + 0.0  # no -0
    per_year = _plain_year_factor(text)
    if per_year is None:
        raise InputError(
            f"{where}: time unit {text!r} is not understood; use years "
            f"({', '.join(DIMENSIONS['time'])}), ages like 'ka BP' or a CF unit like "
            "'days since 1950-01-01'"
        )
    return raw * per_year


def _present_offset(reference: str, where: str) -> float:
    """Years from *reference* to the present of ages (1950-01-01), in Julian years."""
    if reference == PRESENT_DATE:
        return 0.0
    return _days_between(reference, PRESENT_DATE, CALENDAR, where) / DAYS_PER_YEAR


def _direction(dim: str, attrs: dict[str, Any], kind: str, where: str) -> tuple[str, bool]:
    """``("time" | "age", sure)`` of a time axis: *sure* when its units or ``positive``
    say so (then a backward axis is only reordered), not only its name."""
    positive = str(attrs.get("positive", "")).strip().lower()
    if positive not in ("", "up", "down"):
        raise InputError(f"{where}: time axis {dim!r} has positive={positive!r}; use up or down")
    by_positive = {"up": "time", "down": "age"}.get(positive)
    by_units = {"since": "time", "age": "age"}.get(kind)
    age_name = bool(_AGE_NAME.match(dim))
    if by_positive and by_units and by_positive != by_units:
        raise InputError(
            f"{where}: time axis {dim!r} has units {attrs.get('units')!r} but "
            f"positive={positive!r}; the direction of the history cannot be told"
        )
    told = by_units or by_positive
    if told == "time" and age_name:
        raise InputError(
            f"{where}: axis {dim!r} is named as an age but its units or positive attribute "
            "make it a time; the direction of the history cannot be told"
        )
    if told:
        return told, True
    if age_name:
        return "age", False
    time_name = (
        dim.lower().startswith("time")
        or str(attrs.get("standard_name", "")).strip().lower() == "time"
        or str(attrs.get("axis", "")).strip().upper() == "T"
    )
    if time_name:
        return "time", False
    raise InputError(
        f"{where}: cannot tell whether axis {dim!r} (units {attrs.get('units')!r}) is a time "
        "(increasing forward) or an age before present; name it 'time' or 'age', or give "
        "units like 'ka BP' or 'days since 1950-01-01', or positive='up'/'down'"
    )


def _time_axis(
    dim: str, values: np.ndarray, attrs: dict[str, Any], reference: str, where: str
) -> tuple[np.ndarray, np.ndarray]:
    """Years after *reference*, increasing, and the order that sorts the file's axis."""
    units = attrs.get("units")
    kind = _unit_kind(units)
    direction, sure = _direction(dim, attrs, kind, where)
    years = years_from_cf(values, units, attrs.get("calendar"), reference, where)
    if direction == "age" and kind != "age":  # an age in plain years: time = -age
        years = _present_offset(reference, where) - years
    if not np.all(np.isfinite(years)):
        raise InputError(f"{where}: time axis {dim!r} has NaN or infinite values")
    order = np.arange(years.size)
    steps = np.diff(years)
    if steps.size and not np.all(steps > 0):
        if not np.all(steps < 0):
            raise InputError(
                f"{where}: time axis {dim!r} is not in order (repeated or unsorted times)"
            )
        if direction == "time" and not sure:
            raise InputError(
                f"{where}: time axis {dim!r} runs backwards ({years[0]:g} to {years[-1]:g} "
                "years); if these are ages before present, give units like 'ka BP', name "
                "the axis 'age' or set positive='down'; if they are times, store them "
                "increasing"
            )
        order = order[::-1]
    return years[order], order


def _unpacked(da: xr.DataArray, where: str) -> np.ndarray:
    """The values of *da* (opened without decoding) as float64, missing values as NaN
    (the one CF rule of :func:`gridflex.io.rasters.netcdf_missing`)."""
    raw = np.asarray(da.values)
    if not np.issubdtype(raw.dtype, np.number):
        raise InputError(f"{where}: values are not numbers ({raw.dtype})")
    values = netcdf_missing(raw, dict(da.attrs))
    refuse_fill_like(values, where)
    return values


def _metric_axis(da: xr.DataArray, dim: str, where: str) -> np.ndarray:
    """A 1-D projected coordinate in metres (m or km in the file; degrees refused)."""
    if dim not in da.coords:
        raise InputError(f"{where}: dimension {dim!r} has no coordinate values")
    coord = da[dim]
    units = str(coord.attrs.get("units", "m")).strip() or "m"
    if units.lower().startswith("degree"):
        raise InputError(
            f"{where}: coordinate {dim!r} is in {units!r}; an ice history must be on a "
            "projected grid in metres (project it first)"
        )
    values = np.asarray(coord.values, dtype=np.float64)
    return values * unit_factor(units, "length", f"{where}: coordinate {dim!r}")


def _open(path: Path, variable: str) -> tuple[xr.DataArray, xr.Dataset]:
    path = input_file(path)
    try:
        ds = xr.open_dataset(path, engine="netcdf4", decode_times=False, mask_and_scale=False)
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc})") from exc
    if variable not in ds.variables:
        names = ", ".join(sorted(str(v) for v in ds.data_vars)) or "none"
        ds.close()
        raise InputError(f"{path}: no variable {variable!r}; variables are {names}")
    return ds[variable].load(), ds


class _Timed:
    """A variable read with its time axis: values (float64, NaN missing, time sorted),
    times (years, increasing), the variable as opened, its CRS and ``"file: variable"``."""

    def __init__(self, path: Path, variable: str, reference: str, ndim: int, expected: str):
        self.where = f"{path}: variable {variable!r}"
        with NETCDF_LOCK:
            da, ds = _open(path, variable)
            with ds:
                if da.ndim != ndim:
                    raise InputError(f"{self.where}: expected {expected}, got dims {da.dims!r}")
                tdim = str(da.dims[0])
                if tdim not in ds.variables:
                    raise InputError(f"{self.where}: dimension {tdim!r} has no time values")
                tvar = ds[tdim]
                self.times, order = _time_axis(
                    tdim, np.asarray(tvar.values), dict(tvar.attrs), reference, self.where
                )
                self.crs: CRS | None = grid_mapping_crs(ds, da, self.where)
        self.values = _unpacked(da, self.where)[order]
        self.da = da
        self.attrs = {k: v for k, v in da.attrs.items() if k not in _PACKING}
        for name in ("scale_factor", "add_offset", "grid_mapping", "_Unsigned"):
            self.attrs.pop(name, None)


def read_history(
    path: str | Path, variable: str, reference: str = DEFAULT_TIME_REFERENCE
) -> xr.DataArray:
    """Read a (time, y, x) variable, e.g. ice thickness (m), with time in years.

    The first dimension is time (or age; see the module notes), the other two y and x
    (metres; converted from km).

    Returns
    -------
    xarray.DataArray
        dims ``("time", "y", "x")``, time in years after *reference*, increasing,
        float64 with missing values as NaN; ``attrs["crs_wkt"]`` is the CRS of the CF
        grid mapping (``""`` when the file has none), ``attrs["units"]`` as in the file.

    Raises
    ------
    InputError
        Missing file or variable, not 3-D, unknown units or calendar, a time axis whose
        direction cannot be told or that is not in order, a geographic grid.
    """
    timed = _Timed(Path(path), variable, reference, 3, "(time, y, x)")
    where, da = timed.where, timed.da
    if timed.crs is not None and timed.crs.is_geographic:
        raise InputError(
            f"{where}: the grid is in longitude/latitude (geographic CRS); an ice history "
            "must be on a projected grid in metres (project it first)"
        )
    ydim, xdim = (str(d) for d in da.dims[1:])
    y = _metric_axis(da, ydim, where)
    x = _metric_axis(da, xdim, where)
    try:  # exactly even cell centres, also for coordinates stored in float32
        y, x = GridGeometry.from_coords(y, x, None).coords()
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc
    out = xr.DataArray(
        timed.values,
        dims=("time", "y", "x"),
        coords={"time": timed.times, "y": y, "x": x},
        name=variable,
    )
    out.attrs = timed.attrs | {"crs_wkt": "" if timed.crs is None else timed.crs.to_wkt()}
    return out


def read_series(
    path: str | Path, variable: str, reference: str = DEFAULT_TIME_REFERENCE
) -> xr.DataArray:
    """Read a 1-D time series (e.g. sea level, m) with its time in years.

    Returns
    -------
    xarray.DataArray
        dim ``"time"`` (years after *reference*, increasing), float64 with missing
        values as NaN, the file's attributes (``units``).
    """
    timed = _Timed(Path(path), variable, reference, 1, "a series along time")
    return xr.DataArray(
        timed.values,
        dims=("time",),
        coords={"time": timed.times},
        name=variable,
        attrs=timed.attrs,
    )


_DATE = re.compile(r"^-?\d{1,6}-\d{1,2}-\d{1,2}$")


def check_time_reference(name: str, reference: Any) -> str:
    """*reference* if it is a date ``YYYY-MM-DD`` that a CF time axis can be counted from.

    Raises
    ------
    InputError
        Naming *name* (e.g. ``"[output] time_reference"``) and the value.

    Examples
    --------
    >>> check_time_reference("time_reference", "2000-01-01")
    '2000-01-01'
    >>> check_time_reference("time_reference", "yesterday")
    Traceback (most recent call last):
    ...
    gridflex.errors.InputError: time_reference must be a date written YYYY-MM-DD (e.g. \
'1950-01-01'), got 'yesterday'
    """
    import warnings

    import cftime

    wanted = f"{name} must be a date written YYYY-MM-DD (e.g. {PRESENT_DATE!r}), got {reference!r}"
    if not isinstance(reference, str) or not _DATE.match(reference):
        raise InputError(wanted)
    try:
        with warnings.catch_warnings():  # dates before year 1 are fine for a time span
            warnings.simplefilter("ignore", cftime.CFWarning)
            cftime.num2date(0.0, f"days since {reference} 00:00:00", calendar=CALENDAR)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{wanted} ({exc})") from exc
    return reference


def cf_time_axis(ds: xr.Dataset, reference: str = DEFAULT_TIME_REFERENCE) -> xr.Dataset:
    """*ds* with its ``time`` in years replaced by a CF time axis (see module notes)."""
    reference = check_time_reference("time_reference", reference)
    years = np.asarray(ds["time"].values, dtype=np.float64)
    out = ds.assign_coords(
        time=(
            "time",
            years * DAYS_PER_YEAR,
            {
                "units": f"days since {reference} 00:00:00",
                "calendar": CALENDAR,
                "standard_name": "time",
                "axis": "T",
                "long_name": "time",
            },
        ),
    )
    out = out.assign_coords(
        time_years=(
            "time",
            years,
            {
                "units": "yr",
                "long_name": f"time in Julian years (365.25 days) after {reference}",
            },
        )
    )
    for name in ("time", "time_years"):
        out[name].encoding["_FillValue"] = None  # coordinates carry no fill value (CF)
    return out

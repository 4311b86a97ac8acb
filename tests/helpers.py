"""Helpers shared by the tests: small grids, a random broken plate operator, the repository root,
the seamount inputs of the fit and sweep tests."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from scipy import integrate, special

from gridflex.constants import SECONDS_PER_YEAR

REPO_ROOT = Path(__file__).resolve().parents[1]
"""The repository's root folder (README, configs, examples)."""


def random_broken_operator(shape: tuple[int, int], edges: tuple[str, str], seed: int):
    """A plate operator on random rigidity (1e20-1e23 N m) cut by one zero row and one
    zero column, spacing 1500 m along x and 2000 m along y; with its random generator."""
    from gridflex.solvers.plate_operator import PlateOperator

    rng = np.random.default_rng(seed)
    rigidity = 10 ** rng.uniform(20, 23, shape)
    rigidity[shape[0] // 2, :] = 0.0
    rigidity[:, shape[1] // 3] = 0.0
    return PlateOperator.build(rigidity, 2e4, 0.25, 2000.0, 1500.0, edges), rng


def make_grid(ny: int, nx: int, dx: float, dy: float | None = None) -> xr.DataArray:
    """Zeros on a (ny, nx) grid of spacing dx (and dy) centred on the origin."""
    dy = dx if dy is None else dy
    y = (np.arange(ny) - ny // 2) * dy
    x = (np.arange(nx) - nx // 2) * dx
    return xr.DataArray(np.zeros((ny, nx)), dims=("y", "x"), coords={"y": y, "x": x})


def run_cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """``python -m gridflex ARGS`` in *cwd*, its output captured as text (5 min limit)."""
    return subprocess.run(
        [sys.executable, "-m", "gridflex", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=300,
    )


TRUE_TE = 23.4e3
"""Elastic thickness (m) of the plate :func:`write_seamount_inputs` flexes."""

BASE = """
[plate]
elastic_thickness = "10 km"      # not used by fit (te is searched)

[[loads]]
file = "load.nc"
variable = "height"
density = 2800
displaced_density = 1030
"""
"""The scenario head of the fit and sweep tests: the seamount load of
:func:`write_seamount_inputs` on a 10 km plate; a test appends its tables."""


def seamount_heights(like: xr.DataArray, centres: Any) -> xr.DataArray:
    """Invented Gaussian edifices 2.5 km high and 15 km wide (m) at *centres* ((x, y) in m)
    on *like*'s grid: the loads of the te-map fit tests."""
    xx, yy = np.meshgrid(like["x"].values, like["y"].values)
    height = sum(
        2500.0 * np.exp(-((xx - cx) ** 2 + (yy - cy) ** 2) / (2 * 15e3**2)) for cx, cy in centres
    )
    return like.copy(data=height)


def linear_free_air(load: xr.DataArray, w: xr.DataArray, plate: Any, layers: Any) -> xr.DataArray:
    """Independent first-order free-air anomaly (mGal) of a load and a deflection on its grid:
    the Parker (1973) n = 1 term for each interface (PHYSICS.md 6.1, 6.3): the load's mass
    q / g on the sea floor, the top of the crust (rho_c - rho_f) and the Moho (rho_m - rho_c)
    displaced down by w, zero-padded to four times the grid (an isolated relief)."""
    import scipy.fft

    from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL

    ny, nx = load.shape
    dy = abs(float(load["y"][1] - load["y"][0]))
    dx = abs(float(load["x"][1] - load["x"][0]))
    shape = (4 * ny, 4 * nx)
    ky = 2 * np.pi * scipy.fft.fftfreq(shape[0], dy)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(shape[1], dx)[None, :]
    k = np.hypot(ky, kx)
    thickness = plate.crust_thickness if layers.crust_thickness is None else layers.crust_thickness
    density = plate.crust_density if layers.crust_density is None else layers.crust_density
    top = np.exp(-k * layers.seafloor_depth)
    moho = np.exp(-k * (layers.seafloor_depth + thickness))
    mass = scipy.fft.rfft2(load.values / plate.gravity, s=shape)
    wk = scipy.fft.rfft2(w.values, s=shape)
    spec = top * mass - (density - plate.infill_density) * top * wk
    spec -= (plate.mantle_density - density) * moho * wk
    field = scipy.fft.irfft2(2 * np.pi * GRAVITATIONAL_CONSTANT * spec, s=shape)
    return load.copy(data=field[:ny, :nx] / MGAL)


def write_seamount_inputs(folder: Path) -> xr.DataArray:
    """Invented seamount height (m) and its noisy flexed sea floor, as NetCDF files
    ``load.nc`` and ``observed.nc`` (plate te = TRUE_TE); returns the load (Pa)."""
    from gridflex import Plate, solve

    grid = make_grid(64, 64, 6e3)
    r2 = (grid.y**2 + grid.x**2).values
    height = grid.copy(data=3000.0 * np.exp(-r2 / (2 * 15e3**2)))
    xr.Dataset({"height": height.assign_attrs(units="m")}).to_netcdf(folder / "load.nc")
    load = height * (1770.0 * 9.81)
    w = solve(load, Plate(te=TRUE_TE))["deflection"]
    rng = np.random.default_rng(3)
    floor = -4000.0 - w + 0.05 * float(w.max()) * rng.standard_normal(w.shape)
    floor = floor.where(r2 > (40e3) ** 2)  # the edifice itself is not a flexed surface
    xr.Dataset({"depth": floor.assign_attrs(units="m")}).to_netcdf(folder / "observed.nc")
    return load


def write_time_grid(
    path: Path,
    variable: str,
    times: Any,
    values: Any = None,
    *,
    time_name: str = "time",
    time_attrs: dict[str, Any] | None = None,
    attrs: dict[str, Any] | None = None,
    dtype: str = "f4",
    fill_value: Any = None,
    shape: tuple[int, int] = (3, 4),
    spacing: float = 10e3,
    crs: Any = None,
) -> Path:
    """Write a (time, y, x) NetCDF variable with the netCDF4 library itself, so that the
    time attributes, dtype and fill values are exactly what a test sets.

    *values* of None leaves the variable unwritten (the netCDF default fill value);
    y runs south to north (CF order); *crs* (anything rasterio reads) adds a CF grid
    mapping ``crs`` with ``crs_wkt``; *shape* is ``(ny, nx)``.
    """
    import netCDF4
    from rasterio.crs import CRS

    ny, nx = shape
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension(time_name, len(times))
        nc.createDimension("y", ny)
        nc.createDimension("x", nx)
        t = nc.createVariable(time_name, "f8", (time_name,))
        t[:] = np.asarray(times, dtype=np.float64)
        t.setncatts(time_attrs or {})
        for name, size in (("y", ny), ("x", nx)):
            c = nc.createVariable(name, "f8", (name,))
            c[:] = (np.arange(size) + 0.5) * spacing
            c.units = "m"
        v = nc.createVariable(variable, dtype, (time_name, "y", "x"), fill_value=fill_value)
        v.set_auto_maskandscale(False)
        v.setncatts(attrs or {"units": "m"})
        if crs is not None:
            g = nc.createVariable("crs", "i4")
            g.crs_wkt = CRS.from_user_input(crs).to_wkt()
            v.grid_mapping = "crs"
        if values is not None:
            v[:] = np.asarray(values)
    return path


def write_both_orders(
    folder: Path, stem: str, grid: xr.DataArray, crs: str = "EPSG:32633", units: str = "m"
) -> tuple[Path, Path]:
    """*grid* (dims ``("y", "x")``, metres of *crs*) as a real north-up GeoTIFF
    ``<stem>.tif`` (rasterio, y decreasing) and a real CF NetCDF ``<stem>.nc`` stored
    south-up (y increasing, grid mapping with ``crs_wkt``): the same cells twice."""
    from rasterio.crs import CRS

    from gridflex.io.rasters import write_geotiff

    grid = grid.assign_attrs(units=units)
    tif = write_geotiff(grid.sortby("y", ascending=False), folder / f"{stem}.tif", crs)
    south_up = grid.sortby("y").assign_attrs(grid_mapping="crs")
    ds = xr.Dataset(
        {stem: south_up, "crs": ((), 0, {"crs_wkt": CRS.from_user_input(crs).to_wkt()})}
    )
    ds["y"].attrs = {"units": "m", "standard_name": "projection_y_coordinate"}
    ds["x"].attrs = {"units": "m", "standard_name": "projection_x_coordinate"}
    ds.to_netcdf(folder / f"{stem}.nc")
    return tif, folder / f"{stem}.nc"


def write_float32_geotiff(
    path: Path,
    values: Any,
    transform: Any,
    crs: str = "EPSG:32633",
    nodata: float | None = None,
    units: str | None = None,
) -> Path:
    """One band of *values* (rows north to south) as a float32 GeoTIFF, with an optional
    nodata value and band ``units`` tag."""
    import rasterio

    data = np.asarray(values, dtype=np.float32)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=data.shape[1],
        height=data.shape[0],
        count=1,
        dtype="float32",
        crs=crs,
        transform=transform,
        nodata=nodata,
    ) as dst:
        dst.write(data, 1)
        if units is not None:
            dst.update_tags(1, units=units)
    return path


def run_thickness_raster(folder: Path, name: str, raster: str, te: str, working: str = ""):
    """``gridflex run`` of one thickness layer (density 2800, displacing sea water) read
    from *raster* on a plate of *te*, with an optional ``[working_grid]`` text; the
    written result (``<name>.nc``) loaded."""
    from gridflex.cli.main import main

    (folder / f"{name}.toml").write_text(
        f"""
[plate]
elastic_thickness = "{te}"
{working}
[[loads]]
file = "{raster}"
density = 2800
displaced_density = 1030

[output]
file = "{name}.nc"
"""
    )
    assert main(["run", str(folder / f"{name}.toml"), "-q"]) == 0
    with xr.open_dataset(folder / f"{name}.nc") as ds:
        return ds.load()


def assert_stepper_matches_batch(stepper, history, batch, interpolation: str) -> None:
    """Feed *stepper* (a ResponseStepper at the history's first load) the loads of
    *history* as viscous_response does and check it gives *batch*'s deflection and uplift
    rate at every time to 1e-12 of their peaks."""
    from numpy.testing import assert_allclose

    times = history.time.values
    for n in range(1, times.size):
        load = history.values[n] if interpolation == "linear" else history.values[n - 1]
        w = stepper.advance(times[n] - times[n - 1], load)
        scale = np.abs(batch.deflection.values[n]).max()
        assert_allclose(w.values, batch.deflection.values[n], rtol=0, atol=1e-12 * scale)
        rate = stepper.uplift_rate(history.values[n])
        rate_scale = np.abs(batch.uplift_rate.values[n]).max()
        assert_allclose(rate.values, batch.uplift_rate.values[n], rtol=0, atol=1e-12 * rate_scale)


def toml_text(doc: dict[str, Any]) -> str:
    """A scenario document (nested dicts, lists, scalars) written as TOML text: scalars at
    the top first, then ``[table]`` for dicts and ``[[table]]`` for lists of dicts;
    floats may be nan or inf and strings any text (JSON escapes are valid TOML)."""
    import json
    import math

    def quoted(text: str) -> str:  # TOML takes no surrogate pairs and no raw DEL
        return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")

    def key(name: str) -> str:
        bare = name and all(c.isascii() and (c.isalnum() or c in "-_") for c in name)
        return name if bare else quoted(name)

    def value(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, int):
            return str(v)
        if isinstance(v, float):
            if math.isnan(v):
                return "nan"
            if math.isinf(v):
                return "inf" if v > 0 else "-inf"
            return repr(v)
        if isinstance(v, str):
            return quoted(v)
        if isinstance(v, dict):
            return "{" + ", ".join(f"{key(k)} = {value(x)}" for k, x in v.items()) + "}"
        return "[" + ", ".join(value(x) for x in v) + "]"

    def is_table_list(v: Any) -> bool:
        return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)

    head = [f"{key(k)} = {value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    head = [
        line
        for (k, v), line in zip(
            [(k, v) for k, v in doc.items() if not isinstance(v, dict)], head, strict=True
        )
        if not is_table_list(v)
    ]
    lines = head
    for name, table in doc.items():
        if isinstance(table, dict):
            lines += ["", f"[{key(name)}]", *(f"{key(k)} = {value(v)}" for k, v in table.items())]
        elif is_table_list(table):
            for item in table:
                lines += [
                    "",
                    f"[[{key(name)}]]",
                    *(f"{key(k)} = {value(v)}" for k, v in item.items()),
                ]
    return "\n".join(lines) + "\n"


BASIN_CELL = 5e3  # m, cell size of write_basin_inputs
BASIN_SCENARIO = """
[plate]
elastic_thickness = "8 km"

[basin]
surface_file = "surface.nc"

[[stages]]
file = "s1.nc"
age = 3.0e6

[[stages]]
file = "s2.nc"
age = 2.0e6
lithology = "sandstone"
base_level = "0 m"

[[stages]]
file = "s3.nc"
age = 1.0e6
"""
"""Three stages on a shelf (files of :func:`write_basin_inputs`); add an [output] table."""


def write_basin_inputs(folder: Path, n: int = 24) -> xr.DataArray:
    """Write ``surface.nc`` (a shelf, -400 to 50 m west to east) and ``s1.nc``-``s3.nc``
    (invented sediment lenses, m) on *n* x *n* cells of 5 km (y, x from 0; no CRS);
    returns the surface."""
    coord = np.arange(n) * BASIN_CELL
    y, x = np.meshgrid(coord, coord, indexing="ij")
    r2 = (x - coord.mean()) ** 2 + (y - coord.mean()) ** 2

    def grid(values: np.ndarray) -> xr.DataArray:
        return xr.DataArray(values, dims=("y", "x"), coords={"y": coord, "x": coord})

    surface = grid(np.broadcast_to(np.linspace(-400.0, 50.0, n), (n, n)).copy())
    surface.to_dataset(name="elevation").to_netcdf(folder / "surface.nc")
    for i, (peak, radius) in enumerate([(500.0, 25e3), (300.0, 18e3), (200.0, 20e3)], 1):
        lens = grid(peak * np.exp(-r2 / radius**2) * (r2 < 9 * radius**2))
        lens.to_dataset(name="thickness").to_netcdf(folder / f"s{i}.nc")
    return surface


def two_load_plate(
    te: Any,
    n: int,
    dx: float,
    seed: int,
    load_ratio: float = 1.0,
    plate: Any = None,
    refine: int = 1,
) -> tuple[xr.DataArray, xr.DataArray]:
    """Topography (m) and Bouguer anomaly (mGal) of Forsyth's (1985) two-load model on an
    n x n periodic grid of spacing *dx*, solved by ``gridflex.solve`` (te a number or a
    grid on the same coordinates, which picks the finite-difference solver).

    Invented, uncorrelated initial loads with red spectra (amplitude ~ k^-1.5): surface
    topography H_I and Moho relief W_I (up), scaled so that f = drho W_I / (rho_c H_I) is
    *load_ratio* in every band. Both load the plate from above and below, which sinks by w
    with air above (restoring rho_m g w): final topography H = H_I - w, Moho W = W_I - w,
    Bouguer anomaly 2 pi G drho e^{-k z_m} W (PHYSICS.md 8.2, first order; z_m the
    plate's crust_thickness).

    *refine* > 1 solves on a grid *refine* times finer (the te grid repeated) and returns
    the means of refine x refine blocks: a finite-difference plate whose flexural
    parameter spans about a cell is more flexible than its te (the discrete
    biharmonic's symbol falls below k⁴); a 10 km plate on 30 km cells came out as
    about 9 km in te maps."""
    import scipy.fft

    if refine > 1:
        fine = te if np.isscalar(te) else np.repeat(np.repeat(te, refine, 0), refine, 1)
        h, b = two_load_plate(fine, n * refine, dx / refine, seed, load_ratio, plate)
        coords = {"y": np.arange(n) * dx, "x": np.arange(n) * dx}
        return tuple(  # type: ignore[return-value]
            xr.DataArray(
                f.values.reshape(n, refine, n, refine).mean(axis=(1, 3)),
                dims=("y", "x"),
                coords=coords,
            )
            for f in (h, b)
        )

    import gridflex
    from gridflex.constants import GRAVITATIONAL_CONSTANT, MGAL

    x = np.arange(n) * dx
    plate = plate if plate is not None else gridflex.Plate(te=0.0, crust_thickness=35e3)
    rho_c, rho_m = plate.crust_density, plate.mantle_density
    ky = 2 * np.pi * scipy.fft.fftfreq(n, dx)[:, None]
    kx = 2 * np.pi * scipy.fft.rfftfreq(n, dx)[None, :]
    k = np.hypot(ky, kx)
    rng = np.random.default_rng(seed)

    def red() -> np.ndarray:
        spec = rng.standard_normal(k.shape) + 1j * rng.standard_normal(k.shape)
        field = scipy.fft.irfft2(spec * np.where(k > 0, k, np.inf) ** -1.5, s=(n, n))
        return field / field.std()

    h_i = 1000.0 * red()
    w_i = 1000.0 * load_ratio * rho_c / (rho_m - rho_c) * red()
    coords = {"y": x, "x": x}
    te_value = te if np.isscalar(te) else xr.DataArray(te, dims=("y", "x"), coords=coords)
    flexed = gridflex.Plate(
        te=te_value,
        youngs_modulus=plate.youngs_modulus,
        poisson_ratio=plate.poisson_ratio,
        mantle_density=rho_m,
        infill_density=0.0,
        crust_density=rho_c,
        crust_thickness=plate.crust_thickness,
    )
    load = xr.DataArray(
        (rho_c * h_i + (rho_m - rho_c) * w_i) * flexed.gravity, dims=("y", "x"), coords=coords
    )
    w = gridflex.solve(load, flexed, edges="periodic")["deflection"].values
    moho = w_i - w
    bouguer = (
        scipy.fft.irfft2(
            2
            * np.pi
            * GRAVITATIONAL_CONSTANT
            * (rho_m - rho_c)
            * np.exp(-k * plate.crust_thickness)
            * scipy.fft.rfft2(moho),
            s=(n, n),
        )
        / MGAL
    )
    return (
        xr.DataArray(h_i - w, dims=("y", "x"), coords=coords),
        xr.DataArray(bouguer, dims=("y", "x"), coords=coords),
    )


# Disc test of Bueler, Lingle & Brown 2007 (Ann. Glaciol. 46, 97-105); parameters as we
# believe the paper uses them (from memory, PHYSICS.md 7.3): H0 = 1000 m of ice (910 kg/m3)
# on R0 = 1000 km, rho_m = 3300, eta = 1e21 Pa s, D = 5e24 N m, g = 9.81.
BUELER_DISC = (1000.0, 1000e3, 910.0, 3300.0, 9.81, 1e21, 5e24)
"""(H0, R0, rho_i, rho_m, g, eta, D) of the disc test, SI units."""


def exact_disc(r: np.ndarray, t_years: np.ndarray, rate: bool = False) -> np.ndarray:
    """Disc load switched on at t = 0 over a plate on a viscous half-space, by Hankel
    transform of the per-mode equation (PHYSICS.md 7.6, the integral formula Bueler et al.
    2007 verify against):
    w(r, t) = q0 R0 int_0^inf (1 - exp(-beta t / (2 eta k))) J1(k R0) J0(k r) / beta dk,
    beta = rho_m g + D k^4; with rate=True its time derivative (m/s). Shape (r, t)."""
    H0, R0, RHO_I, RHO_M, G, ETA, D = BUELER_DISC
    q0 = RHO_I * G * H0
    rr = np.asarray(r, dtype=float)[:, None]
    tt = np.asarray(t_years, dtype=float)[None, :] * SECONDS_PER_YEAR

    def integrand(k):
        beta = RHO_M * G + D * k**4
        with np.errstate(divide="ignore", invalid="ignore"):
            x = beta * tt / (2 * ETA * k)
            time_part = np.exp(-x) * beta / (2 * ETA * k) if rate else -np.expm1(-x)
        return time_part * special.j1(k * R0) * special.j0(k * rr) / beta

    # beyond k = 4e-4 rad/m (40 times 1/l) beta ~ D k^4 makes the integrand negligible
    value, _ = integrate.quad_vec(integrand, 0.0, 4e-4, epsabs=0.0, epsrel=1e-10, limit=4000)
    return q0 * R0 * value

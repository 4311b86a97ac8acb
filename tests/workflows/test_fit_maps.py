"""``gridflex fit`` with a te map: a [margin] (and its line's position) or a factor on a te grid
(gridflex.workflows.fit), run on real NetCDF files in and out."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from gridflex import Plate, solve
from gridflex.cli.main import main
from gridflex.te_maps import break_mask, broken_te, margin_te
from tests.helpers import make_grid, seamount_heights

TRUE_LEFT, TRUE_RIGHT = 10e3, 40e3
TRUE_LINE = [(0.0, -1e5), (0.0, 1e5)]  # x = 0, looking north: west is left
WIDTH = 30e3

HEAD = """
[[loads]]
file = "load.nc"
variable = "height"
density = 2800
displaced_density = 1030

[output]
file = "out/best.nc"
"""

MARGIN = """
[plate]

[margin]
te_left = "20 km"                # not used by fit: searched
te_right = "20 km"
line = [[10000.0, -100000.0], [10000.0, 100000.0]]   # 10 km east of the true line
width = "30 km"
"""

FIT = """
[fit]
observed_file = "observed.nc"
observed_variable = "w"
"""


def _inputs(folder: Path, te: xr.DataArray | None = None) -> xr.DataArray:
    """Two invented seamounts (heights in load.nc), one on each side of x = 0, and the
    deflection of the plate of *te* (default: the true margin) with 3 % noise in
    observed.nc; returns the load (Pa)."""
    height = seamount_heights(make_grid(64, 64, 6e3), [(-60e3, 20e3), (60e3, -20e3)])
    xr.Dataset({"height": height.assign_attrs(units="m")}).to_netcdf(folder / "load.nc")
    load = height * (1770.0 * 9.81)
    if te is None:
        te = margin_te(load, TRUE_LEFT, TRUE_RIGHT, TRUE_LINE, WIDTH)
    w = solve(load, Plate(te=te))["deflection"]
    noise = 0.03 * float(w.max()) * np.random.default_rng(5).standard_normal(w.shape)
    xr.Dataset({"w": (w + noise).assign_attrs(units="m")}).to_netcdf(folder / "observed.nc")
    return load


def test_margin_and_its_line_are_fitted_and_written(tmp_path, capsys):
    _inputs(tmp_path)
    shift = '\nfit_line_shift = true\nline_shift_min = "-40 km"\nline_shift_max = "40 km"\n'
    bounds = 'te_min = "3 km"\nte_max = "80 km"\n'
    (tmp_path / "s.toml").write_text(MARGIN + HEAD + FIT + bounds + shift)
    assert main(["fit", str(tmp_path / "s.toml")]) == 0
    out = capsys.readouterr().out
    assert "te_left = " in out and "te_right = " in out and "line_shift = " in out
    summary = json.loads((tmp_path / "out" / "best_fit.json").read_text())
    assert summary["fit"] == "margin"
    parameters = summary["parameters"]
    # synthetic recovery by the forward model that made the data; each interval is its
    # profile-likelihood bound (PHYSICS.md 8.1; Bates & Watts 1988, from memory)
    truths = {"te_left": TRUE_LEFT, "te_right": TRUE_RIGHT, "line_shift": -10e3}
    for name, truth in truths.items():
        assert parameters[name]["low"] < truth < parameters[name]["high"], name
        assert parameters[name]["interval_closed"] == [True, True]
    assert_allclose(parameters["te_left"]["value"], TRUE_LEFT, rtol=0.05)
    assert_allclose(parameters["te_right"]["value"], TRUE_RIGHT, rtol=0.05)
    assert abs(parameters["line_shift"]["value"] + 10e3) < 3e3
    # the line moved east is given back moved west by the shift (x of both points)
    assert_allclose([p[0] for p in summary["line"]], 10e3 + parameters["line_shift"]["value"])
    assert 0 < summary["forward_models"] <= 90  # seen: 57
    with xr.open_dataset(tmp_path / "out" / "best.nc") as ds:
        assert {"deflection", "elastic_thickness", "observed", "residual"} <= set(ds.data_vars)
        assert_allclose(ds.attrs["fit_te_left"], parameters["te_left"]["value"])
        assert_allclose(ds.attrs["fit_line_shift_high"], parameters["line_shift"]["high"])
        assert ds.attrs["fit_kind"] == "margin" and ds.attrs["solver"] == "finite-difference"
        te = ds["elastic_thickness"].values
    assert_allclose(te.min(), parameters["te_left"]["value"], rtol=1e-9)
    assert_allclose(te.max(), parameters["te_right"]["value"], rtol=1e-9)
    assert (tmp_path / "out" / "best_misfit.png").stat().st_size > 1000


def test_factor_on_a_te_grid_file(tmp_path):
    from gridflex.scenario.tables import load_scenario
    from gridflex.workflows.fit import fit_scenario

    grid = make_grid(64, 64, 6e3)
    shape = margin_te(grid, 8e3, 30e3, TRUE_LINE, WIDTH)
    xr.Dataset({"te": (shape / 1e3).assign_attrs(units="km")}).to_netcdf(tmp_path / "te.nc")
    _inputs(tmp_path, te=1.3 * shape)
    plate = '[plate]\nelastic_thickness_file = "te.nc"\nelastic_thickness_variable = "te"\n'
    (tmp_path / "s.toml").write_text(plate + HEAD + FIT + "scale_min = 0.3\nscale_max = 2.5\n")
    outcome = fit_scenario(load_scenario(tmp_path / "s.toml"))
    scale = outcome.summary["parameters"]["scale"]
    # synthetic recovery, profile-likelihood interval (PHYSICS.md 8.1); the te file in km
    # is read through the grid-input rule (units honoured)
    assert scale["low"] < 1.3 < scale["high"]
    assert_allclose(scale["value"], 1.3, rtol=0.05)
    assert outcome.text.startswith("scale = ")
    with xr.open_dataset(tmp_path / "out" / "best.nc") as ds:
        assert_allclose(ds["elastic_thickness"], scale["value"] * shape, rtol=1e-9)
        assert_allclose(ds.attrs["fit_scale"], scale["value"])


def test_constant_te_cut_by_a_break_fits_a_factor(tmp_path):
    from gridflex.scenario.tables import load_scenario
    from gridflex.workflows.fit import fit_scenario

    grid = make_grid(64, 64, 6e3)
    cut = [[0.0, -200000.0], [0.0, 200000.0]]
    broken = broken_te(xr.full_like(grid, 24e3), break_mask(grid, [cut]))
    _inputs(tmp_path, te=broken)
    plate = f'[plate]\nelastic_thickness = "20 km"\n\n[[breaks]]\nline = {cut!r}\n'
    (tmp_path / "s.toml").write_text(plate + HEAD + FIT + "scale_min = 0.5\nscale_max = 2.0\n")
    outcome = fit_scenario(load_scenario(tmp_path / "s.toml"))
    scale = outcome.fit.estimates["scale"]
    # a broken plate of 24 km is 1.2 times the 20 km given (synthetic recovery)
    assert scale.low < 1.2 < scale.high
    model_te = outcome.result["elastic_thickness"].values
    assert model_te.min() == 0.0  # the break stays broken
    assert_allclose(model_te.max(), scale.value * 20e3, rtol=1e-9)


@pytest.mark.parametrize(
    ("head", "extra", "message"),
    [
        (
            '[plate]\nelastic_thickness = "20 km"\n',
            "fit_line_shift = true\n",
            "[fit] fit_line_shift",
        ),
        ('[plate]\nelastic_thickness = "20 km"\n', "scale_max = 3.0\n", "[fit] scale_max"),
        (
            '[plate]\nelastic_thickness_file = "te.nc"\nelastic_thickness_variable = "te"\n',
            'te_min = "5 km"\n',
            "[fit] te_min: a te grid",
        ),
        (MARGIN, "fit_line_shift = true\n", "[fit] line_shift_min: required"),
        (MARGIN, 'line_shift_max = "5 km"\n', "[fit] line_shift_max: only with fit_line_shift"),
        (
            MARGIN,
            'fit_line_shift = true\nline_shift_min = "5 km"\nline_shift_max = "-5 km"\n',
            "[fit] line_shift_min: must be less than line_shift_max",
        ),
        (MARGIN + '\n[solver]\nmethod = "spectral"\n', "", "[solver] method"),
        (
            '[plate]\nelastic_thickness = "20 km"\n\n[solver]\nedges = "free"\n',
            "",
            "[solver] edges",
        ),
        (
            MARGIN.replace('width = "30 km"', 'width = "5 km"'),
            'fit_line_shift = true\nline_shift_min = "-5 km"\nline_shift_max = "5 km"\n',
            "[margin] width: width must be at least two cells",
        ),
    ],
)
def test_keys_that_do_not_go_with_the_plate_are_refused(tmp_path, capsys, head, extra, message):
    # a key the fit would silently ignore or misread is refused, naming it (common practice)
    _inputs(tmp_path)
    xr.Dataset({"te": make_grid(64, 64, 6e3) + 20e3}).to_netcdf(tmp_path / "te.nc")
    (tmp_path / "s.toml").write_text(head + HEAD + FIT + extra)
    assert main(["fit", str(tmp_path / "s.toml"), "-q"]) == 2
    err = capsys.readouterr().err
    assert message in err, err
    assert not (tmp_path / "out" / "best.nc").exists()

"""Run a te-map scenario (``gridflex temap``): te from topography and gravity, window by
window (:func:`gridflex.te_map`), written as NetCDF, GeoTIFF and a PNG map."""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np
from rasterio.crs import CRS

from gridflex.errors import InputError
from gridflex.estimation.spectral_maps import (
    TE_MAP_BANDWIDTH,
    TE_MAP_BOUNDS,
    TE_MAP_METHODS,
    TE_MAP_QUANTITIES,
    TE_MAP_SAMPLES,
    te_map,
)
from gridflex.gravity.first_order import CrustLayers
from gridflex.io.netcdf import write_netcdf
from gridflex.io.plots import plot_te_map
from gridflex.io.rasters import write_geotiff
from gridflex.plate import PLATE_PARAMETERS
from gridflex.progress import Progress
from gridflex.scenario.context import error_context
from gridflex.scenario.schema import REQUIRED, Key, Scenario, parse_tables
from gridflex.scenario.tables import SCHEMA, load_scenario
from gridflex.workflows.grid_input import read_grid_input
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.outputs import OutputPlan, stamp_result
from gridflex.workflows.run import plate_with_te

TemapScenario = Scenario[dict[str, Any]]
"""A validated te-map scenario (its tables are checked against :data:`TEMAP_SCHEMA`)."""

__all__ = [
    "TEMAP_SCHEMA",
    "TemapScenario",
    "format_temap_summary",
    "load_temap_scenario",
    "parse_temap_scenario",
    "temap_outputs",
    "temap_scenario",
]

log = logging.getLogger(__name__)


TEMAP_SCHEMA: dict[str, dict[str, Key]] = {
    "plate": {key: SCHEMA["plate"][key] for key in PLATE_PARAMETERS},
    "data": {
        "topography_file": Key(
            "path", "grid of the topography (m, up): GeoTIFF or NetCDF", REQUIRED
        ),
        "topography_variable": Key("string", "NetCDF variable or band of the topography", None),
        "anomaly_file": Key(
            "path", "grid of the Bouguer or free-air anomaly (mGal) on the same grid", REQUIRED
        ),
        "anomaly_variable": Key("string", "NetCDF variable or band of the anomaly", None),
    },
    "temap": {
        "window": Key(
            "quantity",
            "side of the square moving windows",
            REQUIRED,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "step": Key(
            "quantity",
            "distance between window centres (default: a quarter of the window)",
            None,
            "length",
            minimum=0.0,
            strict=True,
        ),
        "quantity": Key(
            "choice",
            "Bouguer coherence (Forsyth 1985) or free-air admittance",
            "bouguer",
            choices=TE_MAP_QUANTITIES,
        ),
        "method": Key(
            "choice",
            "local spectra from moving-window multitapers or the fan wavelet transform",
            "multitaper",
            choices=TE_MAP_METHODS,
        ),
        "te_min": Key(
            "quantity", "smallest te searched", TE_MAP_BOUNDS[0], "length", minimum=0.0, strict=True
        ),
        "te_max": Key(
            "quantity", "largest te searched", TE_MAP_BOUNDS[1], "length", minimum=0.0, strict=True
        ),
        "samples": Key("integer", "log-spaced trial te of each window", TE_MAP_SAMPLES, minimum=3),
        "bands": Key("integer", "wavenumber annuli of each window", 16, minimum=3),
        "bandwidth": Key(
            "number", "time-bandwidth product NW of the tapers", TE_MAP_BANDWIDTH, minimum=1.0
        ),
        "jackknife": Key(
            "bool", "add the delete-one-sector jackknife spread to the te interval", True
        ),
        "prewhiten": Key("bool", "difference the grids before the spectra", True),
        "confidence": Key(
            "number",
            "confidence of the te intervals",
            0.95,
            minimum=0.0,
            strict=True,
            maximum=0.999999,
        ),
        "moho_depth": Key(
            "quantity",
            "Moho depth below the observation plane (default: [plate] crust_thickness)",
            None,
            "length",
            minimum=0.0,
        ),
        "seafloor_depth": Key(
            "quantity",
            "free air: sea-floor depth below the observation plane",
            None,
            "length",
            minimum=0.0,
        ),
        "topography_contrast": Key(
            "quantity",
            "free air: density of the topography minus what it displaces",
            None,
            "density",
            minimum=0.0,
            strict=True,
        ),
    },
    "output": {
        "file": Key("path", "NetCDF file of te, te_low, te_high on the window centres", REQUIRED),
        "geotiff": Key("path", "GeoTIFF of te (default: <file stem>_te.tif)", None),
        "map": Key(
            "path", "PNG map of te and its interval's width (default: <file stem>_te.png)", None
        ),
    },
}
"""Every table and key a te-map scenario may contain."""

TEMAP_REQUIRED_TABLES = ("data", "temap", "output")


def parse_temap_scenario(data: dict[str, Any], path: Path, text: str = "") -> TemapScenario:
    """Validate a te-map scenario already read into a dict."""
    scenario = parse_tables(
        data,
        path,
        text,
        TEMAP_SCHEMA,
        frozenset(),
        TEMAP_REQUIRED_TABLES,
    )
    _check_temap(scenario)
    return scenario


def load_temap_scenario(path: str | Path) -> TemapScenario:
    """Read and validate a te-map scenario (TOML); messages name file, table and key."""
    return load_scenario(path, parser=parse_temap_scenario)


def _check_temap(scenario: TemapScenario) -> None:
    table = scenario.table("temap")
    if not table["te_min"] < table["te_max"]:
        raise InputError(
            f"{scenario.where('temap', 'te_min')}: must be less than te_max "
            f"({table['te_min']!r} >= {table['te_max']!r})"
        )
    if table["quantity"] == "free_air":
        for key in ("seafloor_depth", "topography_contrast"):
            if table[key] is None:
                raise InputError(
                    f"{scenario.where('temap', key)}: required for quantity 'free_air'"
                )


def temap_outputs(scenario: TemapScenario) -> dict[str, Path | None]:
    """Paths of the NetCDF, the GeoTIFF of te and the PNG map."""
    output = scenario.table("output")
    stem = Path(output["file"]).with_suffix("")
    return {
        "file": output["file"],
        "geotiff": output["geotiff"] or stem.with_name(stem.name + "_te.tif"),
        "map": output["map"] or stem.with_name(stem.name + "_te.png"),
    }


def format_temap_summary(summary: dict[str, Any]) -> str:
    """The map's key numbers as a few lines of text (km)."""
    return (
        f"te map: {summary['windows']} windows of {summary['window'] / 1e3:.0f} km, "
        f"te {summary['te_min'] / 1e3:.1f} to {summary['te_max'] / 1e3:.1f} km "
        f"(median {summary['te_median'] / 1e3:.1f} km); median {summary['confidence']:.0%} "
        f"interval width {summary['width_median'] / 1e3:.1f} km"
    )


def _crs(wkt: str) -> CRS | None:
    return CRS.from_wkt(wkt) if wkt else None


def temap_scenario(
    scenario: TemapScenario, overwrite: bool = False, progress: Progress | None = None
) -> RunOutcome:
    """Map te over the scenario's topography and anomaly and write the outputs.

    Both grids come through :func:`gridflex.workflows.grid_input.read_grid_input` (units,
    nodata refused, a metric CRS, the anomaly on the topography's grid); every output
    path is checked before any work.

    Raises
    ------
    InputError
        Invalid tables, files or output paths, or settings :func:`gridflex.te_map` refuses.
    """
    plan = OutputPlan(scenario, overwrite)
    plan.add(temap_outputs(scenario))
    data, table = scenario.table("data"), scenario.table("temap")
    topography = read_grid_input(
        data["topography_file"],
        data["topography_variable"],
        scenario.where("data", "topography_file"),
        role="elevation",
        metric=True,
    )
    anomaly = read_grid_input(
        data["anomaly_file"],
        data["anomaly_variable"],
        scenario.where("data", "anomaly_file"),
        role="anomaly",
        reference=topography,
    )
    plate = plate_with_te(scenario, 0.0)
    gravity = None
    if table["quantity"] == "free_air":
        gravity = CrustLayers(table["seafloor_depth"], plate.crust_thickness, plate.crust_density)
    with error_context(scenario.where("temap")):
        result = te_map(
            topography,
            anomaly,
            plate,
            window=table["window"],
            step=table["step"],
            quantity=table["quantity"],
            method=table["method"],
            bounds=(table["te_min"], table["te_max"]),
            samples=table["samples"],
            bands=table["bands"],
            bandwidth=table["bandwidth"],
            moho_depth=table["moho_depth"],
            gravity=gravity,
            topography_contrast=table["topography_contrast"],
            confidence=table["confidence"],
            jackknife=table["jackknife"],
            prewhiten=table["prewhiten"],
            progress=progress,
        )
    crs = _crs(str(topography.attrs.get("crs_wkt", "")))
    result = stamp_result(result, scenario, "temap", projected_axes=True)
    te = result["te"].values
    finite = te[np.isfinite(te)]
    width = (result["te_high"] - result["te_low"]).values
    summary = {
        "scenario": str(scenario.path),
        "windows": int(te.size),
        "window": float(table["window"]),
        "te_min": float(finite.min()) if finite.size else float("nan"),
        "te_max": float(finite.max()) if finite.size else float("nan"),
        "te_median": float(np.median(finite)) if finite.size else float("nan"),
        "width_median": float(np.nanmedian(width)) if finite.size else float("nan"),
        "confidence": float(table["confidence"]),
    }
    outcome = RunOutcome(result=result, summary=summary, text=format_temap_summary(summary))
    overwrite, inputs = plan.overwrite, plan.inputs
    with plan.writing():
        outcome.written.append(write_netcdf(result, plan["file"], overwrite, inputs, crs=crs))
        outcome.written.append(write_geotiff(result["te"], plan["geotiff"], crs, overwrite, inputs))
        outcome.written.append(
            plot_te_map(
                result,
                plan["map"],
                overwrite,
                inputs,
                title=f"te from {table['quantity'].replace('_', '-')} spectra, windows of "
                f"{table['window'] / 1e3:.0f} km",
            )
        )
    log.info("te map written: %s", ", ".join(map(str, outcome.written)))
    return outcome

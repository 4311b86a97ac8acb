"""The TOML configuration of :class:`gridflex.bmi.FlexureBmi`.

Its tables are those of a history scenario (:data:`gridflex.workflows.history.HISTORY_SCHEMA`:
``[plate]``, ``[margin]``, ``[[breaks]]``, ``[mantle]``, ``[grid]``, ``[bed]``, ``[sea]``,
part of ``[solver]``) plus ``[ice]`` (density and the ice at the start) and ``[time]``
(step and end). The grid is ``[grid]`` (rows, columns, spacing, centred on 0) or, with a
``[bed] file``, the grid of that file.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from gridflex.errors import InputError
from gridflex.scenario.checks import check_plate_structure
from gridflex.scenario.schema import REQUIRED, Key, Scenario, parse_tables
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.history import HISTORY_SCHEMA, check_bed_and_plate

__all__ = ["BMI_SCHEMA", "BmiConfig", "load_bmi_config", "parse_bmi_config"]

BmiConfig = Scenario[dict[str, Any]]
"""A validated BMI configuration."""

_HISTORY_ICE = HISTORY_SCHEMA["ice"]

BMI_SCHEMA: dict[str, dict[str, Key]] = {
    "plate": HISTORY_SCHEMA["plate"],
    "margin": HISTORY_SCHEMA["margin"],
    "breaks": HISTORY_SCHEMA["breaks"],
    "mantle": HISTORY_SCHEMA["mantle"],
    "solver": {
        name: HISTORY_SCHEMA["solver"][name]
        for name in ("edges", "pad_factor", "pad_width_factor", "interpolation", "initial")
    },
    "grid": HISTORY_SCHEMA["grid"],
    "bed": HISTORY_SCHEMA["bed"],
    "sea": {
        name: HISTORY_SCHEMA["sea"][name] for name in ("level", "reference_level", "water_density")
    },
    "ice": {
        "density": _HISTORY_ICE["density"],
        "thickness": Key(
            "quantity", "ice thickness at the start, everywhere", 0.0, "length", minimum=0.0
        ),
        "radius": _HISTORY_ICE["radius"],
        "height": _HISTORY_ICE["height"],
        "center_x": _HISTORY_ICE["center_x"],
        "center_y": _HISTORY_ICE["center_y"],
    },
    "time": {
        "step": Key("quantity", "length of one update", REQUIRED, "time", minimum=0.0, strict=True),
        "end": Key("quantity", "end time of the run (start: 0)", REQUIRED, "time", minimum=0.0),
    },
}
"""Every table and key of a BMI configuration file."""

_ARRAY_TABLES = frozenset({"breaks"})
_REQUIRED_TABLES = ("plate", "bed", "time")


def parse_bmi_config(data: dict[str, Any], path: Path, text: str = "") -> BmiConfig:
    """Validate a BMI configuration already read into a dict."""
    config = parse_tables(data, path, text, BMI_SCHEMA, _ARRAY_TABLES, _REQUIRED_TABLES)
    check_plate_structure(config)
    check_bed_and_plate(config)
    if config.table("bed")["file"] is None and config.tables["grid"] is None:
        raise InputError(f"{path}: give a [grid] table, or a [bed] file whose grid is used")
    ice = config.table("ice")
    if (ice["radius"] is None) != (ice["height"] is None):
        raise InputError(f"{config.where('ice')}: a disc of ice needs both 'radius' and 'height'")
    time = config.table("time")
    if time["end"] < time["step"]:
        raise InputError(
            f"{config.where('time', 'end')}: {time['end']:g} years is shorter than one step "
            f"({time['step']:g} years)"
        )
    return config


def load_bmi_config(path: str | Path) -> BmiConfig:
    """Read and validate a BMI configuration (TOML); messages name file, table and key."""
    return load_scenario(path, parser=parse_bmi_config)

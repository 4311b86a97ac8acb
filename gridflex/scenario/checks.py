"""Checks of a ``gridflex run`` scenario that tie several keys or tables together.

The schema engine (:mod:`gridflex.scenario.schema`) checks each key alone; these
checks say which keys go together, which exclude each other and which tables need
which others. Every message names the file, the table and the key.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from gridflex.errors import InputError
from gridflex.results.profile import check_profile_ends, check_profile_point

if TYPE_CHECKING:
    from gridflex.scenario.schema import Scenario
    from gridflex.scenario.tables import FlexureScenario

__all__ = ["check_plate_structure", "check_scenario"]


def check_scenario(scenario: FlexureScenario) -> None:
    """Run every cross-table check of a ``gridflex run`` scenario.

    Raises
    ------
    InputError
        Keys that must go together, or must not, or a table missing another.
    """
    _check_loads(scenario)
    _check_profile(scenario)
    check_plate_structure(scenario)
    _check_infill_and_gravity(scenario)


def check_plate_structure(scenario: Scenario[Any]) -> None:
    """One source of Te (``[plate] elastic_thickness``, ``elastic_thickness_file`` or
    ``[margin]``); every ``[[breaks]]`` entry is a line or a mask file. Shared by every
    scenario that has these tables (``gridflex run``, ``basin``, ``history``)."""
    plate = scenario.tables["plate"]
    sources = [
        name
        for name, given in (
            ("elastic_thickness", plate["elastic_thickness"] is not None),
            ("elastic_thickness_file", plate["elastic_thickness_file"] is not None),
            ("[margin]", scenario.tables["margin"] is not None),
        )
        if given
    ]
    if not sources:
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: required key is "
            "missing (or give elastic_thickness_file, or a [margin] table)"
        )
    if len(sources) > 1:
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness')}: give only one of "
            f"elastic_thickness, elastic_thickness_file or a [margin] table "
            f"(found {', '.join(sources)})"
        )
    if (plate["elastic_thickness_file"] is None) != (plate["elastic_thickness_variable"] is None):
        raise InputError(
            f"{scenario.where('plate', 'elastic_thickness_variable')}: "
            "elastic_thickness_file and elastic_thickness_variable go together"
        )
    for i, item in enumerate(scenario.tables["breaks"]):
        where = scenario.where("breaks", index=i)
        if (item["line"] is None) == (item["file"] is None):
            raise InputError(f"{where}: give either 'line' or 'file' (with 'variable')")
        if item["file"] is not None and item["variable"] is None:
            raise InputError(f"{where} variable: required with 'file' (the mask's name in it)")


def _check_loads(scenario: FlexureScenario) -> None:
    layers = scenario.tables["loads"]
    if not layers:
        raise InputError(f"{scenario.path}: at least one [[loads]] table is needed")
    for i, layer in enumerate(layers):
        where = scenario.where("loads", index=i)
        has_file, has_shape = layer["file"] is not None, layer["synthetic"] is not None
        if has_file == has_shape:
            raise InputError(f"{where}: give either 'file' (with 'variable') or 'synthetic'")
        if layer["kind"] == "thickness" and layer["density"] is None:
            raise InputError(f"{where} density: required for a thickness layer")
        if has_shape:
            if scenario.tables["grid"] is None:
                raise InputError(
                    f"{scenario.path}: a synthetic load needs a [grid] table "
                    "(columns, rows, spacing)"
                )
            if layer["synthetic"] != "island-chain":
                for name in ("height", "radius"):
                    if layer[name] is None:
                        raise InputError(
                            f"{where} {name}: required for a {layer['synthetic']!r} shape"
                        )


def _check_infill_and_gravity(scenario: FlexureScenario) -> None:
    infill, gravity = scenario.tables["infill"], scenario.tables["gravity"]
    layers = scenario.tables["loads"]
    kinds = [layer["kind"] for layer in layers]
    if "elevation" in kinds and kinds.count("elevation") > 1:
        raise InputError(
            f"{scenario.path}: at most one [[loads]] table may have kind = 'elevation'"
        )
    if "elevation" in kinds and "thickness" in kinds:
        raise InputError(
            f"{scenario.path}: an elevation layer cannot be combined with "
            "thickness layers (it defines the surface itself)"
        )
    for i, layer in enumerate(layers):
        where = scenario.where("loads", index=i)
        if layer["kind"] != "elevation":
            continue
        if layer["file"] is None:
            raise InputError(f"{where} file: an elevation layer is read from a file")
        if (layer["regional_elevation"] is None) == (layer["regional_radius"] is None):
            raise InputError(
                f"{where}: give either regional_elevation or regional_radius for an elevation layer"
            )
        if layer["density"] is None:
            raise InputError(f"{where} density: required for an elevation layer (rock)")
    if infill is not None:
        if "thickness" in kinds and infill["base_elevation"] is None:
            raise InputError(
                f"{scenario.where('infill', 'base_elevation')}: required with "
                "thickness layers (the surface they stand on)"
            )
        for i, layer in enumerate(layers):
            if layer["kind"] == "thickness" and layer["displaced_density"]:
                raise InputError(
                    f"{scenario.where('loads', 'displaced_density', i)}: leave it out with "
                    "[infill]; the water a layer displaces follows from sea_level"
                )
        if infill["sediment"] == "to_level" and infill["sediment_level"] is None:
            raise InputError(
                f"{scenario.where('infill', 'sediment_level')}: required with sediment = 'to_level'"
            )
    if gravity is not None and infill is None:
        raise InputError(
            f"{scenario.path}: a [gravity] table needs an [infill] table (the "
            "water, sediment and surfaces the anomaly comes from)"
        )
    outputs = scenario.tables["output"]
    if outputs is not None:
        if outputs["moat_fill_map"] is not None and infill is None:
            raise InputError(f"{scenario.where('output', 'moat_fill_map')}: needs [infill]")
        for key in ("free_air_map", "bouguer_map"):
            if outputs[key] is not None and gravity is None:
                raise InputError(f"{scenario.where('output', key)}: needs [gravity]")


def _check_profile(scenario: FlexureScenario) -> None:
    out = scenario.tables["output"]
    ends = [out["profile_start"], out["profile_end"]]
    wanted = out["profile_csv"] is not None or out["profile_plot"] is not None
    given = any(v is not None for v in ends)
    for key, value in zip(("profile_start", "profile_end"), ends):
        if value is None:
            if wanted or given:
                raise InputError(f"{scenario.where('output', key)}: required for a profile")
            continue
        check_profile_point(scenario.where("output", key), value)
    if all(v is not None for v in ends):
        names = (scenario.where("output", "profile_start"), scenario.where("output", "profile_end"))
        check_profile_ends(ends[0], ends[1], names)
    if all(v is not None for v in ends) and not wanted:
        raise InputError(f"{scenario.where('output')}: a profile needs profile_csv or profile_plot")
    if out["extent"] == "response" and out["grid"] == "input":
        raise InputError(
            f"{scenario.where('output', 'extent')}: the response reaches beyond the input grid, "
            'so it is written on the working grid; leave out grid = "input"'
        )

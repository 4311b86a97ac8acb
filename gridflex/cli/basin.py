"""``gridflex basin SCENARIO.toml``: staged basin loading or a flexural backstrip."""

from __future__ import annotations

import argparse

from gridflex.cli.common import (
    SubParsers,
    add_scenario_command,
    execute_scenario_command,
    wrote,
)
from gridflex.workflows.basin import run_basin
from gridflex.workflows.basin_tables import load_basin_scenario
from gridflex.workflows.run import RunOutcome

NAME = "basin"
HELP = "fill a basin stage by stage with compaction, or backstrip it, and write the NetCDF"


def add_parser(subparsers: SubParsers) -> None:
    add_scenario_command(
        subparsers, NAME, HELP, "basin scenario file (TOML, [basin] or [backstrip])"
    )


def _report(outcome: RunOutcome) -> list[str]:
    values = [f"{key.replace('_', ' ')}: {value:.6g}" for key, value in outcome.summary.items()]
    return [*values, *wrote(outcome.written)]


def execute(args: argparse.Namespace) -> int:
    return execute_scenario_command(args, load_basin_scenario, run_basin, _report)

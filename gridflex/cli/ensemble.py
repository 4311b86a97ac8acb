"""``gridflex ensemble SCENARIO.toml``: flexure under the [ensemble] distributions."""

from __future__ import annotations

import argparse
from functools import partial

from gridflex.cli.common import SubParsers, add_scenario_command, execute_scenario_command, wrote
from gridflex.cli.sweep import add_scheduler_option, load_with_scheduler
from gridflex.scenario.tables import FlexureScenario
from gridflex.workflows.ensemble import ensemble_scenario

NAME = "ensemble"
HELP = (
    "solve an ensemble of plates drawn from the [ensemble] distributions: mean, spread, "
    "quantiles and exceedance maps into one NetCDF (and PNG maps)"
)


def add_parser(subparsers: SubParsers) -> None:
    parser = add_scenario_command(
        subparsers, NAME, HELP, "scenario file (TOML) with an [ensemble] table"
    )
    add_scheduler_option(parser, "ensemble")


def _load(path: str, scheduler: str | None) -> FlexureScenario:
    """The scenario, with --scheduler (when given) in place of ``[ensemble] scheduler``."""
    return load_with_scheduler(path, scheduler, "ensemble")


def execute(args: argparse.Namespace) -> int:
    load = partial(_load, scheduler=args.scheduler)
    return execute_scenario_command(args, load, ensemble_scenario, wrote)

"""``gridflex ensemble SCENARIO.toml``: flexure under the [ensemble] distributions."""

from __future__ import annotations

import argparse
from functools import partial

from gridflex.cli.common import SubParsers, add_scenario_command, execute_scenario_command, wrote
from gridflex.scenario.tables import FlexureScenario, load_scenario
from gridflex.sweeps.parameter_sweep import check_scheduler
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
    parser.add_argument(
        "--scheduler",
        default=None,
        help="dask scheduler address (tcp://host:port) or threads, processes, "
        "synchronous; overrides [ensemble] scheduler",
    )


def _load(path: str, scheduler: str | None) -> FlexureScenario:
    """The scenario, with --scheduler (when given) in place of ``[ensemble] scheduler``."""
    check_scheduler("--scheduler", scheduler)
    scenario = load_scenario(path)
    table = scenario.table("ensemble")
    if scheduler is not None and table is not None:
        table["scheduler"] = scheduler
    return scenario


def execute(args: argparse.Namespace) -> int:
    load = partial(_load, scheduler=args.scheduler)
    return execute_scenario_command(args, load, ensemble_scenario, wrote)

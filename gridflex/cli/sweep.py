"""``gridflex sweep SCENARIO.toml``: solve a scenario over ranges of parameters."""

from __future__ import annotations

import argparse
from functools import partial
from pathlib import Path

from gridflex.cli.common import SubParsers, add_scenario_command, execute_scenario_command, wrote
from gridflex.scenario.tables import FlexureScenario, load_scenario
from gridflex.sweeps.parameter_sweep import check_scheduler
from gridflex.workflows.sweep import sweep_scenario

NAME = "sweep"
HELP = "solve a scenario for every combination of the [sweep] values into one NetCDF"


def add_parser(subparsers: SubParsers) -> None:
    parser = add_scenario_command(
        subparsers, NAME, HELP, "scenario file (TOML) with a [sweep] table"
    )
    parser.add_argument(
        "--scheduler",
        default=None,
        help="dask scheduler address (tcp://host:port) or threads, processes, "
        "synchronous; overrides [sweep] scheduler",
    )


def _load(path: str, scheduler: str | None) -> FlexureScenario:
    """The scenario, with --scheduler (when given) in place of ``[sweep] scheduler``."""
    check_scheduler("--scheduler", scheduler)
    scenario = load_scenario(path)
    sweep = scenario.table("sweep")
    if scheduler is not None and sweep is not None:
        sweep["scheduler"] = scheduler
    return scenario


def _report(path: Path) -> list[str]:
    return wrote([path])


def execute(args: argparse.Namespace) -> int:
    load = partial(_load, scheduler=args.scheduler)
    return execute_scenario_command(args, load, sweep_scenario, _report)

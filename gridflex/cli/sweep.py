"""``gridflex sweep SCENARIO.toml``: solve a scenario over ranges of parameters."""

from __future__ import annotations

import argparse
from functools import partial
from pathlib import Path
from typing import Any, cast

from gridflex.cli.common import SubParsers, add_scenario_command, execute_scenario_command, wrote
from gridflex.scenario.tables import FlexureScenario, load_scenario
from gridflex.sweeps.parameter_sweep import check_scheduler
from gridflex.workflows.sweep import sweep_scenario

NAME = "sweep"
HELP = "solve a scenario for every combination of the [sweep] values into one NetCDF"


def add_scheduler_option(parser: argparse.ArgumentParser, table: str) -> None:
    """``--scheduler``, which overrides ``[table] scheduler``."""
    parser.add_argument(
        "--scheduler",
        default=None,
        help="dask scheduler address (tcp://host:port) or threads, processes, "
        f"synchronous; overrides [{table}] scheduler",
    )


def load_with_scheduler(path: str, scheduler: str | None, table: str) -> FlexureScenario:
    """The scenario, with --scheduler (when given) in place of ``[table] scheduler``."""
    check_scheduler("--scheduler", scheduler)
    scenario = load_scenario(path)
    values = cast(dict[str, Any] | None, scenario.tables.get(table))
    if scheduler is not None and values is not None:
        values["scheduler"] = scheduler
    return scenario


def add_parser(subparsers: SubParsers) -> None:
    parser = add_scenario_command(
        subparsers, NAME, HELP, "scenario file (TOML) with a [sweep] table"
    )
    add_scheduler_option(parser, "sweep")


def _load(path: str, scheduler: str | None) -> FlexureScenario:
    """The scenario, with --scheduler (when given) in place of ``[sweep] scheduler``."""
    return load_with_scheduler(path, scheduler, "sweep")


def _report(path: Path) -> list[str]:
    return wrote([path])


def execute(args: argparse.Namespace) -> int:
    load = partial(_load, scheduler=args.scheduler)
    return execute_scenario_command(args, load, sweep_scenario, _report)

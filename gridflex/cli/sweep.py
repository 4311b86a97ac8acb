"""``gridflex sweep SCENARIO.toml``: solve a scenario over ranges of parameters."""

from __future__ import annotations

import argparse

from gridflex.cli.common import add_common_options, add_scenario_argument, progress_printer
from gridflex.scenario.schema import load_scenario
from gridflex.workflows.sweep import sweep_scenario

NAME = "sweep"
HELP = "solve a scenario for every combination of the [sweep] values into one NetCDF"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    add_scenario_argument(parser, "scenario file (TOML) with a [sweep] table")
    parser.add_argument(
        "--scheduler",
        default=None,
        help="dask scheduler address (tcp://host:port) or threads, processes, "
        "synchronous; overrides [sweep] scheduler",
    )
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    scenario = load_scenario(args.scenario)
    if args.scheduler is not None and scenario.tables.get("sweep") is not None:
        scenario.tables["sweep"]["scheduler"] = args.scheduler
    path = sweep_scenario(scenario, overwrite=args.overwrite, progress=progress_printer(args))
    if not args.quiet:
        print(f"wrote {path}")
    return 0

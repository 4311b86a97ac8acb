"""``gridflex run SCENARIO.toml``: solve a scenario and write its outputs."""

from __future__ import annotations

import argparse

from gridflex.cli.common import add_common_options, add_scenario_argument, progress_printer
from gridflex.results.summary import format_summary
from gridflex.scenario.schema import load_scenario
from gridflex.workflows.run import run_scenario

NAME = "run"
HELP = "solve a scenario file and write its NetCDF and map"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    add_scenario_argument(parser, "scenario file (TOML)")
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    outcome = run_scenario(
        load_scenario(args.scenario), overwrite=args.overwrite, progress=progress_printer(args)
    )
    if not args.quiet:
        print(format_summary(outcome.summary))
        for path in outcome.written:
            print(f"wrote {path}")
    return 0

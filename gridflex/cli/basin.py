"""``gridflex basin SCENARIO.toml``: staged basin loading or a flexural backstrip."""

from __future__ import annotations

import argparse

from gridflex.cli.common import add_common_options, add_scenario_argument, progress_printer
from gridflex.workflows.basin import run_basin
from gridflex.workflows.basin_tables import load_basin_scenario

NAME = "basin"
HELP = "fill a basin stage by stage with compaction, or backstrip it, and write the NetCDF"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    add_scenario_argument(parser, "basin scenario file (TOML, [basin] or [backstrip])")
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    outcome = run_basin(
        load_basin_scenario(args.scenario),
        overwrite=args.overwrite,
        progress=progress_printer(args),
    )
    if not args.quiet:
        for key, value in outcome.summary.items():
            print(f"{key.replace('_', ' ')}: {value:.6g}")
        for path in outcome.written:
            print(f"wrote {path}")
    return 0

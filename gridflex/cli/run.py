"""``gridflex run SCENARIO.toml``: solve a scenario and write its outputs."""

from __future__ import annotations

import argparse

from ..runner import run_scenario
from ..scenario import load_scenario
from ..summary import format_summary
from .common import add_common_options, progress_printer

NAME = "run"
HELP = "solve a scenario file and write its NetCDF and map"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    parser.add_argument("scenario", help="scenario file (TOML)")
    parser.add_argument("--overwrite", action="store_true", help="replace existing outputs")
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

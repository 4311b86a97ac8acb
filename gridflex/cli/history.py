"""``gridflex history SCENARIO.toml``: run an ice history through time and write its outputs."""

from __future__ import annotations

import argparse

from gridflex.cli.common import add_common_options, add_scenario_argument, progress_printer
from gridflex.workflows.history import (
    format_history_summary,
    load_history_scenario,
    run_history_scenario,
)

NAME = "history"
HELP = "run an ice-thickness history (deflection through time, uplift rate, point series)"


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(NAME, help=HELP, description=HELP)
    add_scenario_argument(parser, "history scenario file (TOML)")
    add_common_options(parser)


def execute(args: argparse.Namespace) -> int:
    scenario = load_history_scenario(args.scenario)
    outcome = run_history_scenario(
        scenario, overwrite=args.overwrite, progress=progress_printer(args)
    )
    if not args.quiet:
        print(format_history_summary(outcome.summary))
        for path in outcome.written:
            print(f"wrote {path}")
    return 0

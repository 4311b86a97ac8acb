"""``gridflex run SCENARIO.toml``: solve a scenario and write its outputs."""

from __future__ import annotations

import argparse

from gridflex.cli.common import (
    SubParsers,
    add_scenario_command,
    execute_scenario_command,
    wrote,
)
from gridflex.results.summary import format_summary
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import RunOutcome, run_scenario

NAME = "run"
HELP = "solve a scenario file and write its NetCDF and map"


def add_parser(subparsers: SubParsers) -> None:
    add_scenario_command(subparsers, NAME, HELP, "scenario file (TOML)")


def _report(outcome: RunOutcome) -> list[str]:
    return [format_summary(outcome.summary), *wrote(outcome.written)]


def execute(args: argparse.Namespace) -> int:
    return execute_scenario_command(args, load_scenario, run_scenario, _report)

"""``gridflex history SCENARIO.toml``: run an ice history through time and write its outputs."""

from __future__ import annotations

import argparse

from gridflex.cli.common import (
    SubParsers,
    add_scenario_command,
    execute_scenario_command,
    wrote,
)
from gridflex.workflows.history import (
    format_history_summary,
    load_history_scenario,
    run_history_scenario,
)
from gridflex.workflows.run import RunOutcome

NAME = "history"
HELP = "run an ice-thickness history (deflection through time, uplift rate, point series)"


def add_parser(subparsers: SubParsers) -> None:
    add_scenario_command(subparsers, NAME, HELP, "history scenario file (TOML)")


def _report(outcome: RunOutcome) -> list[str]:
    return [format_history_summary(outcome.summary), *wrote(outcome.written)]


def execute(args: argparse.Namespace) -> int:
    return execute_scenario_command(args, load_history_scenario, run_history_scenario, _report)

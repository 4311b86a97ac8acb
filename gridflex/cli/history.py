"""``gridflex history SCENARIO.toml``: run an ice history through time and write its outputs."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.workflows.history import (
    format_history_summary,
    load_history_scenario,
    run_history_scenario,
)
from gridflex.workflows.run import RunOutcome

NAME = "history"
HELP = "run an ice-thickness history (deflection through time, uplift rate, point series)"


def _report(outcome: RunOutcome) -> list[str]:
    return [format_history_summary(outcome.summary), *wrote(outcome.written)]


COMMAND = ScenarioCommand(
    NAME, HELP, "history scenario file (TOML)", load_history_scenario, run_history_scenario, _report
)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

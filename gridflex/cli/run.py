"""``gridflex run SCENARIO.toml``: solve a scenario and write its outputs."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.results.summary import format_summary
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.run import RunOutcome, run_scenario

NAME = "run"
HELP = "solve a scenario file and write its NetCDF and map"


def _report(outcome: RunOutcome) -> list[str]:
    return [format_summary(outcome.summary), *wrote(outcome.written)]


COMMAND = ScenarioCommand(NAME, HELP, "scenario file (TOML)", load_scenario, run_scenario, _report)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

"""``gridflex fit SCENARIO.toml``: estimate te from the scenario's observation."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.fit import FitOutcome, fit_scenario, format_fit

NAME = "fit"
HELP = (
    "estimate te (a constant, both sides of a [margin], or a factor on a te grid) from an "
    "observed grid: misfit plot, JSON summary, best model"
)


def _report(outcome: FitOutcome) -> list[str]:
    return [format_fit(outcome.fit), *wrote(outcome.written)]


COMMAND = ScenarioCommand(
    NAME, HELP, "scenario file (TOML) with a [fit] table", load_scenario, fit_scenario, _report
)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

"""``gridflex temap SCENARIO.toml``: map te from topography and gravity, window by window."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.temap import format_temap_summary, load_temap_scenario, temap_scenario

NAME = "temap"
HELP = (
    "map te from topography and a Bouguer or free-air anomaly (moving-window multitaper "
    "coherence or admittance): NetCDF, GeoTIFF and a PNG map with the interval's width"
)


def _report(outcome: RunOutcome) -> list[str]:
    return [format_temap_summary(outcome.summary), *wrote(outcome.written)]


COMMAND = ScenarioCommand(
    NAME, HELP, "te-map scenario file (TOML)", load_temap_scenario, temap_scenario, _report
)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

"""``gridflex basin SCENARIO.toml``: staged basin loading or a flexural backstrip."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.workflows.basin import run_basin
from gridflex.workflows.basin_tables import load_basin_scenario
from gridflex.workflows.run import RunOutcome

NAME = "basin"
HELP = (
    "fill a basin stage by stage with compaction, or backstrip it; write the NetCDF (and "
    "per-stage GeoTIFFs and maps, pseudo-wells, a horizon section)"
)


def _report(outcome: RunOutcome) -> list[str]:
    values = [f"{key.replace('_', ' ')}: {value:.6g}" for key, value in outcome.summary.items()]
    return [*values, *wrote(outcome.written)]


COMMAND = ScenarioCommand(
    NAME,
    HELP,
    "basin scenario file (TOML, [basin] or [backstrip])",
    load_basin_scenario,
    run_basin,
    _report,
)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

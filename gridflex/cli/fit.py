"""``gridflex fit SCENARIO.toml``: estimate te from the scenario's observation."""

from __future__ import annotations

from gridflex.cli.common import ScenarioCommand, wrote
from gridflex.scenario.tables import load_scenario
from gridflex.workflows.fit import FitOutcome, fit_scenario

NAME = "fit"
HELP = "estimate te from an observed grid: misfit plot, JSON summary, best model"


def _report(outcome: FitOutcome) -> list[str]:
    fit = outcome.fit
    closed = "" if all(fit.interval_closed) else " (open: reaches a search bound)"
    lines = [
        f"te = {fit.te / 1e3:.3f} km, {fit.confidence:.0%} interval "
        f"[{fit.te_low / 1e3:.3f}, {fit.te_high / 1e3:.3f}] km{closed}"
    ]
    if fit.load_scale != 1.0:
        lines.append(f"load scale = {fit.load_scale:.4f} (fitted / given load)")
    lines.append(
        f"offset = {fit.offset:.6g}, RMS misfit = {fit.rms:.6g} "
        f"({fit.n_data} cells, about {fit.n_effective:.0f} independent)"
    )
    return [*lines, *wrote(outcome.written)]


COMMAND = ScenarioCommand(
    NAME, HELP, "scenario file (TOML) with a [fit] table", load_scenario, fit_scenario, _report
)
add_parser = COMMAND.add_parser
execute = COMMAND.execute

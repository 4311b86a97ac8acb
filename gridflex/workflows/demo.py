"""The built-in demo: the invented island chain of ``configs/demo.toml``."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from gridflex.scenario.tables import load_scenario
from gridflex.workflows.outcome import RunOutcome
from gridflex.workflows.run import run_scenario

__all__ = ["DEMO_FILE_NAME", "demo_scenario_text", "run_demo"]

DEMO_FILE_NAME = "demo.toml"


def demo_scenario_text() -> str:
    """Text of the demo scenario shipped with the package."""
    return resources.files("gridflex").joinpath("data", DEMO_FILE_NAME).read_text("utf-8")


def run_demo(out_dir: str | Path = "gridflex-demo") -> RunOutcome:
    """Write the demo scenario into *out_dir* and run it there.

    The demo's own files in *out_dir* are replaced on every run; nothing else in
    the folder is touched.

    Parameters
    ----------
    out_dir : str or pathlib.Path, default "gridflex-demo"
        Folder for the scenario copy and the outputs (created if missing).

    Returns
    -------
    RunOutcome
        Result, written files (the scenario copy first) and summary.
    """
    folder = Path(out_dir)
    folder.mkdir(parents=True, exist_ok=True)
    scenario_path = folder / DEMO_FILE_NAME
    scenario_path.write_text(demo_scenario_text(), encoding="utf-8")
    outcome = run_scenario(load_scenario(scenario_path), overwrite=True)
    outcome.written.insert(0, scenario_path)
    te = float(outcome.result.attrs["plate_te"])
    heading = f"Invented volcanic island chain on a {te / 1e3:g} km thick elastic plate:"
    outcome.text = f"{heading}\n{outcome.text}"
    return outcome

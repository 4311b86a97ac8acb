"""``gridflex sweep --scheduler`` replaces the scenario's ``[sweep] scheduler``."""

from __future__ import annotations

from gridflex.cli.sweep import _load

SCENARIO = """
[plate]
elastic_thickness = "20 km"

[grid]
columns = 8
rows = 8
spacing = "5 km"

[[loads]]
synthetic = "disc"
height = "1 km"
radius = "10 km"
density = 2800

[output]
file = "out.nc"
"""


def test_scheduler_option_overrides_the_table(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO + '\n[sweep]\nte = ["10 km", "20 km"]\nscheduler = "threads"\n')
    assert _load(str(path), None).table("sweep")["scheduler"] == "threads"
    assert _load(str(path), "synchronous").table("sweep")["scheduler"] == "synchronous"


def test_scheduler_option_without_a_sweep_table(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO)
    assert _load(str(path), "processes").table("sweep") is None

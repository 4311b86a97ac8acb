"""``gridflex ensemble --scheduler`` replaces the scenario's ``[ensemble] scheduler``."""

from __future__ import annotations

import pytest

from gridflex.cli.ensemble import _load
from gridflex.errors import InputError

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

[ensemble]
te = ["10 km", "20 km"]
scheduler = "threads"
"""


def test_scheduler_option_overrides_the_table(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SCENARIO)
    assert _load(str(path), None).table("ensemble")["scheduler"] == "threads"
    assert _load(str(path), "synchronous").table("ensemble")["scheduler"] == "synchronous"
    with pytest.raises(InputError, match="--scheduler"):
        _load(str(path), "nowhere")

"""The documentation matches the code: scenario keys, README example, examples run."""

from __future__ import annotations

import re
import subprocess
import sys

import numpy as np

from gridflex.scenario.tables import SCHEMA
from tests.helpers import REPO_ROOT

REPO = REPO_ROOT


def test_every_scenario_key_is_documented():
    readme = (REPO / "README.md").read_text()
    for table, keys in SCHEMA.items():
        assert f"[{table}]" in readme, table
        for key in keys:
            assert f"`{key}`" in readme, f"[{table}] {key} is not in README.md"


def test_readme_python_example_runs():
    readme = (REPO / "README.md").read_text()
    block = re.search(r"```python\n(.*?)```", readme, re.S).group(1)
    namespace: dict = {}
    exec(compile(block, "README.md", "exec"), namespace)  # noqa: S102 - our own README
    w = namespace["result"]["deflection"].values
    assert w.max() > 0 and np.isfinite(w).all()


def test_example_script_runs(tmp_path):
    done = subprocess.run(
        [sys.executable, str(REPO / "examples" / "island_chain.py"), str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    assert "forebulge height" in done.stdout
    assert (tmp_path / "island_chain_api.nc").exists()

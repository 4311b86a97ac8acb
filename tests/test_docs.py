"""The documentation matches the code: scenario keys, README example, examples run."""

from __future__ import annotations

import importlib
import re
import subprocess
import sys

import numpy as np
import pytest

from gridflex.scenario.tables import SCHEMA
from gridflex.workflows.basin_tables import BASIN_SCHEMA
from gridflex.workflows.history import HISTORY_SCHEMA
from gridflex.workflows.temap import TEMAP_SCHEMA
from tests.helpers import REPO_ROOT

REPO = REPO_ROOT


@pytest.mark.parametrize(
    ("schema", "section", "skipped"),
    [
        (SCHEMA, "", ()),
        (BASIN_SCHEMA, "", ()),
        # plate, margin, breaks and grid of a history scenario are documented with the
        # elastic scenario
        (HISTORY_SCHEMA, "## Ice loads through time", ("plate", "margin", "breaks", "grid")),
        # the te map's plate keys are those of the elastic scenario
        (TEMAP_SCHEMA, "## Te maps from data", ("plate",)),
    ],
    ids=["run", "basin", "history", "temap"],
)
def test_every_scenario_key_is_documented(schema, section, skipped):
    # the README key tables follow the schemas (common practice)
    readme = (REPO / "README.md").read_text()
    text = readme[readme.index(section) :] if section else readme
    missing = [
        f"[{table}] {key}"
        for table, keys in schema.items()
        if table not in skipped
        for key in [f"[{table}]", *(f"`{k}`" for k in keys)]
        if key not in text
    ]
    assert not missing, f"not in README.md: {missing}"


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


def test_estimate_te_example_runs(tmp_path):
    script = REPO / "examples" / "estimate_te.py"
    done = subprocess.run(
        [sys.executable, str(script), str(tmp_path)], capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0, done.stderr
    assert "(truth 18)" in done.stdout and "(truth 25)" in done.stdout
    assert (tmp_path / "misfit.png").exists() and (tmp_path / "admittance.png").exists()


def _resolve(dotted: str) -> object:
    """The object a dotted ``gridflex.…`` name refers to (module prefix, then attributes)."""
    parts = dotted.split(".")
    for cut in range(len(parts), 0, -1):
        try:
            obj: object = importlib.import_module(".".join(parts[:cut]))
        except ModuleNotFoundError:
            continue
        for attr in parts[cut:]:
            obj = getattr(obj, attr)
        return obj
    raise ModuleNotFoundError(dotted)


def test_every_python_name_in_the_readme_exists():
    readme = (REPO / "README.md").read_text()
    names = set(re.findall(r"`(gridflex(?:\.[A-Za-z_]\w*)+)", readme))
    names |= {
        f"{module}.{name.strip()}"
        for module, imported in re.findall(r"from (gridflex[\w.]*) import ([\w, ]+)", readme)
        for name in imported.split(",")
    }
    assert len(names) > 30  # the README documents the API by these names
    missing = []
    for dotted in sorted(names):
        try:
            _resolve(dotted)
        except (ImportError, AttributeError):
            missing.append(dotted)
    assert not missing, f"README.md names that do not exist: {missing}"


def test_public_names_resolve_and_no_module_hides_a_function():
    import gridflex

    for name in gridflex.__all__:
        assert getattr(gridflex, name) is not None, name
    assert callable(gridflex.solve) and callable(gridflex.sweep)
    assert importlib.import_module("gridflex.engine").solve is gridflex.solve
    assert importlib.import_module("gridflex.sweeps.parameter_sweep").sweep is gridflex.sweep

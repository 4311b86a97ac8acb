"""Bounded fuzz of scenario documents for ``run``, ``history`` and ``basin`` (issue 16).

Each example mutates a valid document (drops keys or tables, puts values of the wrong
type, extreme floats, odd strings, lists or nested tables in their place, adds unknown
keys) and runs it through the command line in-process. Property: the command succeeds
(exit 0), refuses with one line (exit 2, :class:`~gridflex.errors.InputError`) or reports
a solve that did not converge (exit 3, :class:`~gridflex.errors.ConvergenceError`);
never a traceback or another failure.

The CI run is derandomized and bounded; ``GRIDFLEX_FUZZ_EXAMPLES=5000`` runs that many
examples in all, split over the three commands.
"""

from __future__ import annotations

import contextlib
import copy
import io
import os
import shutil
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from gridflex.cli.main import main
from tests.cli.test_main_refusals_table import BASIN, HISTORY, RUN, write_inputs
from tests.helpers import toml_text

TOTAL = int(os.environ.get("GRIDFLEX_FUZZ_EXAMPLES", "600"))
"""Examples over the three commands (600 in CI; 5,000 run clean before release)."""

BASES = {"run": RUN, "history": HISTORY, "basin": BASIN}

MAX_CELLS = 64
"""Largest grid rows or columns an example may ask for (the fuzz runs tiny grids)."""

UNITS = ["", " m", " km", " kg/m^3", " Pa", " GPa", " yr", " kyr", " Pa s", " banana", "e"]

SCALARS = st.one_of(
    st.builds(
        lambda number, unit: f"{number!r}{unit}",
        st.floats(allow_nan=True, allow_infinity=True) | st.integers(-(10**6), 10**6),
        st.sampled_from(UNITS),
    ),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e-300, 1e300, -1e300, 5e-324, float("nan"), float("inf")]),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.sampled_from([0, 1, -1, 2, 4, 16, 32, 64]),
    st.sampled_from(["", "surface.nc", "s1.nc", "folder", "nope.nc", "a\0b", "sub/", "shale"]),
    st.text(max_size=12),
    st.booleans(),
)
VALUES = st.one_of(
    SCALARS,
    st.lists(SCALARS, max_size=4),
    st.dictionaries(st.text(max_size=6), SCALARS, max_size=3),
)
FACTORS = [0.0, -1.0, 1e-9, 0.5, 2.0, 1e3, 1e9, 1e300, -1e300, float("nan"), float("inf")]


@st.composite
def nearby(draw: st.DrawFn, old: Any) -> Any:
    """A value of the same shape as *old*: a number scaled, a quantity's number scaled or
    its unit swapped, a list with one item changed; these reach the workflow's checks."""
    if isinstance(old, (int, float)) and not isinstance(old, bool):
        value = old * draw(st.sampled_from(FACTORS)) if old else draw(st.sampled_from(FACTORS))
        return int(value) if isinstance(old, int) and abs(value) < 2**63 else value
    if isinstance(old, str) and " " in old:
        number, unit = old.split(" ", 1)
        if draw(st.booleans()):
            return f"{float(number) * draw(st.sampled_from(FACTORS))!r} {unit}"
        return f"{number}{draw(st.sampled_from(UNITS))}"
    if isinstance(old, list) and old:
        items = list(old)
        index = draw(st.integers(0, len(items) - 1))
        items[index] = draw(nearby(items[index]))
        return items[: draw(st.integers(0, len(items)))] if draw(st.booleans()) else items
    return draw(VALUES)


def _paths(doc: Any, prefix: tuple = ()) -> list[tuple]:
    """Every key path of *doc*: tables, list items and leaves."""
    found = []
    items = (
        doc.items() if isinstance(doc, dict) else enumerate(doc) if isinstance(doc, list) else []
    )
    for key, value in items:
        found.append((*prefix, key))
        if isinstance(value, (dict, list)):
            found += _paths(value, (*prefix, key))
    return found


@st.composite
def documents(draw: st.DrawFn, base: dict[str, Any]) -> dict[str, Any]:
    """*base* with one to three mutations; most put a value in place of a key's value, so
    that many documents parse and reach the workflow."""
    doc = copy.deepcopy(base)
    for _ in range(draw(st.integers(1, 3))):
        paths = _paths(doc)
        leaves = [p for p in paths if not isinstance(_get(doc, p), (dict, list))]
        action = draw(
            st.sampled_from(["nearby"] * 4 + ["replace"] * 2 + ["drop", "structure", "add"])
        )
        if action == "add" or not leaves:
            tables = [p for p in paths if isinstance(_get(doc, p), dict)]
            target = draw(st.sampled_from([(), *tables]))
            name = draw(st.sampled_from(["te", "spacing", "file", "rows"]) | st.text(max_size=8))
            value = draw(VALUES)
            if target == () and not isinstance(value, dict):
                value = {name: value}
            _get(doc, target)[name] = value
            continue
        if action == "nearby":  # lists of numbers (times, factors) are leaves here
            values = [p for p in paths if not isinstance(_get(doc, p), dict)]
            path = draw(st.sampled_from(values))
            _get(doc, path[:-1])[path[-1]] = draw(nearby(_get(doc, path)))
            continue
        path = draw(st.sampled_from(leaves if action in ("replace", "drop") else paths))
        parent = _get(doc, path[:-1])
        if action == "drop":
            del parent[path[-1]]
        else:
            parent[path[-1]] = draw(VALUES)
    return doc


def _get(doc: Any, path: tuple) -> Any:
    for part in path:
        doc = doc[part]
    return doc


def _tiny(doc: dict[str, Any]) -> bool:
    """Whether the document keeps to tiny grids (a large legal grid only costs time)."""
    grid = doc.get("grid")
    if not isinstance(grid, dict):
        return True
    for key in ("rows", "columns"):
        value = grid.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and value > MAX_CELLS:
            return False
    return True


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> Path:
    return write_inputs(tmp_path_factory.mktemp("fuzz_inputs"))


@pytest.mark.parametrize("command", list(BASES))
def test_fuzzed_scenarios_refuse_cleanly(command, inputs, tmp_path_factory):
    @settings(
        max_examples=max(1, TOTAL // len(BASES)),
        deadline=None,
        derandomize=True,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
    )
    @given(doc=documents(BASES[command]))
    def check(doc: dict[str, Any]) -> None:
        assume(_tiny(doc))
        text = toml_text(doc)
        folder = tmp_path_factory.mktemp("fuzz")
        shutil.copytree(inputs, folder, dirs_exist_ok=True)
        (folder / "s.toml").write_text(text)
        err, out = io.StringIO(), io.StringIO()
        with (
            contextlib.chdir(folder),
            contextlib.redirect_stderr(err),
            contextlib.redirect_stdout(out),
        ):
            status = main([command, "s.toml", "-q", "--overwrite"])
        shutil.rmtree(folder)
        lines = err.getvalue().splitlines()
        assert status in (0, 2, 3), (text, err.getvalue())
        assert not any("Traceback" in line for line in lines), (text, err.getvalue())
        if status:
            assert len(lines) == 1 and lines[0].startswith("gridflex: error: "), (text, lines)

    check()

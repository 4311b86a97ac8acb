"""Margin te profiles and break lines rasterised onto the grid."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from gridflex import InputError
from gridflex.te_maps import break_mask, broken_te, margin_te
from tests.helpers import make_grid


def test_margin_profile_values_and_orientation():
    # common practice: a cosine taper between two values across a band centred on the line
    grid = make_grid(8, 41, 5e3)
    te = margin_te(grid, 60e3, 10e3, [(0.0, -1.0), (0.0, 1.0)], 50e3)  # line x = 0 runs north
    row = te.values[0]
    x = grid.x.values
    assert_allclose(row[x <= -25e3], 60e3, rtol=0)  # left (west) of the line
    assert_allclose(row[x >= 25e3], 10e3, rtol=0)
    assert_allclose(row[x == 0], 35e3, rtol=1e-12)  # mid-way on the line
    assert np.all(np.diff(row) <= 0)
    flipped = margin_te(grid, 60e3, 10e3, [(0.0, 1.0), (0.0, -1.0)], 50e3)
    assert_allclose(flipped.values[0], row[::-1], rtol=1e-12)
    assert te.dims == ("y", "x") and te.attrs["units"] == "m"


def test_margin_oblique_line_is_constant_along_it():
    grid = make_grid(30, 30, 2e3)
    te = margin_te(grid, 40e3, 5e3, [(0.0, 0.0), (10e3, 10e3)], 20e3)
    values = te.values
    assert_allclose(np.diag(values), 22.5e3, rtol=1e-12)  # on the line: the mean
    assert values[-1, 0] == 40e3 and values[0, -1] == 5e3  # north-west is on the left


def test_break_line_is_eight_connected_and_one_cell_thick():
    grid = make_grid(40, 40, 1e3)
    mask = break_mask(grid, [[(-15e3, -12e3), (14e3, 13e3)]]).values
    rows = np.nonzero(mask.any(axis=1))[0]
    assert all(mask[r].sum() <= 2 for r in rows)
    jj, ii = np.nonzero(mask)
    order = np.argsort(ii + 1e-3 * jj)
    steps = np.abs(np.diff(np.c_[jj[order], ii[order]], axis=0)).max(axis=1)
    assert steps.max() == 1  # no holes: neighbours (8-connected) all along


def test_break_width_and_grid_outside_ignored():
    grid = make_grid(20, 20, 1e3)
    mask = break_mask(grid, [[(0.0, -50e3), (0.0, 50e3)]], width=3e3).values
    assert mask.sum(axis=1).tolist() == [3] * 20
    te = broken_te(grid + 20e3, break_mask(grid, [[(0.0, -50e3), (0.0, 50e3)]]))
    assert (te.values == 0).sum() == 20 and te.values.max() == 20e3


def test_bad_structures_raise():
    grid = make_grid(10, 10, 1e3)
    with pytest.raises(InputError, match="margin line must be a list"):
        margin_te(grid, 1e3, 2e3, [(0.0, 0.0)], 0.0)
    with pytest.raises(InputError, match="two distinct points"):
        margin_te(grid, 1e3, 2e3, [(0.0, 0.0), (0.0, 0.0)], 0.0)
    with pytest.raises(InputError, match="margin te_left must be"):
        margin_te(grid, -1.0, 2e3, [(0.0, 0.0), (1.0, 0.0)], 0.0)
    with pytest.raises(InputError, match="break line 2 must be"):
        break_mask(grid, [[(0.0, 0.0), (1.0, 1.0)], [(3.0, "a")]])

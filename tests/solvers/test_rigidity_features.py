"""Sharp-feature detection and band widths (gridflex.solvers.rigidity_features)."""

from __future__ import annotations

import numpy as np
import pytest

from gridflex.solvers.plate_operator import PlateOperator
from gridflex.solvers.rigidity_features import (
    BAND_FLEXURAL_PARAMETERS,
    BREAK_FLEXURAL_PARAMETERS,
    find_sharp_features,
    sharp_band,
)

NU = 0.25
STIFFNESS = 2270 * 9.81


def test_sharp_features_and_band_widths():
    # common practice (the band rules of gridflex.solvers.rigidity_features): a ten-fold
    # jump is sharp and widens by BAND_FLEXURAL_PARAMETERS flexural parameters of its weak
    # side; a break alone by BREAK_FLEXURAL_PARAMETERS; a constant plate has no sharp node
    n, h = 128, 2000.0
    constant = PlateOperator.build(np.full((n, n), 1e23), STIFFNESS, NU, h, h)
    assert not find_sharp_features(constant).nodes.any()
    low, high = 1e21, 1e24
    rigidity = np.full((n, n), low)
    rigidity[:, 64:] = high
    step = find_sharp_features(PlateOperator.build(rigidity, STIFFNESS, NU, h, h))
    assert step.nodes[:, 63:65].all() and not step.nodes[:, 30].any()
    alpha_low = (4 * low / STIFFNESS) ** 0.25
    assert step.band_width == pytest.approx(BAND_FLEXURAL_PARAMETERS * alpha_low, rel=1e-6)
    hinge = np.full((n, n), high)
    hinge[:, 60] = 0.0
    op = PlateOperator.build(hinge, STIFFNESS, NU, h, h)
    broken = find_sharp_features(op)
    alpha_high = (4 * high / STIFFNESS) ** 0.25
    assert broken.band_width == pytest.approx(BREAK_FLEXURAL_PARAMETERS * alpha_high, rel=1e-6)
    nodes, width, _ = sharp_band(op, broken.band_width, 10**6, broken.nodes)
    columns = np.unique(nodes % n)
    reach = int(width // h)
    assert columns.min() == 60 - 1 - reach and columns.max() == 60 + 1 + reach

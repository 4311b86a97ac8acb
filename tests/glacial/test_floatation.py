"""The floatation rule written in place: the same numbers as the plain evaluation."""

from __future__ import annotations

import numpy as np

from gridflex import bed_stress
from gridflex.glacial.floatation import IceLoad
from gridflex.solvers.row_blocks import block_rows


def _mixed_state(
    seed: int = 0, shape: tuple[int, int] = (37, 23)
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Ice, bed and deflection covering grounded and floating ice, ocean and dry land."""
    rng = np.random.default_rng(seed)
    ice = np.where(rng.random(shape) < 0.6, rng.uniform(0.0, 2000.0, shape), 0.0)
    bed = rng.uniform(-1500.0, 800.0, shape)
    w = rng.uniform(-50.0, 300.0, shape)
    return ice, bed, w


def test_bed_stress_into_out_is_the_plain_rule_bit_for_bit():
    # Same operations in the same order (PHYSICS.md 7.1 rule; identity checked, not a
    # physical value: common practice for an in-place variant).
    ice, bed, _ = _mixed_state()
    plain = bed_stress(ice, bed, 12.5)
    out = np.empty_like(bed)
    written = bed_stress(ice, bed, 12.5, out=out)
    assert written is out
    assert np.array_equal(out, plain)
    # the bed's own array may receive the result
    moved = bed.copy()
    bed_stress(ice, moved, 12.5, out=moved)
    assert np.array_equal(moved, plain)
    # the cases are all there: ocean without ice, floating ice, grounded ice, dry land
    ocean = 1030.0 * np.maximum(12.5 - bed, 0.0)
    assert (plain == 0.0).any() and (910.0 * ice > ocean).any() and (910.0 * ice < ocean).any()


def test_ice_load_change_in_blocks_equals_stress_minus_reference():
    ice, bed, w = _mixed_state(1, (61, 2003))  # rows in several blocks, the last one short
    assert block_rows(2003, 61) < 61 and 61 % block_rows(2003, 61)
    reference_ice = np.where(ice > 0, 0.5 * ice, 0.0)
    rule = IceLoad(bed, 910.0, 1030.0, 9.81, reference_ice, 3.0)
    for level in (-20.0, np.linspace(-30.0, 10.0, bed.size).reshape(bed.shape)):
        plain = rule.stress(ice, level, w) - rule.reference_stress
        assert np.array_equal(rule.change(ice, level, w), plain)
        out = np.full(bed.shape, np.nan)
        assert rule.change(ice, level, w, out=out) is out
        assert np.array_equal(out, plain)


def test_ice_load_keeps_row_major_copies_of_grids_given_in_another_order():
    # a transposed bed (a DataArray built x-first, say) is read row block by row block at
    # every step: the rule keeps row-major copies, with the same values (common practice)
    ice, bed, w = _mixed_state(2, (40, 64))
    given = np.asfortranarray(bed)
    rule = IceLoad(given, 910.0, 1030.0, 9.81, np.asfortranarray(0.5 * ice), 0.0)
    assert rule.bed.flags.c_contiguous and rule.reference_ice.flags.c_contiguous
    assert np.array_equal(rule.bed, bed) and given.flags.f_contiguous  # input untouched
    plain = IceLoad(bed, 910.0, 1030.0, 9.81, 0.5 * ice, 0.0)
    assert np.array_equal(rule.change(ice, 0.0, w), plain.change(ice, 0.0, w))

"""Tests of the exponential porosity-depth law and layer (de)compaction."""

from decimal import Decimal, getcontext

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import integrate, optimize

from gridflex.basin.compaction import (
    LITHOLOGIES,
    Lithology,
    bulk_density,
    compacted_base,
    compacted_thickness,
    grain_thickness,
    layer_grains,
    lithology,
    move_layer,
    porosity,
    saturated_column,
)
from gridflex.errors import InputError


def test_default_parameters_are_the_sclater_christie_table():
    # Sclater & Christie 1980, J. Geophys. Res. 85(B7), 3711-3739, Table 2 (North Sea
    # porosity-depth fits): phi_0 and the compaction coefficient c (km^-1), c values from
    # memory of the table; the decay length is 1/c truncated to the metre (shaly
    # sandstone 1/0.39 km^-1 = 2564 m, not the 2464 m of PHYSICS.md 1.4); grain densities
    # from memory of the same table
    table = {
        "shale": (0.63, 0.51, 2720.0),
        "sandstone": (0.49, 0.27, 2650.0),
        "chalk": (0.70, 0.71, 2710.0),
        "shaly_sandstone": (0.56, 0.39, 2680.0),
    }
    for name, (phi0, c, rho_g) in table.items():
        lith = LITHOLOGIES[name]
        assert lith.decay_length == np.floor(1e3 / c)
        assert (lith.surface_porosity, lith.grain_density) == (phi0, rho_g)
    assert_allclose(porosity(1960.0, "shale"), 0.63 / np.e, rtol=1e-14)  # Athy 1930 law


@pytest.mark.parametrize("name", sorted(LITHOLOGIES))
def test_grain_thickness_matches_quadrature_of_the_porosity_law(name):
    # closed-form integral of 1 - phi0 exp(-z/lambda) (Athy 1930; Sclater & Christie 1980)
    # against adaptive quadrature of the same law; rtol 1e-10 (quadrature accuracy)
    lith = LITHOLOGIES[name]
    for top, base in ((0.0, 1000.0), (1500.0, 1500.5), (2000.0, 6500.0)):
        expected, _ = integrate.quad(
            lambda z: 1.0 - lith.surface_porosity * np.exp(-z / lith.decay_length),
            top,
            base,
            epsabs=0,
            epsrel=1e-13,
        )
        assert_allclose(grain_thickness(top, base, lith), expected, rtol=1e-10)


def test_compacted_base_matches_a_scalar_root_finder_on_a_grid():
    # grains conserved on burial (Sclater & Christie 1980 decompaction principle); the
    # vectorised Newton result against scipy's brentq cell by cell; atol 1e-6 m
    rng = np.random.default_rng(1)
    top = rng.uniform(0.0, 5000.0, size=(6, 7))
    grains = rng.uniform(0.0, 2000.0, size=(6, 7))
    base = compacted_base(top, grains, "shale")
    assert base.shape == (6, 7)
    for z1, s, z2 in zip(top.ravel(), grains.ravel(), base.ravel(), strict=True):

        def f(b, z1=z1, s=s):
            return grain_thickness(z1, b, "shale") - s

        ref = optimize.brentq(f, z1, z1 + s / (1 - 0.63) + 1.0, xtol=1e-10)
        assert_allclose(z2, ref, atol=1e-6)


def test_burial_and_exhumation_round_trip():
    # decompaction is the inverse of compaction at equal grain thickness
    # (Sclater & Christie 1980); a 1000 m shale from the surface buried to 3000 m and
    # brought back returns to 1000 m (atol 1e-8 m, Newton tolerance)
    deep_base = move_layer(0.0, 1000.0, 3000.0, "shale")
    assert 3000.0 + 370.0 < deep_base < 4000.0  # thinner, never below its grain thickness
    assert_allclose(
        grain_thickness(3000.0, deep_base, "shale"),
        grain_thickness(0.0, 1000.0, "shale"),
        rtol=1e-12,
    )
    assert_allclose(move_layer(3000.0, deep_base, 0.0, "shale"), 1000.0, atol=1e-8)


def test_bulk_density_is_the_depth_average_of_the_saturated_density():
    # rho_b(z) = phi rho_w + (1 - phi) rho_grain (Athy 1930; PHYSICS.md 9.1), averaged over
    # the layer by quadrature; rtol 1e-10
    lith = LITHOLOGIES["sandstone"]
    for top, base in ((0.0, 2500.0), (1200.0, 1800.0)):
        mean, _ = integrate.quad(
            lambda z: 1030.0 * porosity(z, lith) + lith.grain_density * (1 - porosity(z, lith)),
            top,
            base,
            epsrel=1e-13,
        )
        assert_allclose(bulk_density(top, base, lith), mean / (base - top), rtol=1e-10)
    # a layer of no thickness has the density at its depth
    assert_allclose(bulk_density(0.0, 0.0, lith), 1030.0 * 0.49 + 2650.0 * 0.51, rtol=1e-14)


def test_incompressible_lithology_keeps_its_thickness():
    # phi0 = 0: no pores, nothing to expel (limit of the Athy 1930 law)
    rock = Lithology("rock", 0.0, 1000.0, 2600.0)
    assert_allclose(move_layer(0.0, 500.0, 4000.0, rock), 4500.0, rtol=1e-14)
    assert_allclose(bulk_density(0.0, 500.0, rock), 2600.0, rtol=1e-14)


def test_bad_inputs_raise_input_error():
    with pytest.raises(InputError, match="lithology must be one of"):
        lithology("granite")
    with pytest.raises(InputError, match="surface_porosity must lie in"):
        Lithology("x", 1.2, 1000.0, 2600.0)
    with pytest.raises(InputError, match=r"decay_length must be a finite number > 0 .*-1.0"):
        Lithology("x", 0.5, -1.0, 2600.0)
    with pytest.raises(InputError, match=r"burial depths must be finite numbers >= 0 m.*-1.0"):
        compacted_base(-1.0, 10.0, "shale")
    with pytest.raises(InputError, match=r"grain thicknesses must be .*-3e-13"):
        compacted_thickness(0.0, np.array([1.0, -3e-13]), "shale")
    with pytest.raises(InputError, match=r"grain thicknesses must be .*nan"):
        compacted_thickness(0.0, np.array([1.0, np.nan]), "shale")


@settings(max_examples=60, deadline=None)
@given(
    top=st.floats(0.0, 8000.0),
    thickness=st.floats(0.0, 3000.0),
    new_top=st.floats(0.0, 8000.0),
    name=st.sampled_from(sorted(LITHOLOGIES)),
)
def test_moving_a_layer_conserves_grains_and_orders_thickness(top, thickness, new_top, name):
    # grains conserved at any burial (Sclater & Christie 1980); deeper means thinner, and
    # never thinner than the grains nor thicker than at surface porosity (Athy 1930 law)
    base = move_layer(top, top + thickness, new_top, name)
    h = base - new_top
    s = grain_thickness(top, top + thickness, name)
    assert_allclose(grain_thickness(new_top, base, name), s, rtol=1e-9, atol=1e-9)
    assert s - 1e-9 <= h <= s / (1.0 - LITHOLOGIES[name].surface_porosity) + 1e-9
    if new_top > top:
        assert h <= thickness + 1e-9
    elif new_top < top:
        assert h >= thickness - 1e-9


def _grains_decimal(top, thickness, lith):
    """s = h - phi0 lam exp(-top/lam) (1 - exp(-h/lam)) in 50-digit decimal arithmetic:
    the closed-form integral of the Athy (1930) law, free of float round-off."""
    getcontext().prec = 50
    lam = Decimal(lith.decay_length)
    h = Decimal(float(thickness))
    phi_top = Decimal(lith.surface_porosity) * (-Decimal(float(top)) / lam).exp()
    return h - phi_top * lam * (1 - (-h / lam).exp())


# the sizes where the float difference of depths went wrong: grains of 1e-16-1e-9 m under
# 0-6000 m of burial (compacted_base returned bases up to 9e-13 m above the top)
_TINY_TOPS = np.linspace(0.0, 6000.0, 25)
_TINY_GRAINS = np.geomspace(1e-16, 1e-9, 15)


@pytest.mark.parametrize("name", sorted(LITHOLOGIES))
def test_tiny_layers_are_exact_to_round_off_and_never_negative(name):
    # closed-form grain integral of the Athy (1930) law (Sclater & Christie 1980 parameters)
    # evaluated in 50-digit decimals as the reference; thickness >= grains >= 0, base >= top,
    # and the grains of the solved thickness equal the given ones to 4 ulp (rtol 1e-15)
    lith = LITHOLOGIES[name]
    top, grains = np.meshgrid(_TINY_TOPS, _TINY_GRAINS, indexing="ij")
    h = compacted_thickness(top, grains, lith)
    base = compacted_base(top, grains, lith)
    assert np.all(h >= grains) and np.all(base >= top)
    assert np.all(h <= grains / (1.0 - porosity(top, lith)) * (1 + 1e-15))
    for z1, s, thick in zip(top.ravel()[::7], grains.ravel()[::7], h.ravel()[::7], strict=True):
        exact = float(_grains_decimal(z1, thick, lith))
        assert_allclose(exact, s, rtol=1e-15)
        assert_allclose(layer_grains(z1, thick, lith), exact, rtol=1e-15)


def test_no_grains_give_no_thickness_exactly():
    # a layer without grains has no thickness at any burial (Athy 1930 law: s(0) = 0);
    # its density is the limit, the saturated density at its top (exact)
    lith = LITHOLOGIES["shale"]
    top = np.array([0.0, 1e-3, 250.0, 3000.0, 1e5])
    zero = np.zeros_like(top)
    assert np.array_equal(compacted_thickness(top, zero, lith), zero)
    assert np.array_equal(compacted_base(top, zero, lith), top)
    assert np.array_equal(layer_grains(top, zero, lith), zero)
    assert np.array_equal(grain_thickness(top, top, lith), zero)
    phi = porosity(top, lith)
    assert_allclose(bulk_density(top, top, lith), 1030.0 * phi + 2720.0 * (1 - phi), rtol=1e-15)


def test_vanishing_columns_have_the_limit_density():
    # columns of 5e-14 m (the size that got 7400-8900 kg/m^3 before): the mean bulk density
    # of a saturated layer is a weighted mean of rho_w and rho_grain (Athy 1930 law;
    # PHYSICS.md 9.1); as h -> 0 it tends to the surface value rho_w phi0 + rho_g (1 - phi0)
    lith = LITHOLOGIES["sandstone"]
    surface = 1030.0 * 0.49 + 2650.0 * 0.51
    for h in (5e-14, 1e-12, 3e-9):
        thickness, mass, total = saturated_column(
            [np.array([layer_grains(0.0, h, lith)])], [lith], 1030.0
        )
        assert_allclose(total, h, rtol=1e-15)
        assert_allclose(mass[0] / thickness[0], surface, rtol=1e-9)
        assert_allclose(bulk_density(0.0, h, lith), surface, rtol=1e-9)

"""Kernel families: normalisation, shape, support factors and refusals of kernel_3d."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad

from pipeline.kernels import KERNEL_FAMILIES, default_support_factor, kernel_3d
from pipeline.kernels._families import GAUSSIAN_SIGMA_OVER_SUPPORT, _get_family

POLYNOMIAL_FAMILIES = [family for family in KERNEL_FAMILIES if family != "gaussian"]

# Radii where a family changes piece, so quad integrates each piece smoothly.
BREAKS = [1.0 / 3.0, 0.5, 2.0 / 3.0]


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_kernel_integrates_to_one(family):
    # Normalisation by quadrature: 4 pi int_0^1 W q^2 dq = 1 (definition of C, Dehnen & Aly 2012 eq. 2).
    total = quad(lambda q: 4.0 * math.pi * q * q * kernel_3d(family, q), 0.0, 1.0, points=BREAKS,
                 epsabs=1e-15, epsrel=1e-13)[0]
    assert_allclose(total, 1.0, rtol=1e-12)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_kernel_is_positive_decreasing_and_zero_outside_support(family):
    q = np.linspace(0.0, 1.5, 1501)
    values = kernel_3d(family, q)
    assert np.all(np.diff(values) <= 0.0)
    assert np.all(values[q < 1.0] > 0.0)
    assert np.all(values[q >= 1.0] == 0.0)


@pytest.mark.parametrize("family", POLYNOMIAL_FAMILIES)
def test_polynomial_kernels_are_continuous(family):
    # The splines and Wendland kernels are at least C2 (Dehnen & Aly 2012, Sect. 2): no jump at
    # the piece boundaries and none at the support edge.
    for q_break in BREAKS:
        below, above = kernel_3d(family, [q_break - 1e-9, q_break + 1e-9])
        assert abs(below - above) < 1e-7
    assert kernel_3d(family, 1.0 - 1e-9) < 1e-20


def test_gaussian_jumps_to_zero_by_exp_minus_nine_at_the_cut():
    # Truncation at H = 3h of exp(-r^2/h^2): at the cut the kernel is exp(-9) of its centre.
    ratio = kernel_3d("gaussian", 1.0 - 1e-12) / kernel_3d("gaussian", 0.0)
    assert_allclose(ratio, math.exp(-9.0), rtol=1e-9)
    assert_allclose(GAUSSIAN_SIGMA_OVER_SUPPORT, 1.0 / (3.0 * math.sqrt(2.0)), rtol=1e-15)


def test_kernel_keeps_shape():
    q = np.linspace(0.0, 1.0, 12).reshape(3, 4)
    assert kernel_3d("cubic_spline", q).shape == (3, 4)
    assert kernel_3d("cubic_spline", 0.3).shape == ()


def test_kernel_families_are_config_choices():
    # The tuple is what grid.kernel accepts (pipeline/config/_schema.py).
    from pipeline.config._schema import PARAMS_BY_KEY

    assert tuple(PARAMS_BY_KEY["grid.kernel"].choices) == KERNEL_FAMILIES
    assert PARAMS_BY_KEY["grid.support_factor"].default is None


def test_unknown_family_is_refused():
    with pytest.raises(ValueError, match="'family' must be one of cubic_spline, quintic_spline, "
                                         "wendland_c2, wendland_c4, wendland_c6, gaussian; got 'gauss'"):
        kernel_3d("gauss", 0.5)


@pytest.mark.parametrize("q", [-0.1, np.nan, np.inf])
def test_bad_radius_is_refused(q):
    with pytest.raises(ValueError, match="'q' must be finite and non-negative"):
        kernel_3d("wendland_c2", [0.2, q])


@pytest.mark.parametrize("family", POLYNOMIAL_FAMILIES)
def test_polynomial_pieces_match_factored_form(family):
    # The expanded pieces feed the closed-form column integrals; they must be the same w(q).
    record = _get_family(family)
    q = np.linspace(0.0, 0.999, 400)
    expanded = sum(np.where(q < support, np.polynomial.polynomial.polyval(q, coefficients), 0.0)
                   for support, coefficients in record.pieces)
    # Absolute 1e-11: the expanded Wendland C6 sums coefficients up to 1155 (cancellation).
    assert_allclose(record.norm_3d * expanded, kernel_3d(family, q), rtol=1e-9, atol=1e-11)


@pytest.mark.parametrize(("family", "factor"), [
    ("cubic_spline", 2.0),    # Monaghan & Lattanzio 1985; check-values SK-01 (Monaghan form, support 2h)
    ("quintic_spline", 3.0),  # Price 2012; check-values SK-02 (Price form, support 3h)
    ("wendland_c2", 2.0),     # check-values SK-03 (support-2h form of C2)
    ("wendland_c4", 2.0),     # same convention as C2 (from memory)
    ("wendland_c6", 2.0),     # same convention as C2 (from memory)
    ("gaussian", 3.0),        # truncation at 3h (Price 2012, from memory)
])
def test_default_support_factor(family, factor):
    assert default_support_factor(family) == factor


def test_default_support_factor_refuses_unknown_family():
    with pytest.raises(ValueError, match="'family' must be one of"):
        default_support_factor("spline")

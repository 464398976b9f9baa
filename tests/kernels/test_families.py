"""Kernel families: normalisation, shape and refusals of kernel_3d."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad

from pipeline.kernels import KERNEL_FAMILIES, kernel_3d


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_kernel_integrates_to_one(family):
    # Normalisation by quadrature: 4 pi int_0^1 W q^2 dq = 1 (definition of C, Dehnen & Aly 2012 eq. 2).
    total = quad(lambda q: 4.0 * math.pi * q * q * kernel_3d(family, q), 0.0, 1.0, points=[0.5],
                 epsabs=1e-15, epsrel=1e-13)[0]
    assert_allclose(total, 1.0, rtol=1e-12)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_kernel_is_positive_decreasing_and_zero_outside_support(family):
    q = np.linspace(0.0, 1.5, 1501)
    values = kernel_3d(family, q)
    assert np.all(np.diff(values) <= 0.0)
    assert np.all(values[q < 1.0] > 0.0)
    assert np.all(values[q >= 1.0] == 0.0)


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_kernel_is_continuous(family):
    # Both kernels are C2 (Dehnen & Aly 2012, Sect. 2): no jump anywhere, including the cubic's q = 1/2.
    q = np.array([0.5 - 1e-9, 0.5 + 1e-9, 1.0 - 1e-9])
    values = kernel_3d(family, q)
    assert abs(values[0] - values[1]) < 1e-8
    assert values[2] < 1e-20


def test_kernel_keeps_shape():
    q = np.linspace(0.0, 1.0, 12).reshape(3, 4)
    assert kernel_3d("cubic_spline", q).shape == (3, 4)
    assert kernel_3d("cubic_spline", 0.3).shape == ()


def test_kernel_families_are_config_choices():
    # The tuple is what grid.kernel accepts (pipeline/config/_schema.py).
    from pipeline.config._schema import PARAMS_BY_KEY

    assert tuple(PARAMS_BY_KEY["grid.kernel"].choices) == KERNEL_FAMILIES


def test_unknown_family_is_refused():
    with pytest.raises(ValueError, match="'family' must be one of cubic_spline, wendland_c2; got 'gauss'"):
        kernel_3d("gauss", 0.5)


@pytest.mark.parametrize("q", [-0.1, np.nan, np.inf])
def test_bad_radius_is_refused(q):
    with pytest.raises(ValueError, match="'q' must be finite and non-negative"):
        kernel_3d("wendland_c2", [0.2, q])


@pytest.mark.parametrize("family", KERNEL_FAMILIES)
def test_polynomial_pieces_match_factored_form(family):
    # The expanded pieces feed the closed-form column integrals; they must be the same w(q).
    from pipeline.kernels._families import _get_family

    record = _get_family(family)
    q = np.linspace(0.0, 0.999, 400)
    expanded = sum(np.where(q < support, np.polynomial.polynomial.polyval(q, coefficients), 0.0)
                   for support, coefficients in record.pieces)
    assert_allclose(record.norm_3d * expanded, kernel_3d(family, q), rtol=1e-9, atol=1e-14)

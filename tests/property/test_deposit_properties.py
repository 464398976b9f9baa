"""Conservation, linearity and invariance laws of the deposit on small random inputs (hypothesis)."""

import math

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

import pytest

from pipeline.grid import _jit, deposit_particles
from pipeline.kernels import KERNEL_FAMILIES, default_support_factor

# The numba kernels compile once per process (and are cached on disk); examples stay small, and
# every law runs for every kernel family.
SMALL = settings(max_examples=12, deadline=None)
every_family = pytest.mark.parametrize("kernel", KERNEL_FAMILIES)

offsets = st.floats(-0.5, 0.5, allow_nan=False)
log_h_over_pixel = st.floats(math.log10(0.01), math.log10(100.0), allow_nan=False)
weights = st.floats(0.01, 100.0, allow_nan=False)


@st.composite
def particle_sets(draw, *, n_max=6, size=15):
    """A few particles on a square ``size`` x ``size`` grid with 5 channels, h from 0.05 to 8 px."""
    n = draw(st.integers(1, n_max))
    coordinate = st.floats(-2.0, size + 1.0, allow_nan=False)
    positive = st.floats(0.05, 8.0, allow_nan=False)
    return dict(
        x_pix=np.array(draw(st.lists(coordinate, min_size=n, max_size=n))),
        y_pix=np.array(draw(st.lists(coordinate, min_size=n, max_size=n))),
        h_pix=np.array(draw(st.lists(positive, min_size=n, max_size=n))),
        chan_centre=np.array(draw(st.lists(st.floats(-1.0, 5.0, allow_nan=False), min_size=n, max_size=n))),
        chan_sigma=np.array(draw(st.lists(st.sampled_from([0.0, 0.3, 1.2]), min_size=n, max_size=n))),
        weight=np.array(draw(st.lists(weights, min_size=n, max_size=n))),
    )


def _deposit(particles, *, size=15, n_chan=5, kernel="cubic_spline", n_threads=1):
    out = np.zeros((n_chan, size, size))
    report = deposit_particles(**particles, out=out, kernel=kernel, n_threads=n_threads)
    return out, report


@every_family
@SMALL
@given(log_h=log_h_over_pixel, dx=offsets, dy=offsets, weight=weights)
@example(log_h=-2.0, dx=0.5, dy=-0.5, weight=1.0)  # tiny particle on a pixel corner
@example(log_h=2.0, dx=0.0, dy=0.0, weight=1.0)  # support 400-600 pixels wide
def test_weight_is_conserved_for_any_smoothing_length(kernel, log_h, dx, dy, weight):
    # check-values SK-08: exact pixel integration conserves mass at any h/pixel (here 0.01-100).
    h = 10.0**log_h
    half_width = math.ceil(default_support_factor(kernel) * h) + 2
    n_x, n_y = 2 * half_width + 1, 2 * half_width + 3
    out = np.zeros((3, n_y, n_x))
    report = deposit_particles([half_width + dx], [half_width + 1 + dy], [h], [1.0], [0.0], [weight],
                               out=out, kernel=kernel)
    assert_allclose(out.sum(), weight, rtol=1e-10)
    assert report.outside_fraction < 1e-10


@every_family
@SMALL
@given(particles=particle_sets(), a=st.floats(-3.0, 3.0), b=st.floats(-3.0, 3.0))
def test_deposit_is_linear_in_weight(kernel, particles, a, b):
    other = dict(particles, weight=particles["weight"][::-1].copy())
    combined = dict(particles, weight=a * particles["weight"] + b * other["weight"])
    scale = np.abs(combined["weight"]).sum() + np.abs(particles["weight"]).sum() * (abs(a) + abs(b))
    expected = a * _deposit(particles, kernel=kernel)[0] + b * _deposit(other, kernel=kernel)[0]
    assert_allclose(_deposit(combined, kernel=kernel)[0], expected, rtol=0.0, atol=1e-13 * scale)


def _moments(cube):
    """Return total, centroid-free second moments (Mxx + Myy, Mxx Myy - Mxy^2) of a cube's sky image."""
    image = cube.sum(axis=0)
    y, x = np.indices(image.shape)
    total = image.sum()
    xc, yc = (image * x).sum() / total, (image * y).sum() / total
    mxx = (image * (x - xc) ** 2).sum() / total
    myy = (image * (y - yc) ** 2).sum() / total
    mxy = (image * (x - xc) * (y - yc)).sum() / total
    return np.array([total, mxx + myy, mxx * myy - mxy**2])


@every_family
@SMALL
@given(particles=particle_sets())
def test_rotation_about_the_line_of_sight(kernel, particles):
    # A 90-degree rotation on a square grid: (x, y) -> (n - 1 - y, x) moves pixel (j, i) to (i, n-1-j).
    size = 15
    cube, _ = _deposit(particles, size=size, kernel=kernel)
    rotated = dict(particles, x_pix=size - 1.0 - particles["y_pix"], y_pix=particles["x_pix"].copy())
    cube_rotated, _ = _deposit(rotated, size=size, kernel=kernel)
    scale = particles["weight"].sum()
    assert_allclose(cube_rotated, np.rot90(cube, k=-1, axes=(1, 2)), rtol=0.0, atol=1e-13 * scale)
    # Swapping x and y (a reflection on a square grid) transposes the image.
    swapped = dict(particles, x_pix=particles["y_pix"], y_pix=particles["x_pix"])
    cube_swapped, _ = _deposit(swapped, size=size, kernel=kernel)
    assert_allclose(cube_swapped, cube.transpose(0, 2, 1), rtol=0.0, atol=1e-13 * scale)
    if cube.sum() > 1e-6 * scale:
        # Moments in pixels^0, ^2 and ^4; round-off floors scale with the grid size.
        floor = np.array([0.0, 1e-12 * size**2, 1e-12 * size**4])
        reference = _moments(cube)
        for moments in (_moments(cube_rotated), _moments(cube_swapped)):
            difference = np.abs(moments - reference)
            assert np.all(difference <= 1e-9 * np.abs(reference) + floor), (moments, reference)


@every_family
@SMALL
@given(particles=particle_sets(n_max=12, size=40), angle=st.floats(0.0, 2.0 * math.pi))
def test_rotation_by_any_angle_keeps_total_and_second_moments(kernel, particles, angle):
    # About the field centre, by any angle: the total is exact (nothing leaves the 64-pixel field),
    # and the trace and determinant of the image's second moments are invariant to 1e-4 for
    # particles resolved by the pixels (h >= 2 px): binning adds 1/12 pixel^2 per axis whatever
    # the angle (Sheppard's correction), up to terms measured below 1e-5 here.
    size, centre = 64, 31.5
    # Centres within 9.3 pixels of the field centre and supports under 18 pixels: all inside.
    resolved = dict(particles, x_pix=centre + 0.3 * (particles["x_pix"] - 20.0),
                    y_pix=centre + 0.3 * (particles["y_pix"] - 20.0),
                    h_pix=2.0 + 0.5 * particles["h_pix"])
    cube, _ = _deposit(resolved, size=size, kernel=kernel)
    cos, sin = math.cos(angle), math.sin(angle)
    x, y = resolved["x_pix"] - centre, resolved["y_pix"] - centre
    turned = dict(resolved, x_pix=centre + cos * x - sin * y, y_pix=centre + sin * x + cos * y)
    cube_turned, _ = _deposit(turned, size=size, kernel=kernel)
    reference, moments = _moments(cube), _moments(cube_turned)
    assert_allclose(moments[0], reference[0], rtol=1e-12)
    assert_allclose(moments[1:], reference[1:], rtol=1e-4)


@every_family
@SMALL
@given(particles=particle_sets(n_max=12))
def test_thread_count_does_not_matter(kernel, particles):
    serial, serial_report = _deposit(particles, kernel=kernel, n_threads=1)
    threaded, threaded_report = _deposit(particles, kernel=kernel, n_threads=_jit._max_threads())
    assert np.array_equal(threaded, serial)
    assert threaded_report == serial_report

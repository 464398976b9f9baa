"""deposit_particles: refusals, the report, conservation and closed-form cases."""

import tracemalloc

import astropy.units as u
import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.stats import norm

from pipeline.grid import (DepositReport, _deposit, _jit, accumulator, deposit_particles,
                           estimate_chunk_bytes)
from pipeline.kernels import KERNEL_FAMILIES


def _one(**changes):
    """Arguments for one particle in the middle of a (5, 6, 7) cube, with ``changes`` applied."""
    arguments = dict(x_pix=[3.2], y_pix=[2.7], h_pix=[0.8], chan_centre=[2.1], chan_sigma=[0.6],
                     weight=[1.5], out=np.zeros((5, 6, 7)))
    arguments.update(changes)
    return arguments


# --- refusals -------------------------------------------------------------------------------------

@pytest.mark.parametrize(("changes", "message"), [
    (dict(x_pix=[[1.0]]), r"'x_pix' must be a 1-D array of shape \(n_particles,\); got shape \(1, 1\)"),
    (dict(y_pix=[1.0, 2.0]), r"'y_pix' must have the same length as 'x_pix' \(1\); got 2"),
    (dict(weight=[np.nan]), r"'weight' must be finite; got 1 non-finite values"),
    (dict(h_pix=[np.inf]), r"'h_pix' must be finite"),
    (dict(h_pix=[np.nan]), r"'h_pix' must be finite; got 1 non-finite values"),
    (dict(h_pix=[0.0]), r"'h_pix' must be positive; got minimum 0.0"),
    (dict(h_pix=[-0.3]), r"'h_pix' must be positive; got minimum -0.3"),
    (dict(h_pix=[1e308]), r"'h_pix' times 'support_factor' must be finite"),
    (dict(chan_sigma=[-0.1]), r"'chan_sigma' must be >= 0 \(0 for a delta line\); got minimum -0.1"),
    (dict(chan_centre=[np.inf]), r"'chan_centre' must be finite"),
    (dict(out=np.zeros((6, 7))), r"'out' must be a numpy array of shape \(n_chan, n_y, n_x\); got ndarray"),
    (dict(out=[[[0.0]]]), r"'out' must be a numpy array of shape \(n_chan, n_y, n_x\); got list"),
    (dict(out=np.zeros((5, 6, 7), dtype=np.float32)), r"'out' must have dtype float64; got float32"),
    (dict(out=np.zeros((7, 6, 5)).T), r"'out' must be a writeable C-contiguous array"),
    (dict(kernel="gauss"), r"'kernel' must be one of cubic_spline, quintic_spline, wendland_c2, "
                           r"wendland_c4, wendland_c6, gaussian; got 'gauss'"),
    (dict(support_factor=0.0), r"'support_factor' must be None \(the kernel's usual factor\) or a "
                               r"positive number"),
    (dict(support_factor="2"), r"'support_factor' must be None"),
    (dict(support_factor=True), r"'support_factor' must be None"),
    (dict(support_factor=float("nan")), r"'support_factor' must be None"),
    (dict(n_threads=0), r"'n_threads' must be None or an integer from 1 to \d+; got 0"),
    (dict(n_threads=2.0), r"'n_threads' must be None or an integer from 1 to \d+; got 2.0"),
])
def test_bad_input_is_refused(changes, message):
    with pytest.raises(ValueError, match=message):
        deposit_particles(**_one(**changes))


def test_read_only_out_is_refused():
    out = np.zeros((5, 6, 7))
    out.setflags(write=False)
    with pytest.raises(ValueError, match="'out' must be a writeable C-contiguous array"):
        deposit_particles(**_one(out=out))


def test_too_many_threads_are_refused():
    limit = _jit._max_threads()
    with pytest.raises(ValueError, match=f"from 1 to {limit}; got {limit + 1}"):
        deposit_particles(**_one(n_threads=limit + 1))


def test_refusal_leaves_out_untouched():
    arguments = _one(h_pix=[-1.0])
    with pytest.raises(ValueError):
        deposit_particles(**arguments)
    assert not arguments["out"].any()


# --- closed-form cases ----------------------------------------------------------------------------

def test_small_particle_lands_in_one_voxel():
    # Support (0.1 px) inside pixel (y=2, x=3) and a delta line in channel 2: the whole weight there.
    out = np.zeros((5, 6, 7))
    report = deposit_particles(**_one(x_pix=[3.2], y_pix=[1.7], h_pix=[0.05], chan_sigma=[0.0], out=out))
    assert out[2, 2, 3] == pytest.approx(1.5, rel=1e-15)
    assert np.count_nonzero(out) == 1
    assert report == DepositReport(total_weight=1.5, deposited_weight=pytest.approx(1.5, rel=1e-15),
                                   outside_fraction=pytest.approx(0.0, abs=1e-15), n_particles=1,
                                   n_contributions=1, n_larger_than_field=0)


def test_particle_on_pixel_edge_splits_in_half():
    # Symmetry of the kernel: a particle on the edge x = 3.5 gives each side half.
    out = np.zeros((5, 6, 7))
    deposit_particles(**_one(x_pix=[3.5], y_pix=[2.0], h_pix=[0.2], chan_sigma=[0.0], out=out))
    assert_allclose(out[2, 2, 3:5], [0.75, 0.75], rtol=1e-13)


def test_particle_on_pixel_corner_splits_in_quarters():
    out = np.zeros((5, 6, 7))
    deposit_particles(**_one(x_pix=[3.5], y_pix=[1.5], h_pix=[0.3], chan_sigma=[0.0], out=out))
    assert_allclose(out[2, 1:3, 3:5], np.full((2, 2), 0.375), rtol=1e-13)


def test_wide_line_follows_gaussian_channel_integrals():
    # Channel k gets the Gaussian between its edges (reference: scipy.stats.norm); the 6-sigma cut
    # and renormalisation change each channel by about 2e-9 of the line.
    n_chan = 51
    out = np.zeros((n_chan, 3, 3))
    centre, sigma = 24.3, 3.7
    deposit_particles([1.0], [1.0], [0.1], [centre], [sigma], [1.0], out=out)
    edges = np.arange(n_chan + 1) - 0.5
    expected = np.diff(norm.cdf(edges, loc=centre, scale=sigma))
    assert_allclose(out[:, 1, 1], expected, rtol=0.0, atol=5e-9)
    assert out.sum() == pytest.approx(1.0, rel=1e-13)


@pytest.mark.parametrize("kernel", KERNEL_FAMILIES)
def test_unset_support_factor_is_the_family_default(kernel):
    from pipeline.kernels import default_support_factor

    unset, explicit = np.zeros((5, 6, 7)), np.zeros((5, 6, 7))
    deposit_particles(**_one(out=unset), kernel=kernel)
    deposit_particles(**_one(out=explicit), kernel=kernel, support_factor=default_support_factor(kernel))
    assert np.array_equal(unset, explicit)


def test_support_factor_scales_the_smoothing_length():
    # H = support_factor * h: (h = 2, factor 1) is the same kernel as (h = 1, factor 2).
    first, second = np.zeros((5, 6, 7)), np.zeros((5, 6, 7))
    deposit_particles(**_one(h_pix=[2.0], out=first), support_factor=1.0)
    deposit_particles(**_one(h_pix=[1.0], out=second), support_factor=2.0)
    assert np.array_equal(first, second)


def test_deposit_accumulates_into_out():
    out = np.full((5, 6, 7), 2.0)
    fresh = np.zeros((5, 6, 7))
    deposit_particles(**_one(out=out))
    deposit_particles(**_one(out=fresh))
    assert_allclose(out, fresh + 2.0, rtol=1e-15)


def test_inputs_are_converted_to_float64():
    as_float32 = {name: np.asarray(value, dtype=np.float32)
                  for name, value in _one().items() if name != "out"}
    out, reference = np.zeros((5, 6, 7)), np.zeros((5, 6, 7))
    deposit_particles(**as_float32, out=out)
    deposit_particles(**{name: value.astype(np.float64) for name, value in as_float32.items()},
                      out=reference)
    assert np.array_equal(out, reference)


def test_no_particles_gives_an_empty_report():
    out = np.zeros((5, 6, 7))
    report = deposit_particles([], [], [], [], [], [], out=out)
    assert report == DepositReport(0.0, 0.0, 0.0, 0, 0, 0)
    assert not out.any()


@pytest.mark.parametrize("changes", [dict(x_pix=[-3.0]), dict(y_pix=[9.0], h_pix=[1.0]),
                                     dict(chan_centre=[-9.0]), dict(chan_centre=[5.5], chan_sigma=[0.0]),
                                     dict(x_pix=[1e300])])
def test_particle_outside_the_cube_is_not_written(changes):
    arguments = _one(**changes)
    report = deposit_particles(**arguments)
    assert not arguments["out"].any()
    assert report.deposited_weight == 0.0
    assert report.outside_fraction == 1.0
    assert report.n_contributions == 0


# --- conservation and bookkeeping -----------------------------------------------------------------

@pytest.mark.parametrize("kernel", KERNEL_FAMILIES)
@pytest.mark.parametrize("h_pix", [0.05, 0.13, 0.5, 1.0, 2.7, 8.0, 21.0, 50.0])
def test_mass_is_conserved_for_any_smoothing_length(kernel, h_pix, rng):
    # check-values SK-08: exact pixel integration conserves the particle's weight at any h/pixel.
    n_chan, n_y, n_x = 7, 315, 321
    n = 5
    x = n_x / 2 + rng.uniform(-3.0, 3.0, n)
    y = n_y / 2 + rng.uniform(-3.0, 3.0, n)
    weight = rng.uniform(0.1, 3.0, n)
    out = np.zeros((n_chan, n_y, n_x))
    report = deposit_particles(x, y, np.full(n, h_pix), rng.uniform(2.5, 3.5, n), np.full(n, 0.4),
                               weight, out=out, kernel=kernel)
    assert_allclose(out.sum(), weight.sum(), rtol=1e-10)
    assert_allclose(report.deposited_weight, weight.sum(), rtol=1e-10)
    assert report.outside_fraction < 1e-10


def test_report_totals_add_up(rng):
    n = 300
    n_chan, n_y, n_x = 11, 24, 37
    out = np.zeros((n_chan, n_y, n_x))
    weight = rng.uniform(0.0, 2.0, n)
    report = deposit_particles(rng.uniform(-8, n_x + 8, n), rng.uniform(-8, n_y + 8, n),
                               np.exp(rng.uniform(np.log(0.05), np.log(15.0), n)),
                               rng.uniform(-3, n_chan + 3, n), rng.choice([0.0, 0.5, 3.0], n), weight,
                               out=out)
    assert report.n_particles == n
    assert report.total_weight == pytest.approx(weight.sum(), rel=1e-14)
    assert 0.05 < report.outside_fraction < 0.95
    outside_weight = report.outside_fraction * report.total_weight
    assert_allclose(report.deposited_weight + outside_weight, report.total_weight, rtol=1e-12)
    assert_allclose(out.sum(), report.deposited_weight, rtol=1e-12)
    assert report.n_contributions >= np.count_nonzero(out)


def test_contributions_count_written_voxels():
    # A 3-channel line window (sigma small, centre mid-channel: 6 sigma = 0.6 stays inside
    # channels 1..3) and a particle inside one pixel: 3 voxels.
    out = np.zeros((5, 6, 7))
    report = deposit_particles([3.0], [2.0], [0.1], [2.0], [0.1], [1.0], out=out)
    assert report.n_contributions == 3 == np.count_nonzero(out)


def test_deposit_is_continuous_in_smoothing_length_and_position():
    # No jump where the support starts to reach a neighbouring pixel (h = 0.2 here, H = 0.4)
    # or where a small particle crosses a pixel edge.
    def cube(x, h):
        out = np.zeros((1, 5, 5))
        deposit_particles([x], [2.0], [h], [0.0], [0.0], [1.0], out=out)
        return out

    assert np.abs(cube(2.1, 0.2 * (1 + 1e-7)) - cube(2.1, 0.2 * (1 - 1e-7))).max() < 1e-6
    assert np.abs(cube(2.5 + 1e-9, 0.05) - cube(2.5 - 1e-9, 0.05)).max() < 1e-6


def _field_of_particles(rng, n, n_x=38, n_y=45, n_chan=13):
    """Arguments for ``n`` particles over and beyond a (n_chan, n_y, n_x) cube, h from 0.05 to 25 px."""
    return dict(x_pix=rng.uniform(-5, n_x + 5, n), y_pix=rng.uniform(-5, n_y + 5, n),
                h_pix=np.exp(rng.uniform(np.log(0.05), np.log(25.0), n)),
                chan_centre=rng.uniform(-2, n_chan + 2, n), chan_sigma=rng.choice([0.0, 0.4, 2.5], n),
                weight=rng.uniform(0.0, 1.0, n))


@pytest.mark.parametrize("kernel", ["cubic_spline", "wendland_c2", "gaussian"])
def test_thread_count_does_not_change_the_result(kernel, rng):
    # Every voxel sums the same terms in the same (tile-sorted) order whichever thread owns its band.
    arguments = dict(_field_of_particles(rng, 2000), kernel=kernel)
    serial, threaded = np.zeros((13, 45, 38)), np.zeros((13, 45, 38))
    before = _jit._default_threads()
    first = deposit_particles(**arguments, out=serial, n_threads=1)
    second = deposit_particles(**arguments, out=threaded, n_threads=_jit._max_threads())
    assert _jit._default_threads() == before
    assert np.array_equal(threaded, serial)
    assert first == second


def test_threaded_path_is_taken_even_with_one_row():
    # A single-row cube has one band; the threaded call still works.
    out = np.zeros((2, 1, 9))
    deposit_particles([4.0], [0.0], [1.0], [0.5], [0.3], [1.0], out=out, n_threads=_jit._max_threads())
    serial = np.zeros((2, 1, 9))
    deposit_particles([4.0], [0.0], [1.0], [0.5], [0.3], [1.0], out=serial, n_threads=1)
    assert np.array_equal(out, serial)


@pytest.mark.parametrize("tile_rows", [1, 3, 1000])
def test_row_bands_do_not_change_the_result(monkeypatch, rng, tile_rows):
    # Bands of 1, 3 or all rows against the default 16: the same sums up to the order of terms
    # (the tile key changes with the band height, so round-off may differ).
    arguments = dict(_field_of_particles(rng, 500, n_x=37, n_y=27, n_chan=6), n_threads=2)
    default, banded = np.zeros((6, 27, 37)), np.zeros((6, 27, 37))
    deposit_particles(**arguments, out=default)
    monkeypatch.setattr(_deposit, "_TILE_ROWS", tile_rows)
    deposit_particles(**arguments, out=banded)
    assert_allclose(banded, default, rtol=1e-12, atol=1e-16)


@pytest.mark.parametrize("tile_columns", [1, 7, 10_000])
def test_tile_sorting_does_not_change_the_result(monkeypatch, rng, tile_columns):
    # Sorting only reorders the sums: 10 000-pixel tiles leave each band in input order.
    arguments = _field_of_particles(rng, 800)
    default, resorted = np.zeros((13, 45, 38)), np.zeros((13, 45, 38))
    deposit_particles(**arguments, out=default)
    monkeypatch.setattr(_deposit, "_TILE_COLUMNS", tile_columns)
    deposit_particles(**arguments, out=resorted)
    assert_allclose(resorted, default, rtol=1e-12, atol=1e-16)


def test_particles_larger_than_the_field_are_counted():
    # Support diameter 2 H = 4 h against the smaller side (n_y = 6): h = 1.5 and 1.499 are not
    # larger, 1.51 and 40 are; a particle far outside the field counts too.
    out = np.zeros((5, 6, 7))
    report = deposit_particles([3.0, 3.0, 3.0, 3.0, 900.0], [2.0] * 5, [1.5, 1.499, 1.51, 40.0, 2.0],
                               [2.0] * 5, [0.5] * 5, [1.0] * 5, out=out)
    assert report.n_larger_than_field == 3


def test_memory_mapped_and_in_memory_accumulators_give_identical_cubes(rng, tmp_path):
    arguments = _field_of_particles(rng, 1500)
    in_memory = np.zeros((13, 45, 38))
    deposit_particles(**arguments, out=in_memory)
    with accumulator((13, 45, 38), in_memory_limit=0 * u.byte, directory=tmp_path) as mapped:
        assert isinstance(mapped, np.memmap)
        deposit_particles(**arguments, out=mapped)
        assert np.array_equal(mapped, in_memory)


def test_chunk_estimate_covers_the_measured_allocations(rng):
    # tracemalloc sees numpy's allocations (the sorted copy, the keys); the kernels' own buffers are
    # per-row and not counted.  Inputs are float64 already, as the estimate assumes.
    n = 20_000
    arguments = _field_of_particles(rng, n)
    out = np.zeros((13, 45, 38))
    deposit_particles(**{name: values[:10] for name, values in arguments.items()}, out=out)
    tracemalloc.start()
    try:
        deposit_particles(**arguments, out=out)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert 0.8 * estimate_chunk_bytes(n) < peak <= estimate_chunk_bytes(n) + 100_000


@pytest.mark.parametrize("n_particles", [-1, 2.5, True, "10"])
def test_chunk_estimate_refuses_bad_counts(n_particles):
    with pytest.raises(ValueError, match="'n_particles' must be a non-negative integer"):
        estimate_chunk_bytes(n_particles)


@pytest.mark.parametrize(("kernel", "support_over_sigma"), [
    ("cubic_spline", np.sqrt(40.0 / 3.0)), ("quintic_spline", 2.0 * 2.195775),
    ("wendland_c2", np.sqrt(15.0)), ("wendland_c6", np.sqrt(24.0)),
])
@pytest.mark.parametrize("h_pix", [4.0, 10.0])
def test_image_second_moment_is_kernel_variance_plus_pixel_binning(kernel, support_over_sigma, h_pix):
    # Per-axis second moment of a resolved particle's image: the kernel's sigma^2 (check-values
    # SK-04, H / sigma from Dehnen & Aly 2012, Table 1) plus 1/12 pixel^2 for binning into pixels
    # (Sheppard's correction, Sheppard 1898); no cross term.  1e-4 covers the table's bilinear
    # interpolation, which adds ~1e-5.
    from pipeline.kernels import default_support_factor

    out = np.zeros((1, 101, 101))
    x, y = 50.3, 49.8
    deposit_particles([x], [y], [h_pix], [0.0], [0.0], [1.0], out=out, kernel=kernel)
    image = out[0]
    rows, columns = np.indices(image.shape)
    sigma = h_pix * default_support_factor(kernel) / support_over_sigma
    assert_allclose((image * (columns - x) ** 2).sum(), sigma**2 + 1.0 / 12.0, rtol=1e-4)
    assert_allclose((image * (rows - y) ** 2).sum(), sigma**2 + 1.0 / 12.0, rtol=1e-4)
    assert abs((image * (columns - x) * (rows - y)).sum()) < 1e-6 * sigma**2

"""The run path: channel slabs, line profiles, output units, planning refusals."""

import shutil
import subprocess
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from pipeline.chain import orient_galaxy, plan_run, render_channels, run
from pipeline.config import load_config
from pipeline.errors import OversizedParticleWarning, ParticlesOutsideFieldWarning


def _plan(path, *overrides):
    return plan_run(load_config(path, overrides=list(overrides)))


def test_channel_slabs_stacked_equal_the_whole_cube_noise_included(small_run_config):
    # Slab-parallel rendering must not change the answer: deposit, beam and (seeded) noise are
    # per channel, so the stacked slabs equal the cube made whole to round-off.
    plan = _plan(small_run_config())
    orientation = orient_galaxy(plan)
    whole = render_channels(plan, orientation).cube.data
    slabs = [render_channels(plan, orientation, channels=r).cube.data for r in [(0, 5), (5, 6), (6, 17)]]
    np.testing.assert_allclose(np.concatenate(slabs), whole, rtol=0, atol=1e-12 * np.abs(whole).max())


def test_render_channels_refuses_a_range_outside_the_band(small_run_config):
    plan = _plan(small_run_config())
    with pytest.raises(ValueError, match="'channels' must satisfy 0 <= first < stop <= 17"):
        render_channels(plan, orient_galaxy(plan), channels=(3, 30))


def test_delta_line_puts_each_particle_in_one_channel(make_snapshot, small_run_config, tmp_path):
    # One particle at rest in the frame: with a delta profile all its flux is in a single channel.
    config = small_run_config(snapshot_kwargs={})
    make_snapshot(1, position=np.zeros((1, 3)), velocity=np.zeros((1, 3)), smoothing_length=np.array([0.5]))
    plan = _plan(config, "grid.line_profile=delta", "noise.mode=none",
                 "geometry.frame=explicit",
                 "geometry.frame_velocity=['0 km/s', '0 km/s', '0 km/s']")
    cube = render_channels(plan, orient_galaxy(plan)).cube
    per_channel = cube.data.sum(axis=(1, 2))
    assert np.count_nonzero(per_channel) == 1
    assert np.argmax(per_channel) == 8          # the systemic velocity sits on the central channel


@pytest.mark.fitsverify
def test_cube_in_kelvin_is_written_clean_and_matches_astropy(small_run_config, tmp_path):
    # Jy/beam -> K per channel through astropy's brightness_temperature equivalency (HI-07).
    config = load_config(small_run_config(), overrides=[])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)   # the small snapshot spills out of band
        jy = run(config, write=False)
        kelvin = run(config.replace(["emission.unit=K"]), write=True)
    frequencies = np.asarray(jy.cube.wcs.spectral.pixel_to_world_values(np.arange(17))) * u.Hz
    expected = [(jy.cube.data[k] * u.Jy / u.beam).to(u.K, u.brightness_temperature(frequencies[k], jy.cube.beam.solid_angle))
                for k in range(17)]
    assert_quantity_allclose(kelvin.cube.quantity, u.Quantity(expected), rtol=1e-6)
    assert kelvin.moment0.unit == u.K * u.km / u.s
    if shutil.which("fitsverify") is None:
        pytest.skip("fitsverify is not installed")
    for path in kelvin.paths.values():
        if path.suffix == ".fits":
            report = subprocess.run(["fitsverify", str(path)], capture_output=True, text=True).stdout
            assert "Verification found 0 warning(s) and 0 error(s)" in report   # HEASARC fitsverify


@pytest.mark.slow
def test_estimated_peak_memory_bounds_the_measured_peak(small_run_config, tmp_path):
    # The plan's estimate must not be optimistic: run the CLI in a grandchild process and compare
    # its peak resident set (getrusage ru_maxrss, kB on Linux) with the estimate for the same config.
    # The intermediate child reports only its own child's peak, whatever else this worker ran.
    import sys

    overrides = ["grid.n_x=256", "grid.n_y=192", "grid.n_chan=64", "grid.pixel_scale=4 arcsec",
                 "beam.major=20 arcsec", "beam.minor=16 arcsec"]
    config = small_run_config()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)
        estimate = _plan(config, *overrides).peak_memory.to_value(u.byte)
    argv = [sys.executable, "-m", "pipeline", "run", str(config), "--quiet"]
    for item in overrides:
        argv += ["--set", item]
    probe = ("import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True, capture_output=True); "
             "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    report = subprocess.run([sys.executable, "-c", probe, *argv], check=True, capture_output=True, text=True)
    measured = int(report.stdout.strip()) * 1024
    assert measured <= estimate, (measured, estimate)
    assert measured >= 0.5 * estimate, (measured, estimate)   # and not uselessly pessimistic


def test_particles_wider_than_the_field_are_counted_and_warned_about(make_snapshot, small_run_config):
    # h = 50 kpc against a 14 kpc field: the deposit counts them and the run warns (issue 3, bad input).
    config = small_run_config()
    make_snapshot(200, smoothing_length=np.full(200, 50.0))
    plan = _plan(config)
    with pytest.warns(OversizedParticleWarning, match="wider than the field of view"):
        render_channels(plan, orient_galaxy(plan))


def test_quoted_hi_mass_noise_matches_the_scatter_of_signal_free_channels(small_run_config):
    # A cube with signal only in a few channels: the others are pure noise, and the scatter of
    # their summed flux, scaled to the whole band, must match the quoted 1-sigma mass noise
    # (radiometer rms through the beam-correlated noise; HI-13 frequency form for the mass).
    from pipeline.chain import summarise
    from pipeline.emission import hi_mass_from_flux

    plan = _plan(small_run_config(), "grid.n_chan=201", "grid.n_x=64", "grid.n_y=64")
    orientation = orient_galaxy(plan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)
        rendered = render_channels(plan, orientation)
    result = summarise(plan, orientation, rendered)
    flux = result.summary["profile"].to_value(u.Jy)
    empty = np.r_[flux[:40], flux[-40:]]                 # far outside the +-100 km/s line
    width_hz = plan.grid.channel_width.to_value(u.Hz)
    measured = hi_mass_from_flux(np.std(empty) * np.sqrt(201) * width_hz * u.Jy * u.Hz,
                                 plan.distances.luminosity_distance)
    # 80 samples: the standard deviation is known to about 8%; allow 25%.
    assert_quantity_allclose(result.summary["hi_mass_noise"], measured, rtol=0.25)


def test_kept_model_is_the_noise_free_cube(small_run_config):
    # The model kept beside a noisy run is bit for bit the cube of the same run with the noise off,
    # and the observed cube differs from it by noise of the planned rms (common practice, no source).
    config = load_config(small_run_config(), overrides=[])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)   # the small snapshot spills out of band
        noisy = run(config, write=False, keep_model=True)
        silent = run(config.replace(["noise.mode=none"]), write=False)
        plain = run(config, write=False)
    assert plain.model is None and noisy.model.unit == u.Jy / u.beam
    assert noisy.model.data.tobytes() == silent.cube.data.tobytes()
    assert noisy.cube.data.tobytes() == plain.cube.data.tobytes()
    residual = noisy.cube.data.astype(np.float64) - noisy.model.data
    rms = noisy.summary["noise_rms"].to_value(u.Jy / u.beam)
    assert np.std(residual) == pytest.approx(rms, rel=0.05)


def test_kelvin_cube_states_its_noise_in_kelvin_with_the_jy_value_beside_it(small_run_config):
    # NOISERMS in BUNIT (a K cube wrote the Jy/beam number under BUNIT = 'K'); the K value is the
    # Jy/beam rms through astropy's brightness_temperature at the reference channel (check-values HI-07).
    from astropy.io import fits

    config = load_config(small_run_config(), overrides=["emission.unit=K", "noise.rms=2 mJy/beam"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)
        result = run(config, keep_model=True)
    header = fits.getheader(result.paths["cube"])
    assert header["BUNIT"] == "K"
    assert header["NOISEJY"] == pytest.approx(2e-3, rel=1e-12)
    frequency = result.cube.wcs.spectral.pixel_to_world(header["CRPIX3"] - 1).to(u.Hz)
    expected = (2 * u.mJy).to(u.K, u.brightness_temperature(frequency, beam_area=result.cube.beam.solid_angle))
    assert header["NOISERMS"] == pytest.approx(expected.value, rel=1e-9)
    assert "[K]" in header.comments["NOISERMS"]
    # The data agree: the central channel less its noise-free model (Jy/beam, put in K the same way).
    model_k = (result.model.data[8] * u.Jy).to(u.K, u.brightness_temperature(
        frequency, beam_area=result.cube.beam.solid_angle)).value
    noise = result.cube.data[8] - model_k
    assert noise.std() == pytest.approx(header["NOISERMS"], rel=0.3)   # 888 beam-correlated pixels

"""Job measurements: the integrated S/N noise formula, agreement with the run summary, the ECSV catalogue."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from pipeline.batch import write_catalogue
from pipeline.batch._catalogue import ChannelSums, measure_channels, noise_correlation, summarise_sums
from pipeline.batch._jobs import JobContext, _measure_result, pixels_per_beam
from pipeline.chain import plan_run, run
from pipeline.config import load_config
from pipeline.cube import Cube
from pipeline.geometry import GridSpec, make_cube_wcs
from pipeline.instrument import BeamSpec, add_thermal_noise


def _grid(n_chan):
    return GridSpec.from_channel_width(n_x=47, n_y=38, n_chan=n_chan, pixel_scale=6 * u.arcsec, ra=359.99 * u.deg,
                                       dec=20 * u.deg, projection="SIN", spectral_axis="FREQ",
                                       centre_frequency=1.41 * u.GHz, channel_width=10 * u.kHz)


def _mask(n_y, n_x, *, radius):
    y, x = np.mgrid[0:n_y, 0:n_x]
    return ((x - 20.3) / radius) ** 2 + ((y - 17.6) / (0.6 * radius)) ** 2 <= 1


@pytest.mark.parametrize("radius", [3.0, 12.0])
def test_masked_sum_variance_matches_the_noise_the_pipeline_adds(radius):
    # Var(sum of correlated values) = sum of their covariances; checked against 900 channels of the
    # pipeline's own beam-correlated noise (independent per channel).  The sample variance of N values
    # has a relative standard error sqrt(2 / (N - 1)) = 0.047 here; 4.5 of them is allowed.
    grid = _grid(900)
    beam = BeamSpec(major=30 * u.arcsec, minor=20 * u.arcsec, position_angle=35 * u.deg)
    silent = Cube(np.zeros(grid.array_shape), make_cube_wcs(grid), u.Jy / u.beam, beam=beam)
    noise = add_thermal_noise(silent, rms=2.0 * u.mJy / u.beam, seed=17).data
    mask = _mask(grid.n_y, grid.n_x, radius=radius)
    measured = np.var(noise[:, mask].sum(axis=1), ddof=1)
    model = np.broadcast_to(mask, grid.array_shape).astype(float)
    sums = measure_channels(noise, model, pixels_per_beam=1.0, velocity_kms=np.arange(900.0),
                            width_kms=np.ones(900), width_hz=np.ones(900), rms_jy=2e-3,
                            correlation=noise_correlation(beam, grid.pixel_scale), mask_level=0.5)
    assert sums.masked_variance[0] == pytest.approx(measured, rel=4.5 * np.sqrt(2 / 899))


def test_large_mask_variance_is_that_of_independent_areas_of_twice_the_beam():
    # For a mask much larger than the beam, sum rho over all pixels = Ω_corr / Ω_pix, with the noise
    # correlation a Gaussian of twice the beam covariance (convolution of two Gaussians), so
    # Ω_corr = 2 Ω_beam, Ω_beam = π θ_maj θ_min / (4 ln 2) (check-values BM-02).
    beam = BeamSpec(major=30 * u.arcsec, minor=20 * u.arcsec, position_angle=35 * u.deg)
    correlation = noise_correlation(beam, 6 * u.arcsec)
    omega_beam_pix = (np.pi * 30 * 20 / (4 * np.log(2))) / 36
    assert correlation.max() == pytest.approx(1.0, rel=1e-12)
    assert correlation.sum() == pytest.approx(2 * omega_beam_pix, rel=1e-3)


# The small config leaves a few per cent of its gas outside the field on purpose.
@pytest.mark.filterwarnings("ignore::pipeline.errors.ParticlesOutsideFieldWarning")
def test_measurements_of_a_run_match_its_summary_in_jy_and_in_kelvin(small_run_config, tmp_path):
    config = load_config(small_run_config(), overrides=["output.directory='" + str(tmp_path / "o") + "'"])
    result = run(config, write=False, keep_model=True)
    context = JobContext(base_text="", base_source="", base_dir=tmp_path, output_dir=tmp_path, mask_level=0.5,
                         detection_threshold=5.0)
    plan = plan_run(config)
    measured = _measure_result(result, plan, context)
    summary = result.summary
    assert measured["hi_mass_recovered_msun"] == pytest.approx(summary["hi_mass_recovered"].to_value(u.Msun),
                                                               rel=1e-10)
    assert measured["w50_kms"] == pytest.approx(summary["w50"].to_value(u.km / u.s), rel=1e-10)
    # The catalogue masks on the run's own noise-free model, whose peak the summary quotes.
    assert measured["peak_snr"] == pytest.approx(summary["peak_snr"], rel=1e-12)
    # Total flux against HI-06/HI-13 of check-values: with widths in radio velocity about nu_0,
    # M = K_M D^2 ∫S dv with no (1+z) factor; K_M = 2.34348e5 for A_10 = 2.8843e-15.
    assert measured["hi_mass_recovered_msun"] == pytest.approx(2.34348e5 * 10**2 * measured["total_flux_jy_kms"],
                                                               rel=1e-5)
    # The S/N in K output is the same as in Jy/beam: the conversion is undone channel by channel.
    kelvin = _measure_result(run(config.replace(["emission.unit='K'"]), write=False, keep_model=True),
                             plan_run(config.replace(["emission.unit='K'"])), context)
    # (to float32 round-off: the cube is float32 and K is undone on it in float32)
    assert kelvin["integrated_snr"] == pytest.approx(measured["integrated_snr"], rel=1e-6)


def test_integrated_snr_of_a_noise_free_model_scales_as_one_over_the_rms():
    grid = _grid(5)
    beam = BeamSpec(major=30 * u.arcsec, minor=30 * u.arcsec, position_angle=0 * u.deg)
    model = np.zeros(grid.array_shape)
    model[1:4] = 5e-3 * _mask(grid.n_y, grid.n_x, radius=8.0)
    correlation = noise_correlation(beam, grid.pixel_scale)
    ratios = []
    for rms in (1e-3, 2e-3):
        sums = measure_channels(model, model, pixels_per_beam=4.0, velocity_kms=np.arange(5.0),
                                width_kms=np.full(5, 2.0), width_hz=np.full(5, 1e4), rms_jy=rms,
                                correlation=correlation, mask_level=0.5)
        ratios.append(summarise_sums(sums, luminosity_distance=10 * u.Mpc, rms_jy=rms,
                                     detection_threshold=5.0)["integrated_snr"])
    assert ratios[0] == pytest.approx(2 * ratios[1], rel=1e-12)


def test_without_noise_there_is_no_snr_and_no_detection():
    sums = ChannelSums(velocity_kms=np.array([0.0, 1, 2]), width_kms=np.ones(3), width_hz=np.ones(3),
                       profile_jy=np.array([0.0, 1.0, 0.0]), masked_sum=np.zeros(3), masked_variance=np.zeros(3),
                       peak_model=1.0)
    numbers = summarise_sums(sums, luminosity_distance=1 * u.Mpc, rms_jy=None, detection_threshold=5.0)
    assert numbers["peak_snr"] is None and numbers["integrated_snr"] is None and numbers["detected"] is False
    assert numbers["total_flux_jy_kms"] == 1.0
    flat = ChannelSums.combine([sums, sums])
    assert flat.profile_jy.shape == (6,)
    empty = summarise_sums(ChannelSums(**{**flat.__dict__, "profile_jy": np.zeros(6)}), luminosity_distance=1 * u.Mpc,
                           rms_jy=1.0, detection_threshold=5.0)
    assert empty["w50_kms"] is None and empty["integrated_snr"] == 0.0 and not empty["detected"]


def _record(name, status, **measured):
    return {"name": name, "index": int(name[-1]), "status": status,
            "parameters": {"snapshot": "s", "instrument": "base", "inclination": 30.0, "position_angle": 0.0,
                           "distance": 10.0, "redshift": None},
            "measurements": measured or None}


def test_catalogue_is_ecsv_with_units_and_nan_for_failed_jobs(tmp_path):
    records = [_record("job0", "done", total_flux_jy_kms=1.5, hi_mass_recovered_msun=3.5e7, peak_snr=4.0,
                       integrated_snr=12.0, w50_kms=150.0, detected=True, luminosity_distance_mpc=10.0),
               _record("job1", "failed")]
    write_catalogue(records, tmp_path / "c.ecsv", plot_path=tmp_path / "c.png", detection_threshold=5.0)
    table = Table.read(tmp_path / "c.ecsv", format="ascii.ecsv")
    assert list(table["name"]) == ["job0", "job1"] and list(table["detected"]) == [True, False]
    assert table["total_flux"].unit == u.Jy * u.km / u.s and table["hi_mass_recovered"].unit == u.Msun
    assert np.isnan(table["integrated_snr"][1]) and table["integrated_snr"][0] == 12.0
    assert table.meta["detection_threshold"] == 5.0
    assert (tmp_path / "c.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_pixels_per_beam_matches_the_gaussian_beam_area():
    # check-values BM-02/BM-03: Ω_beam = π θ_maj θ_min / (4 ln 2); pixels per beam = Ω_beam / Ω_pix.
    grid = _grid(3)
    beam = BeamSpec(major=30 * u.arcsec, minor=20 * u.arcsec, position_angle=0 * u.deg)
    assert pixels_per_beam(make_cube_wcs(grid), beam) == pytest.approx(np.pi * 600 / (4 * np.log(2)) / 36, rel=1e-6)

"""A cube over the memory budget is rendered in channel slabs into one FITS file equal to the whole cube."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits

from pipeline.batch import estimate_jobs, load_batch, run_batch
from pipeline.batch._jobs import file_sha256
from pipeline.chain import plan_run, run
from pipeline.config import load_config
from pipeline.errors import ParticlesOutsideFieldWarning


def _peak(config, n_chan):
    return plan_run(config.replace([f"grid.n_chan={n_chan}", "run.memory_budget=1e9 GiB"])).peak_memory.to(u.MiB)


@pytest.fixture
def slab_batch(write_batch, small_run_config):
    """A one-job batch whose budget fits 6 of the 17 channels, and the job's run config."""
    path = write_batch("")
    base = load_config(small_run_config())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        budget = _peak(base, 6)
    text = path.read_text() + f'[sweep.keys.run]\nmemory_budget = ["{float(budget.value)!r} MiB"]\n'
    path.write_text(text)
    return path


def _whole_cube(batch, tmp_path):
    """The same job made by the single-process run path, with a budget that fits the whole cube."""
    config = batch.job_config(batch.jobs[0], extra=["run.memory_budget=1e9 GiB", f"output.directory='{tmp_path}'",
                                                    "output.name='whole'"])
    with pytest.warns(ParticlesOutsideFieldWarning):
        result = run(config)
    return fits.getdata(result.paths["cube"]), result


@pytest.mark.parametrize("unit", ["Jy/beam", "K"])
def test_slab_job_assembles_the_single_process_cube(slab_batch, tmp_path, fitsverify, monkeypatch, unit):
    from pipeline.batch import _slabs

    if unit == "K":  # the cube and moment-0 map in K; the column density from the same file back in Jy/beam
        slab_batch.write_text(slab_batch.read_text() + '[sweep.keys.emission]\nunit = ["K"]\n')
    batch = load_batch(slab_batch)
    (estimate,) = estimate_jobs(batch)
    assert estimate.n_slabs == 3 and estimate.error is None
    assert u.isclose(estimate.disk, (4 * 17 * 24 * 37 + 8 * 24 * 37) * u.byte)  # float32 cube and two float32 maps
    read_back = []

    def spy(path, n_chan, step):
        for chunk in chunks(path, n_chan, step):
            read_back.append(chunk.shape[0])
            yield chunk

    chunks = _slabs._cube_chunks
    monkeypatch.setattr(_slabs, "_cube_chunks", spy)
    result = run_batch(batch)
    (record,) = result.records
    assert record["status"] == "done" and record["measurements"]["n_slabs"] == 3
    assert set(record["outputs"]) == {"cube", "moment0", "column_density", "preview"}
    for output in record["outputs"].values():
        assert file_sha256(batch.output_dir / output["path"]) == output["sha256"]
    # The maps were summed from the file at most a slab of channels at a time (the smallest of the 3 slabs
    # of 17 channels holds 5), never the whole cube at once; a K cube is read twice (K map, Jy/beam map).
    assert sum(read_back) == 17 * (2 if unit == "K" else 1) and max(read_back) <= 5 and len(read_back) > 1
    slabbed_path = batch.output_dir / record["outputs"]["cube"]["path"]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with fits.open(slabbed_path, checksum=True) as slabbed:
            data = slabbed[0].data
            header = slabbed[0].header
    whole, whole_result = _whole_cube(batch, tmp_path)
    # Float32 of the same float64 values: slabs convolve and add noise channel by channel exactly as the
    # whole cube does, to round-off far below float32 resolution.
    np.testing.assert_allclose(data, whole, rtol=0, atol=1e-6 * np.abs(whole).max())
    for keyword in ("BUNIT", "BMAJ", "BMIN", "BPA", "NOISERMS", "CRVAL3", "CDELT3", "CTYPE1", "NAXIS3"):
        assert header[keyword] == fits.getheader(whole_result.paths["cube"])[keyword]
    summary = whole_result.summary
    assert record["measurements"]["hi_mass_recovered_msun"] == pytest.approx(
        summary["hi_mass_recovered"].to_value(u.Msun), rel=1e-6)
    assert record["measurements"]["w50_kms"] == pytest.approx(summary["w50"].to_value(u.km / u.s), rel=1e-6)
    assert record["measurements"]["peak_snr"] == pytest.approx(summary["peak_snr"], rel=1e-9)
    n_warnings, n_errors, report = fitsverify(slabbed_path)  # HEASARC fitsverify (check-values FW-10)
    assert (n_warnings, n_errors) == (0, 0), report
    for kind in ("moment0", "column_density"):
        with fits.open(batch.output_dir / record["outputs"][kind]["path"]) as slabbed_map, \
                fits.open(whole_result.paths[kind]) as whole_map:
            # The slab job sums its maps from the float32 values stored in its file; the whole-cube job from
            # the cube it holds. The two cubes agree to float32 round-off (above), so the maps agree to that,
            # relative to their peak, and carry the same header.
            expected = whole_map[0].data
            np.testing.assert_allclose(slabbed_map[0].data, expected, rtol=0, atol=1e-6 * np.abs(expected).max())
            for keyword in ("BUNIT", "BMAJ", "BMIN", "BPA", "NAXIS1", "NAXIS2", "CTYPE1", "CRVAL1", "CDELT2"):
                assert slabbed_map[0].header[keyword] == whole_map[0].header[keyword], keyword
    preview = batch.output_dir / record["outputs"]["preview"]["path"]
    assert preview.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, section 5.2)


@pytest.mark.dask
def test_slabs_on_two_workers_equal_slabs_in_process(slab_batch, tmp_path):
    from distributed import Client, LocalCluster

    here = run_batch(load_batch(slab_batch, output_dir=tmp_path / "here"))
    batch = load_batch(slab_batch, output_dir=tmp_path / "dask")
    with LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=":0") as cluster, Client(cluster) as client:
        on_dask = run_batch(batch, client=client)
    assert on_dask.records[0]["status"] == "done", on_dask.records[0]["error"]
    path = on_dask.records[0]["outputs"]["cube"]["path"]
    assert fits.getdata(tmp_path / "dask" / path).tobytes() == fits.getdata(tmp_path / "here" / path).tobytes()
    # The slab count may differ (the plan counts per-thread FFT planes, and workers run one thread
    # each); the numbers must not.
    dask_numbers, here_numbers = (dict(result.records[0]["measurements"]) for result in (on_dask, here))
    assert min(dask_numbers.pop("n_slabs"), here_numbers.pop("n_slabs")) >= 2
    assert dask_numbers == here_numbers


def test_a_budget_too_small_for_one_channel_fails_the_job_with_the_reason(write_batch):
    path = write_batch('[sweep.keys.run]\nmemory_budget = ["1 MiB"]\n')
    batch = load_batch(path)
    (record,) = run_batch(batch).records
    assert record["status"] == "failed"
    # The budget came from the batch file, so the message names the batch key that carried it.
    reason = f"{path}:sweep.keys.run.memory_budget[0]: even one channel of the 17 x 24 x 37 cube needs about"
    assert record["error"].startswith(f"MemoryBudgetError: {reason}"), record["error"]
    (estimate,) = estimate_jobs(batch)
    assert reason in estimate.error


def test_a_slab_job_whose_gas_misses_the_band_fails_and_leaves_no_partial_file(slab_batch):
    text = slab_batch.read_text() + ('[sweep.instruments.shifted.geometry]\nframe = "explicit"\n'
                                     'frame_velocity = ["0 km/s", "0 km/s", "5000 km/s"]\n')
    slab_batch.write_text(text)
    batch = load_batch(slab_batch)
    (record,) = run_batch(batch).records
    assert record["status"] == "failed" and "EmptyFieldError" in record["error"]
    assert "no selected gas falls inside the cube" in record["error"]
    assert [p.name for p in batch.output_dir.iterdir() if p.name.startswith(".partial-")] == []

"""The demo run end to end: files written atomically, fitsverify clean, HI mass recovered."""

import shutil
import subprocess

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits

from pipeline.chain import run
from pipeline.cli import DEMO_CONFIG
from pipeline.config import load_config
from pipeline.io import read_cube
from pipeline.scenario import make_disc_galaxy


@pytest.fixture(scope="module")
def demo_snapshot(tmp_path_factory):
    return make_disc_galaxy(tmp_path_factory.mktemp("demo") / "disc_galaxy.h5")


def _demo_config(snapshot, folder, *extra):
    return load_config(DEMO_CONFIG, overrides=[f"snapshot.path='{snapshot}'", f"output.directory='{folder}'",
                                               *extra])


@pytest.mark.slow
def test_demo_recovers_the_snapshot_hi_mass_within_one_percent_without_noise(demo_snapshot, tmp_path):
    # Issue requirement: recovered HI mass within 1% of the input when noise is off. The input is
    # the HI of every particle in the file: M_HI = X f_n m (check-values H2-08, X = 0.76 default).
    import h5py

    with h5py.File(demo_snapshot) as handle:
        mass = handle["gas/mass"][:]
        neutral = handle["gas/neutral_fraction"][:]
    total_hi = 0.76 * np.sum(mass * neutral)
    result = run(_demo_config(demo_snapshot, tmp_path, "noise.mode='none'"), write=False)
    assert result.summary["hi_mass_selected"].to_value(u.Msun) == pytest.approx(total_hi, rel=1e-9)
    assert result.summary["hi_mass_recovered"].to_value(u.Msun) == pytest.approx(total_hi, rel=0.01)


@pytest.mark.slow
@pytest.mark.fitsverify
def test_demo_outputs_pass_fitsverify_and_read_back(demo_snapshot, tmp_path):
    if shutil.which("fitsverify") is None:
        pytest.skip("fitsverify is not installed (apt-get install fitsverify)")
    result = run(_demo_config(demo_snapshot, tmp_path))
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in result.paths.values())
    for kind, path in result.paths.items():
        if path.suffix != ".fits":
            assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
            continue
        report = subprocess.run(["fitsverify", str(path)], capture_output=True, text=True)
        # fitsverify (HEASARC's FITS verifier) ends its report with this line when the file is clean.
        assert "Verification found 0 warning(s) and 0 error(s)" in report.stdout, (kind, report.stdout)
    cube = read_cube(result.paths["cube"])
    assert cube.unit == u.Jy / u.beam
    assert cube.data.shape == (128, 128, 128)
    with fits.open(result.paths["cube"]) as hdul:
        header = hdul[0].header
        assert header["BMAJ"] == pytest.approx(24 / 3600)
        assert header["BPA"] == pytest.approx(30.0)
        assert header["RESTFRQ"] == pytest.approx(1_420_405_751.768)

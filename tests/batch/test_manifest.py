"""Manifest and resume: finished jobs are skipped only when their outputs verify; other configs are refused."""

import json

import pytest

from pipeline.batch import MANIFEST_NAME, load_batch, open_manifest, run_batch
from pipeline.batch._jobs import file_sha256
from pipeline.errors import OutputError

BODY = """
name = "g_i{inclination:02.0f}"
[sweep.views]
pairs = [["20 deg", "0 deg"], ["50 deg", "0 deg"], ["80 deg", "0 deg"]]
"""


def _manifest(batch):
    return json.loads((batch.output_dir / MANIFEST_NAME).read_text())


def test_manifest_records_every_job_with_verified_outputs(write_batch):
    batch = load_batch(write_batch(BODY))
    run_batch(batch)
    document = _manifest(batch)
    assert document["batch_digest"] == batch.digest and list(document["jobs"]) == ["g_i20", "g_i50", "g_i80"]
    record = document["jobs"]["g_i50"]
    assert record["status"] == "done" and record["error"] is None and record["wall_time_s"] > 0
    assert record["parameters"]["inclination"] == 50.0 and record["peak_memory_mib"] > 0
    assert set(record["outputs"]) == {"cube", "moment0", "column_density", "preview"}
    for output in record["outputs"].values():
        assert file_sha256(batch.output_dir / output["path"]) == output["sha256"]


def test_resume_skips_verified_jobs_and_redoes_corrupted_or_missing_ones(write_batch):
    batch = load_batch(write_batch(BODY))
    run_batch(batch)
    cube = batch.output_dir / "g_i20.fits"
    data = bytearray(cube.read_bytes())
    data[-100] ^= 0xFF
    cube.write_bytes(bytes(data))
    (batch.output_dir / "g_i80_mom0.fits").unlink()
    kept = (batch.output_dir / "g_i50.fits").read_bytes()
    result = run_batch(batch, resume=True)
    assert result.skipped == ("g_i50",) and result.failed == ()
    assert (batch.output_dir / "g_i50.fits").read_bytes() == kept
    for record in _manifest(batch)["jobs"].values():
        for output in record["outputs"].values():
            assert file_sha256(batch.output_dir / output["path"]) == output["sha256"]


def test_a_manifest_from_another_batch_config_is_refused_unless_forced(write_batch):
    first = load_batch(write_batch(BODY))
    run_batch(first)
    changed = load_batch(write_batch(BODY.replace('"80 deg"', '"85 deg"')))
    with pytest.raises(OutputError, match=r"manifest.json: written by another batch config .*pass --force to "
                                          r"resume with this config"):
        run_batch(changed, resume=True)
    result = run_batch(changed, resume=True, force=True)
    assert result.skipped == ("g_i20", "g_i50")
    assert [record["name"] for record in result.records] == ["g_i20", "g_i50", "g_i85"]
    assert _manifest(changed)["batch_digest"] == changed.digest


def test_a_second_run_without_resume_is_refused_and_force_starts_again(write_batch):
    batch = load_batch(write_batch(BODY))
    run_batch(batch)
    with pytest.raises(OutputError, match=r"a batch already ran in this folder; pass --resume to continue it"):
        run_batch(batch)
    assert run_batch(batch, force=True).skipped == ()


def test_outputs_no_manifest_accounts_for_are_not_overwritten(write_batch):
    batch = load_batch(write_batch(BODY))
    batch.output_dir.mkdir()
    (batch.output_dir / "g_i50.fits").write_bytes(b"someone else's cube")
    with pytest.raises(OutputError, match=r"g_i50.fits: exists and no manifest says this batch wrote it"):
        run_batch(batch)


@pytest.mark.parametrize("text", ["{not json", '{"kind": "something else", "jobs": {}}'])
def test_an_unreadable_manifest_is_refused(write_batch, text):
    batch = load_batch(write_batch(BODY))
    batch.output_dir.mkdir()
    (batch.output_dir / MANIFEST_NAME).write_text(text)
    with pytest.raises(OutputError, match=r"manifest.json: not a (readable )?(cubewright )?batch manifest"):
        open_manifest(batch, resume=True)


def _plant_stale_partials(folder, elsewhere):
    """Write the temporaries a killed run leaves (named by pipeline.io itself) and look-alikes that must stay."""
    from astropy.wcs import WCS

    import astropy.units as u

    from pipeline.io import atomic_output, create_fits_cube

    wcs = WCS(naxis=3)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN", "FREQ"]
    sub = folder / "views"
    stale = [create_fits_cube(sub / "g_i20.fits", array_shape=(2, 3, 4), wcs=wcs, unit=u.Jy / u.beam,
                              overwrite=True)]
    with atomic_output(elsewhere / "manifest.json") as partial:
        partial.write_text("{}")
        stale.append(folder / partial.name)
    stale[-1].write_text('{"half": ')
    target = elsewhere / "kept.fits"
    target.write_text("someone's file")
    (folder / ".partial-0a1b.link.fits").symlink_to(target)
    (folder / ".partial-0a1b.folder.fits").mkdir()
    kept = [folder / "partial-0a1b.g_i20.fits", folder / ".partial-notes.txt", sub / ".partial-0a1b",
            sub / "g_i20.partial-0a1b.fits", elsewhere / ".partial-0a1b.g_i20.fits"]
    for path in kept:
        path.write_text("not ours")
    return stale, kept + [target, folder / ".partial-0a1b.link.fits", folder / ".partial-0a1b.folder.fits"]


@pytest.mark.parametrize("flags", [{"resume": True}, {"force": True}])
def test_resume_and_force_delete_stale_partials_in_the_output_tree_and_nothing_else(write_batch, tmp_path, flags):
    from pipeline.errors import CubewrightWarning

    # One job in a sub-folder, cube only (moment maps and previews take most of a small job's time).
    batch = load_batch(write_batch('name = "views/g_i{inclination:02.0f}"\n[sweep.views]\npairs = [["20 deg", "0 deg"]]\n',
                                   edit_base={'name = "small"': 'name = "small"\nmoment0 = false\npreview = false'}))
    run_batch(batch)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    stale, kept = _plant_stale_partials(batch.output_dir, elsewhere)
    with pytest.raises(OutputError, match="a batch already ran in this folder"):
        run_batch(batch)  # refused before anything is touched
    assert all(path.exists() for path in stale)
    with pytest.warns(CubewrightWarning, match=r"batch_out: removed 2 stale partial file\(s\) \(\.partial-\*\) left "
                                                r"by an interrupted run$"):
        result = run_batch(batch, **flags)
    assert not any(path.exists() for path in stale)
    assert all(path.exists() or path.is_symlink() for path in kept)
    assert (elsewhere / "kept.fits").read_text() == "someone's file"
    assert result.failed == () and result.skipped == (("views/g_i20",) if "resume" in flags else ())
    for record in _manifest(batch)["jobs"].values():
        for output in record["outputs"].values():
            assert file_sha256(batch.output_dir / output["path"]) == output["sha256"]


def test_a_stale_partial_that_cannot_be_removed_is_a_one_line_output_error(tmp_path, monkeypatch):
    from pathlib import Path

    from pipeline.batch._manifest import remove_stale_partials

    stale = tmp_path / ".partial-0a1b2c.cube.fits"
    stale.write_text("half")

    def refuse(path, missing_ok=False):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Path, "unlink", refuse)
    with pytest.raises(OutputError, match=r"\.partial-0a1b2c\.cube\.fits: cannot remove this stale partial file left "
                                          r"by an interrupted run \(Permission denied\); remove it by hand"):
        remove_stale_partials(tmp_path)

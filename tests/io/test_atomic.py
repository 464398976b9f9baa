"""atomic_output and the folder checks: nothing half-written, nothing clobbered."""

import os
import shutil

import pytest

from pipeline.errors import OutputError
from pipeline.io import atomic_output, check_free_space, check_writable


def test_atomic_output_renames_partial_to_target_and_leaves_nothing_else(tmp_path):
    target = tmp_path / "cube.fits"
    with atomic_output(target) as partial:
        assert not partial.exists()
        partial.write_bytes(b"payload")
        assert not target.exists()
    assert target.read_bytes() == b"payload"
    assert [path.name for path in tmp_path.iterdir()] == ["cube.fits"]


def test_partial_is_hidden_in_the_same_folder_and_keeps_the_final_suffix(tmp_path):
    target = tmp_path / "preview.png"
    with atomic_output(target) as partial:
        partial.write_bytes(b"x")
        assert partial.parent == tmp_path
        assert partial.name.startswith(".partial-")
        assert partial.name.endswith(".preview.png")


def test_exception_inside_leaves_no_file_and_no_partial(tmp_path):
    target = tmp_path / "cube.fits"
    with pytest.raises(RuntimeError, match="writer failed"):
        with atomic_output(target) as partial:
            partial.write_bytes(b"half")
            raise RuntimeError("writer failed")
    assert list(tmp_path.iterdir()) == []


def test_interrupt_inside_also_removes_the_partial(tmp_path):
    with pytest.raises(KeyboardInterrupt):
        with atomic_output(tmp_path / "cube.fits") as partial:
            partial.write_bytes(b"half")
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []


def test_existing_file_is_refused_without_overwrite_and_left_unchanged(tmp_path):
    target = tmp_path / "cube.fits"
    target.write_bytes(b"original")
    with pytest.raises(OutputError, match=r"cube\.fits: exists; pass --overwrite to replace it"):
        with atomic_output(target):
            pytest.fail("the body must not run")
    assert target.read_bytes() == b"original"
    assert [path.name for path in tmp_path.iterdir()] == ["cube.fits"]


def test_existing_file_is_replaced_with_overwrite(tmp_path):
    target = tmp_path / "cube.fits"
    target.write_bytes(b"original")
    with atomic_output(target, overwrite=True) as partial:
        partial.write_bytes(b"new")
    assert target.read_bytes() == b"new"


def test_failed_overwrite_keeps_the_old_file(tmp_path):
    target = tmp_path / "cube.fits"
    target.write_bytes(b"original")
    with pytest.raises(RuntimeError):
        with atomic_output(target, overwrite=True) as partial:
            partial.write_bytes(b"half")
            raise RuntimeError("writer failed")
    assert target.read_bytes() == b"original"
    assert [path.name for path in tmp_path.iterdir()] == ["cube.fits"]


def test_target_that_is_a_folder_is_refused(tmp_path):
    with pytest.raises(OutputError, match="is a folder; give a file name"):
        with atomic_output(tmp_path, overwrite=True):
            pytest.fail("the body must not run")


def test_missing_output_folders_are_created(tmp_path):
    target = tmp_path / "runs" / "a" / "cube.fits"
    with atomic_output(target) as partial:
        partial.write_bytes(b"x")
    assert target.read_bytes() == b"x"


def test_folder_below_a_regular_file_is_not_writable(tmp_path):
    # Works as root too: no permission bit can make a regular file hold files.
    blocker = tmp_path / "blocker"
    blocker.write_text("a file, not a folder")
    with pytest.raises(OutputError, match=r"blocker/out: not writable \(Not a directory\)"):
        with atomic_output(blocker / "out" / "cube.fits"):
            pytest.fail("the body must not run")
    assert blocker.read_text() == "a file, not a folder"


def test_check_writable_refuses_a_regular_file(tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("")
    with pytest.raises(OutputError, match=r"blocker: not writable \(exists and is not a folder\)"):
        check_writable(blocker)


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into a read-only folder")
def test_check_writable_refuses_a_read_only_folder(tmp_path):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(OutputError, match=r"locked: not writable \(permission denied\)"):
            check_writable(folder)
    finally:
        folder.chmod(0o700)


def test_check_writable_refuses_a_folder_the_os_denies(tmp_path, monkeypatch):
    # As root no permission bit denies writing, so stand in for the operating system's answer.
    import pipeline.io._atomic as atomic

    monkeypatch.setattr(atomic.os, "access", lambda folder, mode: False)
    with pytest.raises(OutputError, match=r"not writable \(permission denied\)"):
        check_writable(tmp_path)


def test_check_writable_accepts_an_existing_folder(tmp_path):
    check_writable(tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_check_free_space_refuses_more_than_is_available(tmp_path):
    available = shutil.disk_usage(tmp_path).free
    needed = 2 * available + 1
    with pytest.raises(OutputError, match=rf"not enough free space; need {needed} bytes, \d+ available"):
        check_free_space(tmp_path, needed)


def test_check_free_space_accepts_a_small_file(tmp_path):
    check_free_space(tmp_path, 2880)

"""allocate_accumulator and accumulator: in RAM below the limit, memory-mapped above it, files cleaned up."""

import gc
import os

import astropy.units as u
import numpy as np
import pytest

from pipeline.errors import OutputError
from pipeline.grid import accumulator, allocate_accumulator


def _files(folder):
    return sorted(os.listdir(folder))


@pytest.mark.parametrize("limit", [8 * 3 * 4 * 5, 480 * u.byte, 1 * u.GiB])
def test_cube_within_the_limit_stays_in_memory(limit, tmp_path):
    # 8 bytes per voxel: a (3, 4, 5) cube needs 480 bytes, so 480 bytes is enough.
    cube = allocate_accumulator((3, 4, 5), in_memory_limit=limit, directory=tmp_path)
    assert type(cube) is np.ndarray
    assert cube.shape == (3, 4, 5) and cube.dtype == np.float64 and not cube.any()
    assert _files(tmp_path) == []


def test_cube_over_the_limit_is_memory_mapped_and_zeroed(tmp_path):
    cube = allocate_accumulator((3, 4, 5), in_memory_limit=479 * u.byte, directory=tmp_path)
    assert isinstance(cube, np.memmap)
    assert cube.shape == (3, 4, 5) and cube.dtype == np.float64 and not cube.any()
    assert cube.flags.c_contiguous and cube.flags.writeable
    (name,) = _files(tmp_path)
    assert name.startswith("cubewright-accumulator-") and name.endswith(".float64")
    assert os.path.getsize(tmp_path / name) == 480
    cube[2, 3, 4] = 7.0
    cube.flush()
    assert np.fromfile(tmp_path / name)[-1] == 7.0
    del cube
    gc.collect()
    assert _files(tmp_path) == []


def test_context_manager_deletes_the_file_on_exit(tmp_path):
    with accumulator((2, 3, 4), in_memory_limit=0, directory=tmp_path) as cube:
        cube += 1.0
        assert len(_files(tmp_path)) == 1
        kept = cube
    assert _files(tmp_path) == []
    # On POSIX the mapping outlives the deleted file until released.
    assert float(kept.sum()) == 24.0


def test_context_manager_deletes_the_file_when_the_body_raises(tmp_path):
    with pytest.raises(RuntimeError, match="inside"):
        with accumulator((2, 3, 4), in_memory_limit=0, directory=tmp_path):
            raise RuntimeError("inside")
    assert _files(tmp_path) == []


def test_context_manager_in_memory(tmp_path):
    with accumulator((2, 3, 4), in_memory_limit=1 * u.MiB, directory=tmp_path) as cube:
        assert type(cube) is np.ndarray and not cube.any()


def test_missing_directory_is_an_output_error(tmp_path):
    missing = tmp_path / "absent"
    with pytest.raises(OutputError, match=f"{missing}: cannot create the memory-mapped accumulator "
                                          "there"):
        allocate_accumulator((2, 3, 4), in_memory_limit=0, directory=missing)


@pytest.mark.parametrize(("shape", "limit", "message"), [
    ((2, 3), 0, r"'array_shape' must be three positive integers \(n_chan, n_y, n_x\); got \(2, 3\)"),
    ((2, 0, 3), 0, r"'array_shape' must be three positive integers"),
    ((2, 3.0, 3), 0, r"'array_shape' must be three positive integers"),
    ("234", 0, r"'array_shape' must be three positive integers"),
    ((2, 3, 4), 2 * u.m, r"'in_memory_limit' must be a scalar amount of memory, e.g. '4 GiB'"),
    ((2, 3, 4), [1, 2] * u.byte, r"'in_memory_limit' must be a scalar amount of memory"),
    ((2, 3, 4), -1 * u.byte, r"'in_memory_limit' must be finite and >= 0"),
    ((2, 3, 4), np.inf * u.byte, r"'in_memory_limit' must be finite and >= 0"),
    ((2, 3, 4), -5, r"'in_memory_limit' must be a Quantity of memory \(e.g. 4 \* u.GiB\) or an integer"),
    ((2, 3, 4), 1.5, r"'in_memory_limit' must be a Quantity of memory"),
])
def test_bad_arguments_are_refused(shape, limit, message, tmp_path):
    with pytest.raises(ValueError, match=message):
        allocate_accumulator(shape, in_memory_limit=limit, directory=tmp_path)
    assert _files(tmp_path) == []


def test_failed_mapping_is_an_output_error_and_leaves_no_file(monkeypatch, tmp_path):
    # A full disk shows up when the file is extended; simulate it.
    def no_space(handle, size):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "ftruncate", no_space)
    with pytest.raises(OutputError, match=r"cannot map 192 bytes for the accumulator \(No space left"):
        allocate_accumulator((2, 3, 4), in_memory_limit=0, directory=tmp_path)
    assert _files(tmp_path) == []

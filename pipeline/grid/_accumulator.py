"""The float64 cube the deposit accumulates into: in RAM, or memory-mapped above a size limit."""

import contextlib
import numbers
import os
import tempfile
import weakref
from pathlib import Path

import astropy.units as u
import numpy as np

from pipeline.errors import OutputError

__all__ = ["allocate_accumulator", "accumulator"]

_FILE_PREFIX = "cubewright-accumulator-"


def _as_byte_count(value) -> int:
    """Return a memory limit given as an integer number of bytes or an information Quantity, in bytes."""
    if isinstance(value, u.Quantity):
        if not value.unit.is_equivalent(u.byte) or not value.isscalar:
            raise ValueError(f"'in_memory_limit' must be a scalar amount of memory, e.g. '4 GiB'; "
                             f"got {value!r}")
        value = value.to_value(u.byte)
        if not np.isfinite(value) or value < 0:
            raise ValueError(f"'in_memory_limit' must be finite and >= 0; got {value!r} bytes")
        return int(value)
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 0:
        raise ValueError(f"'in_memory_limit' must be a Quantity of memory (e.g. 4 * u.GiB) or an "
                         f"integer number of bytes >= 0; got {value!r}")
    return int(value)


def _as_array_shape(array_shape) -> tuple[int, int, int]:
    """Return ``(n_chan, n_y, n_x)`` after checking three positive integers."""
    shape = tuple(array_shape) if isinstance(array_shape, (tuple, list)) else ()
    if len(shape) != 3 or not all(isinstance(n, numbers.Integral) and not isinstance(n, bool) and n > 0
                                  for n in shape):
        raise ValueError(f"'array_shape' must be three positive integers (n_chan, n_y, n_x); "
                         f"got {array_shape!r}")
    return tuple(int(n) for n in shape)


def _remove(path: str) -> None:
    """Delete an accumulator file if it is still there."""
    with contextlib.suppress(FileNotFoundError):
        os.unlink(path)


def _allocate(array_shape, in_memory_limit, directory, dtype):
    """Return ``(array, finalizer)``; the finalizer (None in RAM) deletes the backing file when called."""
    shape = _as_array_shape(array_shape)
    limit = _as_byte_count(in_memory_limit)
    dtype = np.dtype(dtype)
    if dtype not in (np.float64, np.float32):
        raise ValueError(f"'dtype' must be float64 or float32; got {dtype}")
    n_bytes = dtype.itemsize * shape[0] * shape[1] * shape[2]
    if n_bytes <= limit:
        return np.zeros(shape, dtype=dtype), None
    folder = Path(directory)
    try:
        handle, path = tempfile.mkstemp(prefix=_FILE_PREFIX, suffix=f".{dtype.name}", dir=folder)
    except OSError as err:
        raise OutputError(f"{folder}: cannot create the memory-mapped accumulator there "
                          f"({err.strerror}); set 'directory' to a writable folder") from err
    try:
        # A file extended by truncate reads as zeros and takes disk space only where written.
        os.ftruncate(handle, n_bytes)
        array = np.memmap(path, dtype=dtype, mode="r+", shape=shape)
    except OSError as err:
        _remove(path)
        raise OutputError(f"{path}: cannot map {n_bytes} bytes for the accumulator "
                          f"({err.strerror})") from err
    finally:
        os.close(handle)
    return array, weakref.finalize(array, _remove, path)


def allocate_accumulator(array_shape, *, in_memory_limit, directory, dtype=np.float64) -> np.ndarray:
    """Return a zeroed cube, in RAM if it fits under a limit, else memory-mapped from a file.

    Parameters
    ----------
    array_shape : tuple of int
        ``(n_chan, n_y, n_x)``.
    in_memory_limit : `~astropy.units.Quantity` ['information'] or int
        Largest cube kept in RAM (an integer is a number of bytes); the cube
        needs ``itemsize n_chan n_y n_x`` bytes.
    directory : path-like
        Folder for the temporary file of a memory-mapped cube.
    dtype : {numpy.float64, numpy.float32}
        float64 to accumulate a deposit in; float32 for a cube after the beam.

    Returns
    -------
    numpy.ndarray or numpy.memmap, shape ``array_shape``
        Zeros.  A memory-mapped cube lives in a file named
        ``cubewright-accumulator-*.float64`` (or ``.float32``) in ``directory``, deleted when
        the array is garbage-collected or the interpreter exits; use
        :func:`accumulator` to delete it at a known point.

    Raises
    ------
    ValueError
        If ``array_shape``, ``in_memory_limit`` or ``dtype`` is malformed.
    pipeline.errors.OutputError
        If the file cannot be created or mapped in ``directory``.

    Examples
    --------
    >>> import astropy.units as u
    >>> cube = allocate_accumulator((4, 5, 6), in_memory_limit=1 * u.MiB, directory=".")
    >>> type(cube).__name__, cube.dtype, float(cube.sum())
    ('ndarray', dtype('float64'), 0.0)
    """
    return _allocate(array_shape, in_memory_limit, directory, dtype)[0]


@contextlib.contextmanager
def accumulator(array_shape, *, in_memory_limit, directory, dtype=np.float64):
    """Yield a zeroed cube (see :func:`allocate_accumulator`); delete its file, if any, on exit.

    Parameters
    ----------
    array_shape, in_memory_limit, directory, dtype
        As for :func:`allocate_accumulator`.

    Yields
    ------
    numpy.ndarray or numpy.memmap, shape ``array_shape``
        Zeros to accumulate into.  Copy out what you need before the block
        ends: a memory-mapped cube's file is deleted on exit (on POSIX systems
        arrays still referring to it stay readable until released).

    Raises
    ------
    ValueError, pipeline.errors.OutputError
        As for :func:`allocate_accumulator`.

    Examples
    --------
    >>> import astropy.units as u, tempfile, os
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     with accumulator((2, 3, 4), in_memory_limit=0 * u.byte, directory=folder) as cube:
    ...         cube[0, 1, 2] += 1.5
    ...         total, on_disk = float(cube.sum()), len(os.listdir(folder))
    ...     after = len(os.listdir(folder))
    >>> type(cube).__name__, total, on_disk, after
    ('memmap', 1.5, 1, 0)
    """
    array, finalizer = _allocate(array_shape, in_memory_limit, directory, dtype)
    try:
        yield array
    finally:
        if finalizer is not None:
            finalizer()

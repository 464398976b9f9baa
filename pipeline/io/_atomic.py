"""Write-then-rename output files, and the folder checks made before writing."""

import contextlib
import os
import pathlib
import secrets
import shutil

from pipeline.errors import OutputError

__all__ = ["atomic_output", "check_writable", "check_free_space"]

#: Start of the hidden name of a file being written; the final name follows it.
PARTIAL_PREFIX = ".partial-"


def check_writable(folder):
    """Make sure ``folder`` exists (creating it if needed) and can take new files.

    Parameters
    ----------
    folder : str or os.PathLike
        Output folder.

    Raises
    ------
    pipeline.errors.OutputError
        If the folder cannot be created, is not a folder, or denies writing.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as scratch:
    ...     check_writable(pathlib.Path(scratch) / "new" / "folder")
    """
    folder = pathlib.Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError as err:
        raise OutputError(f"{folder}: not writable (exists and is not a folder)") from err
    except OSError as err:
        raise OutputError(f"{folder}: not writable ({err.strerror})") from err
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{folder}: not writable (permission denied)")


def check_free_space(folder, n_bytes):
    """Make sure the file system holding ``folder`` has ``n_bytes`` free.

    Parameters
    ----------
    folder : str or os.PathLike
        An existing folder on the target file system.
    n_bytes : int
        Bytes about to be written.

    Raises
    ------
    pipeline.errors.OutputError
        If fewer than ``n_bytes`` bytes are available.
    """
    available = shutil.disk_usage(folder).free
    if available < n_bytes:
        raise OutputError(f"{folder}: not enough free space; need {int(n_bytes)} bytes, "
                          f"{available} available")


@contextlib.contextmanager
def atomic_output(path, *, overwrite=False):
    """Yield a temporary path beside ``path`` and rename it to ``path`` on success.

    The temporary file is hidden and named ``.partial-<random>.<final name>``,
    so it ends in the final suffix (writers that pick a format from the suffix
    keep working).  On any exception it is removed and ``path`` is untouched.

    Parameters
    ----------
    path : str or os.PathLike
        Final file name.
    overwrite : bool
        Replace ``path`` if it exists.

    Yields
    ------
    pathlib.Path
        Where to write; the file does not exist yet.

    Raises
    ------
    pipeline.errors.OutputError
        If ``path`` exists and ``overwrite`` is false, or its folder is not
        writable.  Both are checked before anything is written.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as scratch:
    ...     target = pathlib.Path(scratch) / "notes.txt"
    ...     with atomic_output(target) as partial:
    ...         _ = partial.write_text("done")
    ...     print(target.read_text(), sorted(p.name for p in target.parent.iterdir()))
    done ['notes.txt']
    """
    path = pathlib.Path(path)
    if path.is_dir():
        raise OutputError(f"{path}: is a folder; give a file name")
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: exists; pass --overwrite to replace it")
    check_writable(path.parent)
    partial = path.with_name(f"{PARTIAL_PREFIX}{secrets.token_hex(6)}.{path.name}")
    try:
        yield partial
        os.replace(partial, path)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise

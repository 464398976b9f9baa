"""The manifest of a batch: one record per job, rewritten atomically after each job; resume checks.

``manifest.json`` in the output folder holds::

    {"kind": "cubewright batch manifest", "version": 1,
     "batch_config": "/abs/batch.toml", "batch_digest": "<sha256>",
     "jobs": {"<name>": {"name", "index", "job_digest", "parameters", "status",
                         "outputs": {"cube": {"path", "sha256"}, ...},
                         "wall_time_s", "peak_memory_mib", "error", "warnings", "measurements"}}}

A job counts as complete when its record says ``done``, its job digest equals
the current job's, and every output exists with the recorded SHA-256.

A batch killed outright (SIGKILL, a node lost) can leave the hidden temporaries
that outputs are written to before their rename; `remove_stale_partials`
clears them when the batch is resumed or forced.
"""

import json
import os
import re
from pathlib import Path

from pipeline.errors import OutputError
from pipeline.io import atomic_output, check_writable

from ._jobs import file_sha256

__all__ = ["Manifest", "MANIFEST_NAME", "open_manifest", "remove_stale_partials"]

MANIFEST_NAME = "manifest.json"
_KIND = "cubewright batch manifest"
_VERSION = 1
# The name pipeline.io gives a file while it is written: ".partial-<hex>.<final name>"
# (its PARTIAL_PREFIX, a random hex token, the final name); a test keeps the two in step.
_PARTIAL_NAME = re.compile(r"\.partial-[0-9a-f]+\..+", re.DOTALL)


class Manifest:
    """The records of a batch's jobs, kept in a JSON file in the output folder.

    Parameters
    ----------
    path : pathlib.Path
        The manifest file.
    batch : BatchSpec
        The batch it records.
    records : dict of str to dict, optional
        Records kept from an earlier run (resume).
    """

    def __init__(self, path, batch, *, records=None):
        self.path = Path(path)
        self.batch = batch
        self.records = dict(records or {})

    def is_complete(self, job) -> bool:
        """Return True if ``job`` finished before with these settings and its outputs verify."""
        record = self.records.get(job.name)
        if record is None or record.get("status") != "done" or record.get("job_digest") != job.digest:
            return False
        for output in record.get("outputs", {}).values():
            path = self.batch.output_dir / output["path"]
            if not path.is_file() or file_sha256(path) != output["sha256"]:
                return False
        return bool(record.get("outputs"))

    def update(self, record):
        """Store ``record`` and rewrite the file atomically."""
        self.records[record["name"]] = record
        self.write()

    def ordered_records(self):
        """Return the records of the batch's jobs in job order (jobs never run are left out)."""
        return [self.records[job.name] for job in self.batch.jobs if job.name in self.records]

    def write(self):
        """Write the manifest (atomically: a reader sees the old file or the new one)."""
        document = {"kind": _KIND, "version": _VERSION, "batch_config": os.fspath(Path(self.batch.source).resolve()),
                    "batch_digest": self.batch.digest, "jobs": {name: self.records[name] for name in
                                                                (job.name for job in self.batch.jobs)
                                                                if name in self.records}}
        text = json.dumps(document, indent=1, allow_nan=False)
        with atomic_output(self.path, overwrite=True) as partial:
            partial.write_text(text + "\n")


def _read(path):
    try:
        document = json.loads(path.read_text())
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise OutputError(f"{path}: not a readable batch manifest ({err}); move it away or pass --force "
                          "to start the batch again") from err
    if not isinstance(document, dict) or document.get("kind") != _KIND or not isinstance(document.get("jobs"), dict):
        raise OutputError(f"{path}: not a cubewright batch manifest; move it away or pass --force to start again")
    return document


def open_manifest(batch, *, resume=False, force=False) -> Manifest:
    """Return the manifest a run of ``batch`` continues or starts.

    Parameters
    ----------
    batch : BatchSpec
    resume : bool
        Keep the records of an earlier run of this batch, so finished jobs
        whose outputs verify are skipped.
    force : bool
        With ``resume``: accept a manifest written by another batch config
        (jobs whose settings changed are redone).  Without: start again,
        forgetting the earlier records.

    Raises
    ------
    pipeline.errors.OutputError
        If a manifest exists and neither flag is given, or it comes from
        another batch config and ``force`` is not given, or it is unreadable.
    """
    check_writable(batch.output_dir)
    path = batch.output_dir / MANIFEST_NAME
    if not path.exists() or (force and not resume):
        return Manifest(path, batch)
    if not resume:
        raise OutputError(f"{path}: a batch already ran in this folder; pass --resume to continue it or --force "
                          "to start again")
    document = _read(path)
    if document.get("batch_digest") != batch.digest and not force:
        raise OutputError(f"{path}: written by another batch config ({document.get('batch_config')}, digest "
                          f"{str(document.get('batch_digest'))[:12]}), not by {batch.source} (digest "
                          f"{batch.digest[:12]}); pass --force to resume with this config")
    return Manifest(path, batch, records=document["jobs"])


def remove_stale_partials(folder) -> list:
    """Delete the half-written temporaries a killed run left in ``folder`` and its sub-folders.

    Only regular files named as `pipeline.io` names a file being written
    (``.partial-<hex>.<final name>``) are removed; anything else, symbolic
    links included, is left alone, and links to folders are not followed.
    Call it only when no other run writes into ``folder``.

    Parameters
    ----------
    folder : path-like
        A batch output folder.

    Returns
    -------
    list of pathlib.Path
        The files removed, sorted.

    Raises
    ------
    pipeline.errors.OutputError
        If a stale file cannot be removed.
    """
    removed = []
    for root, _, names in os.walk(folder):
        for name in names:
            path = Path(root) / name
            if not _PARTIAL_NAME.fullmatch(name) or path.is_symlink() or not path.is_file():
                continue
            try:
                path.unlink(missing_ok=True)
            except OSError as err:
                raise OutputError(f"{path}: cannot remove this stale partial file left by an interrupted run "
                                  f"({err.strerror or err}); remove it by hand") from err
            removed.append(path)
    return sorted(removed)

"""Batch runs: sweeps over snapshots, views, distances and instruments, on Dask or in process.

`load_batch` expands and validates a batch file; `estimate_jobs` plans it (dry
run); `run_batch` runs it with a manifest that makes it resumable and writes
the catalogue.  `connect_client` starts or joins a Dask cluster (the command
line uses it; library code takes a client).  Dask is imported only here.
"""

from ._catalogue import CATALOGUE_COLUMNS, write_catalogue
from ._estimate import JobEstimate, estimate_jobs, format_estimates
from ._executors import BatchResult, connect_client, make_jobqueue_cluster, run_batch
from ._manifest import MANIFEST_NAME, open_manifest
from ._spec import BatchSpec, JobSpec, load_batch, uniform_sphere_views

__all__ = ["load_batch", "BatchSpec", "JobSpec", "uniform_sphere_views", "estimate_jobs", "JobEstimate",
           "format_estimates", "run_batch", "BatchResult", "connect_client", "make_jobqueue_cluster",
           "open_manifest", "MANIFEST_NAME", "write_catalogue", "CATALOGUE_COLUMNS"]

"""Executors: in process, a real 2-worker Dask LocalCluster, and the same cluster joined by address.

Every executor must give bitwise the same cubes and catalogue numbers (same seeds), read each snapshot
once per worker, and isolate failing jobs.
"""

import logging
import sys

import numpy as np
import pytest
from astropy.io import fits

from pipeline.batch import connect_client, load_batch, make_jobqueue_cluster, run_batch
from pipeline.errors import ConfigError

BODY = """
name = "{snapshot}_i{inclination:02.0f}_d{distance:02.0f}"
[sweep]
snapshots = ["snapshot.h5", "other.h5"]
distances = ["10 Mpc", "14 Mpc"]
[sweep.views]
pairs = [["30 deg", "20 deg"], ["75 deg", "110 deg"]]
"""


@pytest.fixture(scope="module")
def cluster():
    """A real LocalCluster of 2 single-threaded worker processes (spawned), closed after the module."""
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0",
                      silence_logs=logging.ERROR) as local:
        yield local


@pytest.fixture
def sweep(write_batch, make_snapshot):
    make_snapshot(200, name="other.h5", seed=7)
    return write_batch(BODY)


def _cubes(result, batch):
    return {record["name"]: fits.getdata(batch.output_dir / record["outputs"]["cube"]["path"])
            for record in result.records}


def _measurements(result):
    return {record["name"]: record["measurements"] for record in result.records}


@pytest.mark.dask
def test_one_worker_two_workers_and_an_external_scheduler_give_identical_results(sweep, cluster, tmp_path):
    from distributed import Client

    here = load_batch(sweep, output_dir=tmp_path / "here")
    result_here = run_batch(here)
    on_local = load_batch(sweep, output_dir=tmp_path / "local")
    with Client(cluster) as client:
        result_local = run_batch(on_local, client=client)
    by_address = load_batch(sweep, output_dir=tmp_path / "address")
    with connect_client(scheduler=cluster.scheduler_address, timeout=5) as client:
        result_address = run_batch(by_address, client=client)
    assert len(here.jobs) == 8 and result_here.failed == result_local.failed == result_address.failed == ()
    reference = _cubes(result_here, here)
    for result, batch in ((result_local, on_local), (result_address, by_address)):
        cubes = _cubes(result, batch)
        assert cubes.keys() == reference.keys()
        for name, data in reference.items():
            assert cubes[name].tobytes() == data.tobytes(), name
        assert _measurements(result) == _measurements(result_here)
    # Each worker read each snapshot at most once, and both snapshots were read.
    for result in (result_local, result_address):
        counts = [n for reads in result.snapshot_reads.values() for n in reads.values()]
        assert set(counts) == {1}
        assert {key for reads in result.snapshot_reads.values() for key in reads} == \
            {job.snapshot_key for job in here.jobs}
    assert [n for reads in result_here.snapshot_reads.values() for n in reads.values()] == [1, 1]


@pytest.mark.dask
def test_two_batches_at_once_on_one_cluster_keep_their_snapshot_caches_apart(sweep, cluster, tmp_path):
    import concurrent.futures

    from distributed import Client

    batches = [load_batch(sweep, output_dir=tmp_path / name) for name in ("first", "second")]

    def run_on_cluster(batch):
        with Client(cluster) as client:
            return run_batch(batch, client=client)

    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        first, second = pool.map(run_on_cluster, batches)
    assert first.failed == second.failed == ()
    reference = _cubes(first, batches[0])
    assert {name: data.tobytes() for name, data in _cubes(second, batches[1]).items()} == \
        {name: data.tobytes() for name, data in reference.items()}
    for result in (first, second):
        assert {n for reads in result.snapshot_reads.values() for n in reads.values()} == {1}


def _broken_sweep(write_batch, make_snapshot, tmp_path):
    (tmp_path / "broken.h5").write_text("not HDF5")
    return write_batch("""
        name = "{snapshot}_{instrument}"
        [sweep]
        snapshots = ["snapshot.h5", "broken.h5"]
        [sweep.instruments.normal.beam]
        major = "45 arcsec"
        [sweep.instruments.tiny.geometry]
        selection_radius = "0.0001 kpc"
        """)


@pytest.mark.parametrize("executor", ["here", pytest.param("dask", marks=pytest.mark.dask)])
def test_failing_jobs_are_recorded_and_the_others_finish(write_batch, make_snapshot, tmp_path, request, executor):
    from distributed import Client

    batch = load_batch(_broken_sweep(write_batch, make_snapshot, tmp_path))
    if executor == "here":
        result = run_batch(batch)
    else:
        with Client(request.getfixturevalue("cluster")) as client:
            result = run_batch(batch, client=client)
    status = {record["name"]: (record["status"], record["error"]) for record in result.records}
    assert status["snapshot_normal"] == ("done", None)
    assert status["snapshot_tiny"][0] == "failed" and "EmptyFieldError" in status["snapshot_tiny"][1]
    for name in ("broken_normal", "broken_tiny"):
        assert status[name][0] == "failed" and "SnapshotError" in status[name][1] and "not an HDF5" in status[name][1]
    assert result.failed == ("snapshot_tiny", "broken_normal", "broken_tiny")


def _faults_per_page_of_a_fresh_array():
    """Minor page faults (getrusage(2)) per page of a 1 MiB array, filled and freed ten times after a first one.

    1 MiB is too small for a transparent huge page, so every fault is one page.
    """
    import resource

    n_pages = (1 << 20) // resource.getpagesize()
    np.ones(1 << 17)    # the first one may grow the heap
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(10):
        np.ones(1 << 17)
    return (resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before) / (10 * n_pages)


@pytest.mark.dask
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt(3) is a Linux facility")
def test_batch_workers_reuse_freed_arrays_and_go_back_to_their_setting_after(cluster):
    # mallopt(3) (glibc manual): blocks below M_MMAP_THRESHOLD come from the heap and are reused when
    # freed, so refilling one no longer faults its pages in again; a block served by mmap faults in
    # every page each time.  The plugin of a batch raises the threshold and removing it undoes that.
    from distributed import Client

    from pipeline.batch._executors import _BatchWorkerPlugin

    with Client(cluster) as client:
        before = list(client.run(_faults_per_page_of_a_fresh_array).values())
        client.register_plugin(_BatchWorkerPlugin(), name="allocator-test")
        during = list(client.run(_faults_per_page_of_a_fresh_array).values())
        client.unregister_worker_plugin("allocator-test")
        after = list(client.run(_faults_per_page_of_a_fresh_array).values())
    assert max(during) < 0.05, during
    assert np.allclose(after, before, atol=0.2), (before, after)


@pytest.mark.dask
def test_an_unknown_scheduler_address_fails_fast_with_one_line():
    with pytest.raises(ConfigError, match=r"--scheduler: expected the address of a running Dask scheduler.*got "
                                          r"'tcp://127.0.0.1:9', where none answered within 1 s"):
        with connect_client(scheduler="tcp://127.0.0.1:9", timeout=1):
            pass


@pytest.mark.dask
def test_a_slurm_cluster_section_gives_the_expected_job_script():
    pytest.importorskip("dask_jobqueue")
    section = {"kind": "slurm", "jobs": 3, "cores": 8, "processes": 4, "memory": "32 GiB", "walltime": "02:00:00",
               "queue": "compute", "account": "galaxies", "job_extra_directives": ["--exclusive"],
               "job_script_prologue": ["module load python"]}
    with make_jobqueue_cluster(section) as queue_cluster:
        script = queue_cluster.job_script()
    for line in ("#SBATCH -p compute", "#SBATCH -A galaxies", "#SBATCH -t 02:00:00", "#SBATCH --exclusive",
                 "#SBATCH --cpus-per-task=8", "module load python", "--nworkers 4", "--nthreads 2"):
        assert line in script, script
    assert "#SBATCH --mem=" in script and "distributed.cli.dask_worker" in script
    assert script.index("export DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED=False") < script.index("module load python")


@pytest.mark.dask
def test_clusters_the_batch_starts_run_their_workers_without_the_profiler():
    import dask

    # The job-script line means what it says to Dask's own config reader.
    read = dask.config.collect(paths=[], env={"DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED": "False"})
    assert read["distributed"]["worker"]["profile"]["enabled"] is False
    with connect_client(workers=1) as client:
        assert list(client.run(dask.config.get, "distributed.worker.profile.enabled").values()) == [False]
    assert dask.config.get("distributed.worker.profile.enabled") is True


@pytest.mark.dask
def test_a_pbs_cluster_section_gives_a_pbs_job_script():
    pytest.importorskip("dask_jobqueue")
    with make_jobqueue_cluster({"kind": "pbs", "cores": 2, "memory": "4 GiB", "queue": "short"}) as queue_cluster:
        script = queue_cluster.job_script()
    assert "#PBS -q short" in script and "ncpus=2" in script


def test_results_of_the_executors_are_numpy_free_for_the_manifest(sweep, tmp_path):
    import json

    result = run_batch(load_batch(sweep, output_dir=tmp_path / "o"))
    assert json.loads(json.dumps(result.records, allow_nan=False)) == result.records
    assert np.isfinite(result.records[0]["wall_time_s"]) and result.records[0]["peak_memory_mib"] > 0


def test_a_cluster_section_without_dask_jobqueue_is_a_clear_error(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "dask_jobqueue", None)
    with pytest.raises(ConfigError, match=r"\[cluster\]: expected dask-jobqueue to be installed"):
        make_jobqueue_cluster({"kind": "slurm"})

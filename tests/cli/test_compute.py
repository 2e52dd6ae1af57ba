"""Compute back-ends: threads and a local process pool agree; job scripts rendered, never submitted."""
from __future__ import annotations

import sys

import dask
import dask.array as da
import numpy as np
import pytest

from sensemble.compute import (
    SCHEDULER_PLACEHOLDER,
    ComputeError,
    ComputeSettings,
    active_client,
    compute_batch,
    cores_available,
    open_compute,
    render_job_script,
)


def weighted_mean_graph():
    # a small area-weighted mean of the shape the extractor builds: sum(w·x)/sum(w) per chunk, combined
    rng = np.random.default_rng(5)
    values = da.from_array(rng.normal(288.0, 10.0, size=(24, 16, 32)), chunks=(6, 16, 32))
    weights = da.from_array(np.cos(np.deg2rad(np.linspace(-84.375, 84.375, 16)))[:, None] * np.ones(32), chunks=-1)
    return (values * weights).sum(axis=(1, 2)) / weights.sum()


def test_default_workers_are_the_cores_available():
    assert ComputeSettings().workers == cores_available() >= 1


def test_threads_use_the_local_threaded_scheduler():
    before = dask.config.get("scheduler", None)
    with open_compute(ComputeSettings(kind="threads", workers=2)) as client:
        assert client is None
        assert dask.config.get("scheduler") == "threads"
        assert dask.config.get("num_workers") == 2
    assert dask.config.get("scheduler", None) == before  # restored on exit


def test_local_cluster_of_two_processes_matches_threads():
    with open_compute(ComputeSettings(kind="threads", workers=2)) as client:
        assert active_client() is None
        threaded = weighted_mean_graph().compute()
        (batched,) = compute_batch(weighted_mean_graph(), progress=False)
    with open_compute(ComputeSettings(kind="processes", workers=2, memory_limit="1GiB")) as client:
        assert client is not None and active_client() is client
        assert len(client.scheduler_info()["workers"]) == 2
        distributed_result = weighted_mean_graph().compute()
        (batched_on_cluster, total) = compute_batch(weighted_mean_graph(), weighted_mean_graph().sum(), progress=True)
        cluster = client.cluster
        # kind "address": a client of a scheduler that is already running (here, this one)
        with open_compute(ComputeSettings(kind="address", address=cluster.scheduler_address)) as other:
            assert other is not client
            via_address = weighted_mean_graph().compute()
        assert cluster.status.name == "running"  # closing an "address" client leaves the scheduler up
    assert cluster.status.name == "closed"
    # same graph, same data: the same numbers bit for bit (reference: numpy on the whole array)
    np.testing.assert_array_equal(distributed_result, threaded)
    np.testing.assert_array_equal(via_address, threaded)
    np.testing.assert_array_equal(batched, threaded)
    np.testing.assert_array_equal(batched_on_cluster, threaded)
    assert total == pytest.approx(threaded.sum(), rel=1e-12)
    assert active_client() is None  # the cluster's client is gone with the block
    rng = np.random.default_rng(5)
    values = rng.normal(288.0, 10.0, size=(24, 16, 32))
    weights = np.cos(np.deg2rad(np.linspace(-84.375, 84.375, 16)))[:, None] * np.ones(32)
    np.testing.assert_allclose(threaded, (values * weights).sum(axis=(1, 2)) / weights.sum(), rtol=1e-12)


def test_unknown_kind_is_refused():
    with pytest.raises(ComputeError, match="unknown compute kind 'gpu'"):
        with open_compute(ComputeSettings(kind="gpu")):
            pass


def test_address_kind_needs_an_address():
    with pytest.raises(ComputeError, match="needs address"):
        with open_compute(ComputeSettings(kind="address")):
            pass


def test_missing_jobqueue_says_what_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "dask_jobqueue", None)  # import fails as if not installed
    with pytest.raises(ComputeError, match=r"pip install 'sensemble\[cluster\]'"):
        render_job_script(ComputeSettings(kind="slurm", cores=4, memory="8GiB"))


def test_job_queue_needs_cores_and_memory():
    pytest.importorskip("dask_jobqueue")
    with pytest.raises(ComputeError, match="needs cores and memory"):
        render_job_script(ComputeSettings(kind="pbs", cores=4))


def test_slurm_job_script(tmp_path):
    pytest.importorskip("dask_jobqueue")
    settings = ComputeSettings(
        kind="slurm", queue="short", account="eval-team", cores=8, memory="32GiB", walltime="02:00:00",
        jobs=3, job_extra_directives=("--exclusive",), job_script_prologue=("source env/bin/activate",),
        local_directory="$TMPDIR", log_directory=str(tmp_path / "logs"),
    )
    lines = render_job_script(settings).splitlines()
    assert lines[0].startswith("#!")
    for line in ("#SBATCH -p short", "#SBATCH -A eval-team", "#SBATCH --cpus-per-task=8",
                 "#SBATCH --mem=32G", "#SBATCH -t 02:00:00", "#SBATCH --exclusive",
                 "source env/bin/activate", f"#SBATCH -e {tmp_path / 'logs'}/sensemble-worker-%J.err"):
        assert line in lines, line
    worker = next(line for line in lines if "dask_worker" in line)
    assert SCHEDULER_PLACEHOLDER in worker  # rendered without starting a scheduler
    assert "--nworkers 8" in worker and "--nthreads 1" in worker  # cores / threads_per_worker processes
    assert "--local-directory $TMPDIR" in worker


def test_pbs_job_script():
    pytest.importorskip("dask_jobqueue")
    settings = ComputeSettings(
        kind="pbs", queue="workq", cores=16, memory="64GiB", walltime="04:00:00",
        threads_per_worker=4, job_extra_directives=("-m n",),
    )
    lines = render_job_script(settings).splitlines()
    for line in ("#PBS -q workq", "#PBS -l select=1:ncpus=16:mem=64GB", "#PBS -l walltime=04:00:00", "#PBS -m n"):
        assert line in lines, line
    worker = next(line for line in lines if "dask_worker" in line)
    assert "--nworkers 4" in worker and "--nthreads 4" in worker


def test_job_script_for_a_local_kind_is_refused():
    with pytest.raises(ComputeError, match="has no job script"):
        render_job_script(ComputeSettings(kind="processes"))


def test_bad_memory_string_is_a_one_line_error():
    pytest.importorskip("dask_jobqueue")
    with pytest.raises(ComputeError) as caught:
        render_job_script(ComputeSettings(kind="slurm", cores=2, memory="lots"))
    assert "\n" not in str(caught.value) and "lots" in str(caught.value)


def test_compute_batch_raises_the_task_error():
    def fail(block):
        raise ArithmeticError("bad block")

    broken = da.ones(4, chunks=2).map_blocks(fail, dtype=float)
    with open_compute(ComputeSettings(kind="threads", workers=1)):
        with pytest.raises(ArithmeticError, match="bad block"):
            compute_batch(broken, progress=True)


def test_auto_runs_small_batches_on_threads_and_large_ones_on_a_process_pool():
    import os

    from sensemble.compute import SMALL_BATCH_BYTES, LocalPool
    from sensemble.extractor.schedule import BATCH_BYTES_KEY

    def worker_pid(block):
        return np.full(block.shape, os.getpid(), dtype=np.int64)

    pids = da.zeros(8, chunks=2).map_blocks(worker_pid, dtype=np.int64)
    with open_compute(ComputeSettings(kind="auto", workers=2)) as client:
        assert client is None and active_client() is None
        pool = dask.config.get("scheduler")
        assert isinstance(pool, LocalPool)
        threaded = weighted_mean_graph().compute()
        assert set(pids.compute()) == {os.getpid()}  # nothing declared: threads here
        with dask.config.set({BATCH_BYTES_KEY: SMALL_BATCH_BYTES - 1}):
            assert set(pids.compute()) == {os.getpid()}
        with dask.config.set({BATCH_BYTES_KEY: SMALL_BATCH_BYTES}):
            assert os.getpid() not in set(pids.compute())  # worker processes
            in_processes = weighted_mean_graph().compute()
            (batched,) = compute_batch(weighted_mean_graph(), progress=True)
    assert pool._executor is None  # the pool is shut down with the block
    np.testing.assert_array_equal(in_processes, threaded)
    np.testing.assert_array_equal(batched, threaded)


def test_the_default_is_auto():
    assert ComputeSettings().kind == "auto"


def test_job_names_carry_the_batch_and_logs_go_under_the_output_folder(tmp_path):
    pytest.importorskip("dask_jobqueue")
    settings = ComputeSettings(kind="slurm", cores=2, memory="4GiB")
    lines = render_job_script(settings, batch="ensemble 2026/spring", out_dir=tmp_path).splitlines()
    assert "#SBATCH -J sensemble-worker-ensemble_2026_spring" in lines
    assert f"#SBATCH -e {tmp_path / 'worker-logs'}/sensemble-worker-ensemble_2026_spring-%J.err" in lines
    # an explicit log_directory wins
    explicit = ComputeSettings(kind="pbs", cores=2, memory="4GiB", log_directory=str(tmp_path / "mine"))
    script = render_job_script(explicit, batch="b", out_dir=tmp_path)
    assert "#PBS -N sensemble-worker-b" in script.splitlines()
    assert str(tmp_path / "mine") in script and "worker-logs" not in script

"""Tests of src/sensemble/cluster_config.py: distributed's periodic checks made less frequent, the user's own dask
settings kept, and the same settings reaching workers in SLURM/PBS jobs through dask's environment variables; and
the worker processes' share of the cores for reading chunks (`compute.read_threads_per_worker`)."""
from __future__ import annotations

import dask
import pytest

from sensemble.cluster_config import PROFILE_KEY, QUIET, environment_name, job_script_exports, quiet_settings
from sensemble.compute import ComputeSettings, LocalPool, cores_available, open_compute, render_job_script
from sensemble.extractor.rawchunks import READ_THREADS, READ_THREADS_VARIABLE, read_threads


def test_quiet_settings_change_only_what_the_user_left_at_distributed_defaults():
    assert quiet_settings() == QUIET
    with dask.config.set({"distributed.admin.tick.interval": "50ms"}):  # the user's own choice wins
        chosen = quiet_settings()
    assert "distributed.admin.tick.interval" not in chosen and len(chosen) == len(QUIET) - 1
    assert PROFILE_KEY not in quiet_settings(dashboard=True)  # the dashboard's Profile page needs it


def test_exported_names_are_read_back_by_dask_as_the_same_settings():
    # dask's own reading of DASK_* variables (dask.config.collect_env) is the reference
    lines = job_script_exports(QUIET)
    env = dict(line.removeprefix("export ").split("=", 1) for line in lines)
    assert set(env) == {environment_name(key) for key in QUIET}
    read = dask.config.collect_env(env)
    for key, value in QUIET.items():
        assert dask.config.get(key, config=read) == value, key


def test_job_scripts_export_the_settings_before_the_users_prologue():
    pytest.importorskip("dask_jobqueue")
    settings = ComputeSettings(kind="slurm", cores=2, memory="4GiB", job_script_prologue=("source env/bin/activate",))
    lines = render_job_script(settings).splitlines()
    exports = [lines.index(line) for line in job_script_exports(QUIET)]
    assert exports and max(exports) < lines.index("source env/bin/activate")


def test_workers_of_a_local_cluster_get_the_settings_and_the_user_config_comes_back():
    before = dask.config.get(PROFILE_KEY)
    with open_compute(ComputeSettings(kind="processes", workers=1, memory_limit="1GiB")) as client:
        on_workers = client.run(lambda: dask.config.get(PROFILE_KEY))
        threads = client.run(read_threads)
    assert list(on_workers.values()) == [False]
    # one worker on this machine: all its cores read for it (common practice, no source)
    assert list(threads.values()) == [cores_available()]
    assert dask.config.get(PROFILE_KEY) == before


def test_the_readme_gives_the_same_variables_for_workers_started_by_hand():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    for line in job_script_exports(QUIET):
        assert line.removeprefix("export ") in readme, line


def test_each_worker_of_the_local_pool_reads_with_its_share_of_the_cores():
    # N workers on N cores: one reading thread each, not N (common practice, no source: no oversubscription)
    pool = LocalPool(2)
    try:
        shares = {pool._pool().submit(read_threads).result() for _ in range(4)}
    finally:
        pool.close()
    assert shares == {max(1, cores_available() // 2)}


def test_job_scripts_give_each_worker_its_threads_per_worker_for_reading():
    settings = ComputeSettings(kind="slurm", cores=8, memory="16GiB", threads_per_worker=2)
    assert f"export {READ_THREADS_VARIABLE}=2" in render_job_script(settings).splitlines()


@pytest.mark.parametrize("setting, expected", [("3", 3), ("", READ_THREADS), ("0", READ_THREADS), ("x", READ_THREADS)])
def test_the_reading_threads_come_from_the_environment(monkeypatch, setting, expected):
    monkeypatch.setenv(READ_THREADS_VARIABLE, setting)
    assert read_threads() == expected

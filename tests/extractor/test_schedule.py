"""Tests of extractor/schedule.py on a distributed client: every file is a task of the cluster, each run its own
future, and the outcome is the local scheduler's — rows, failures and their messages alike.

A scheduler changes where tasks run, not what they compute (common practice, no source); the faults are those of
tests/faults (a damaged chunk of values, a month without any valid cell).
"""
from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from tests.faults.conftest import (  # noqa: F401 — the fixtures clean, clean_archive, broken_copy
    TARGET,
    assert_others_unchanged,
    broken_copy,
    clean,
    clean_archive,
    corrupt_data,
    file_of,
    rows_by_model,
    run_extract,
    the_failure,
)

distributed = pytest.importorskip("distributed")


@pytest.fixture
def client():
    # threads of this process: the same scheduler and futures as a cluster of processes, started in a moment
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0") as cluster:
        with distributed.Client(cluster) as connected:
            yield connected


def test_every_file_is_a_task_of_the_cluster_and_rows_match_the_local_scheduler(clean, clean_archive, client,
                                                                                  tmp_path):
    with distributed.get_task_stream(client) as stream:
        result = run_extract(clean_archive, tmp_path / "out")
    assert result.failures == []
    assert rows_by_model(result) == rows_by_model(clean)
    # one open-check-and-reduce task per NetCDF file ran on the cluster (`schedule.lean_graph`), not one task per
    # run, and none in this process
    files = [p for p in clean_archive.rglob("*.nc") if not p.name.startswith("areacella")]
    reads = {str(event["key"]) for event in stream.data if str(event["key"]).startswith("file-")}
    assert len(reads) == len(files) > len(result.rows)


def test_damaged_values_fail_only_their_run_on_a_cluster(clean, broken_copy, client, tmp_path):
    path = corrupt_data(file_of(broken_copy, variable="rsut"))
    result = run_extract(broken_copy, tmp_path / "out")
    failure = the_failure(result)
    assert failure.what == "abrupt-4xCO2"
    assert f"file {path}" in failure.message and "values of rsut cannot be read" in failure.message
    assert TARGET not in rows_by_model(result)
    assert_others_unchanged(result, clean)


def test_month_without_any_valid_cell_is_found_on_a_cluster(clean, broken_copy, client, tmp_path):
    path = file_of(broken_copy, variable="rlut")
    with netCDF4.Dataset(path, "a") as nc:
        nc["rlut"][30, :, :] = np.ma.masked  # July of the third year
    result = run_extract(broken_copy, tmp_path / "out")
    failure = the_failure(result)
    assert f"file {path}" in failure.message
    assert "rlut has no valid value in any grid cell in 1 month(s), the first 1852-07" in failure.message
    assert_others_unchanged(result, clean)

"""Tests of extractor/schedule.py on a local scheduler: each run's task opens, checks and reduces its own files
(common practice, no source: the means are checked bit for bit against the chunked reduction, itself checked in
test_filemeans.py)."""
import types

import dask
import numpy as np
import pytest
import xarray as xr

from sensemble.extractor import filemeans, opened
from sensemble.compute import SMALL_BATCH_BYTES, LocalPool
from sensemble.extractor.schedule import _runs_in_processes, open_and_reduce_run, reduce_runs
from sensemble.extractor.runs import global_mean_series
from sensemble.extractor.catalog import scan
from tests.extractor.conftest import write_run
from tests.extractor.test_filemeans import LAYOUTS, VARIABLES, archive


@pytest.mark.filterwarnings("ignore:The specified chunks separate")
@pytest.mark.parametrize("layout", LAYOUTS)
def test_a_run_task_gives_the_chunked_reduction_bit_for_bit(tmp_path, layout):
    run = archive(tmp_path, **LAYOUTS[layout])
    series = open_and_reduce_run(run, tuple(VARIABLES))
    chunked = global_mean_series(run, chunks={"time": 7}).compute()
    opened.close_opened_files()
    for variable in VARIABLES:
        np.testing.assert_array_equal(series[variable].values, chunked[variable].values)
        assert series[variable].attrs == chunked[variable].attrs
    np.testing.assert_array_equal(series["time"].values, chunked["time"].values)
    np.testing.assert_array_equal(series["time_bnds"].values, chunked["time_bnds"].values)
    assert filemeans.READ_THROUGH_XARRAY not in series.encoding


def test_a_run_task_opens_each_file_once_and_closes_it(tmp_path, monkeypatch):
    run = archive(tmp_path, chunk_steps=12)
    handles = []
    real = filemeans.netCDF4.Dataset

    def counted(path, *args, **kwargs):
        handles.append((str(path), real(path, *args, **kwargs)))
        return handles[-1][1]

    monkeypatch.setattr(filemeans, "netCDF4", types.SimpleNamespace(Dataset=counted))  # filemeans' opens only
    series = open_and_reduce_run(run, tuple(VARIABLES))
    assert isinstance(series, xr.Dataset), series
    assert set(series.data_vars) >= set(VARIABLES)
    paths = [path for path, _ in handles]
    assert sorted(paths) == sorted(str(p) for v in VARIABLES for p in run.files[v])  # once each, by the checks
    assert all(not handle.isopen() for _, handle in handles)  # and closed by the task
    assert opened._OPENED == [] and not opened.in_task()


def test_a_bad_run_comes_back_as_its_error_and_the_others_are_reduced(tmp_path):
    good = archive(tmp_path / "a", chunk_steps=12)
    write_run(tmp_path / "b", "OTHERMODEL-2", "piControl", "r1i1p1f1", VARIABLES, nyears=3, files_per_variable=2,
              areacella=True, nlat=6, nlon=12)
    bad = scan(tmp_path / "b").get("OTHERMODEL-2", "r1i1p1f1", "piControl")
    broken = bad.files["rlut"][0]
    broken.write_bytes(broken.read_bytes()[:200])  # truncated: cannot be opened
    pool = LocalPool(2)  # told the batch is large: worker processes, each run's task opening its own files
    try:
        with dask.config.set(scheduler=pool):
            assert _runs_in_processes(SMALL_BATCH_BYTES) and not _runs_in_processes(None)
            by_tasks = reduce_runs([good, bad], tuple(VARIABLES), progress=False, input_bytes=SMALL_BATCH_BYTES)
    finally:
        pool.close()
    with dask.config.set(scheduler="threads", num_workers=2):  # threads: opened in this process, as before
        by_threads = reduce_runs([good, bad], tuple(VARIABLES), progress=False)
    for series, errors in (by_tasks, by_threads):
        assert list(series) == [good.label] and list(errors) == [bad.label]
        assert errors[bad.label].path == str(broken) and "cannot be read" in str(errors[bad.label])
    for variable in VARIABLES:
        np.testing.assert_array_equal(by_tasks[0][good.label][variable].values,
                                      by_threads[0][good.label][variable].values)
    assert str(by_tasks[1][bad.label]) == str(by_threads[1][bad.label])
    assert not opened.in_task()


def test_files_registered_in_a_task_are_closed_when_it_ends(tmp_path):
    path = tmp_path / "a.nc"
    xr.Dataset({"tas": ("time", np.arange(3.0))}).to_netcdf(path)
    closed = []
    with opened.opened_by_this_task(filemeans.OPENING_LOCK):
        assert opened.in_task()
        ds = opened.register(xr.open_dataset(path))
        ds.set_close(lambda: closed.append(True))
        assert closed == []
    assert closed == [True] and opened._OPENED == [] and not opened.in_task()

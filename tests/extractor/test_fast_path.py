"""The fast path (`filefacts`, `runjoin`: files read without xarray, one task each) against the reference path
(`runs.global_mean_series`, through xarray): the same Dataset to the bit — values, dates, attributes, flags — on
every kind of file the fast path takes, and the reference path's answer for everything it defers.

Source for every check: the reference path itself (common practice, no source: a fast path is proven against the
slow one it replaces).
"""
from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from sensemble.extractor import classicmap, filefacts
from sensemble.extractor.catalog import scan
from sensemble.extractor.filefacts import Deferred
from sensemble.extractor.runjoin import file_task, join_run, run_weights
from sensemble.extractor.runs import global_mean_series
from sensemble.extractor.schedule import reduce_runs, reduce_runs_reference

from .conftest import REQUIRED, rewrite_file, write_run

FLUXES = tuple(v for v in REQUIRED if v != "tas")


def fast(run):
    weights = run_weights(run)
    facts = {v: [file_task(run, p, v, weights) for p in paths] for v, paths in run.files.items()}
    return join_run(run, weights, facts)


def holes(lat, lon, k):
    field = 280.0 + 0.1 * k + np.cos(np.deg2rad(lat)) + 0.01 * lon
    return np.where((lat > 40) & (lon < 90) & (k % 3 == 0), np.nan, field)


def archive(root, case: str):
    if case == "plain":
        write_run(root, nyears=4, files_per_variable=2)
    elif case == "areacella":
        write_run(root, nyears=3, areacella=True)
    elif case == "celsius":
        write_run(root, variables=FLUXES, nyears=2)
        write_run(root, variables=("tas",), nyears=2, units="degC", values={"tas": 14.0})
    elif case == "no_bounds":
        write_run(root, nyears=2, time_bounds=False, lat_lon_bounds=False)
    elif case == "360_day":
        write_run(root, nyears=2, calendar="360_day")
    elif case == "trimmed":
        write_run(root, variables=FLUXES, nyears=2)
        write_run(root, variables=("tas",), nyears=3)
    elif case == "missing_cells":
        write_run(root, nyears=2, values={v: holes for v in REQUIRED})
    elif case == "other_identity":
        write_run(root, nyears=2, attrs={"source_id": "ANOTHER-NAME"})
    elif case == "two_runs":
        write_run(root, nyears=2)
        write_run(root, experiment="abrupt-4xCO2", nyears=2, files_per_variable=2)
    return root


CASES = ["plain", "areacella", "celsius", "no_bounds", "360_day", "trimmed", "missing_cells", "other_identity",
         "two_runs"]
LAYOUTS = {"netcdf4": None, "chunk1": dict(chunk_steps=1), "classic": dict(file_format="NETCDF3_64BIT_OFFSET"),
           "packed": dict(pack=True), "transposed": dict(transpose=True)}


def in_layout(src, dst, layout):
    if LAYOUTS[layout] is None:
        return src
    for path in src.rglob("*.nc"):
        rewrite_file(path, dst / path.relative_to(src), **LAYOUTS[layout])
    return dst


@pytest.mark.parametrize("layout", list(LAYOUTS))
@pytest.mark.parametrize("case", CASES)
def test_fast_path_gives_the_reference_paths_dataset_to_the_bit(tmp_path, monkeypatch, case, layout):
    root = in_layout(archive(tmp_path / "src", case), tmp_path / layout, layout)
    runs = scan(root).runs
    assert runs
    opened = []  # classic files: their headers read by scipy, not netCDF4 (classicmap.ClassicFile)
    monkeypatch.setattr(filefacts, "open_classic", lambda path: opened.append(classicmap.open_classic(path)) or opened[-1])
    for run in runs:
        got = fast(run)
        mapped = [handle for handle in opened if handle is not None]
        assert opened and (len(mapped) == len(opened) if layout == "classic" else not mapped)
        assert not isinstance(got, Deferred), got
        xr.testing.assert_identical(got, global_mean_series(run).compute())
        for name in got.data_vars:  # identical values, not merely close ones
            np.testing.assert_array_equal(got[name].values, global_mean_series(run)[name].values)


def deferred_archive(root, case):
    if case == "no_calendar":  # CF's default calendar is a flag the reference path raises
        write_run(root, nyears=2, calendar=None)
    elif case == "gap":  # a missing year between two files: an error only the reference path words
        write_run(root, nyears=2)
        write_run(root, variables=("tas",), start_year=1853, nyears=1)
    elif case == "bad_units":
        write_run(root, variables=FLUXES, nyears=2)
        write_run(root, variables=("tas",), nyears=2, units="furlongs")
    return root


@pytest.mark.parametrize("case", ["no_calendar", "gap", "bad_units"])
def test_what_the_fast_path_defers_gets_the_reference_paths_answer(tmp_path, case):
    runs = scan(deferred_archive(tmp_path, case)).runs
    assert any(isinstance(fast(run), Deferred) for run in runs)
    series, errors = reduce_runs(runs, REQUIRED, progress=False)
    ref_series, ref_errors = reduce_runs_reference(runs, REQUIRED, progress=False)
    assert {k: str(v) for k, v in errors.items()} == {k: str(v) for k, v in ref_errors.items()}
    assert series.keys() == ref_series.keys()
    for label in series:
        xr.testing.assert_identical(series[label], ref_series[label])


def test_a_file_whose_metadata_cannot_be_read_defers_its_run_and_the_batch_goes_on(tmp_path, monkeypatch):
    # a reading error inside the fast path's file task must not stop the batch's graph: the run goes to the
    # reference path (common practice, no source: a batch records a failure and goes on)
    from sensemble.extractor import filefacts

    write_run(tmp_path, nyears=2)
    runs = scan(tmp_path).runs

    def unreadable(*args):
        raise OSError("NetCDF: HDF error")

    monkeypatch.setattr(filefacts, "_metadata", unreadable)
    assert all(isinstance(fast(run), Deferred) for run in runs)
    series, errors = reduce_runs(runs, REQUIRED, progress=False)
    assert errors == {} and series.keys() == {run.label for run in runs}


@pytest.mark.parametrize("calendar", ["noleap", "360_day", "standard", "julian"])
def test_bounds_decoded_once_per_distinct_number_are_xarrays_dates(calendar):
    # time bounds share their inner edges: each distinct number decoded once gives xarray's decoding element by
    # element (xarray's decode_cf_datetime is the reference)
    from xarray.coding.times import decode_cf_datetime

    from sensemble.extractor.filefacts import dates

    edges = np.cumsum(np.r_[0.0, np.tile([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], 3)]) + 0.25
    bounds = np.stack([edges[:-1], edges[1:]], axis=1)
    units = "days since 1850-01-01 00:00:00"
    got = dates(bounds, units, calendar)
    want = decode_cf_datetime(bounds, units, calendar, use_cftime=True)
    assert got.shape == want.shape == (36, 2)
    assert all(a == b and type(a) is type(b) for a, b in zip(got.ravel(), want.ravel()))
    assert (dates(bounds[:, 0], units, calendar) == want[:, 0]).all()

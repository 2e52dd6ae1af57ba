"""Tests of extractor/filemeans.py: one read-and-reduce task per file gives the same means as the chunked reduction."""
import dask
import netCDF4
import numpy as np
import pytest

from sensemble.extractor.catalog import scan
from sensemble.extractor.filemeans import FileSource, file_global_means
from sensemble.extractor.runs import global_mean_series
from tests.extractor.conftest import rewrite_file, write_run

MODEL, MEMBER = "TESTMODEL-1", "r1i1p1f1"
VARIABLES = ("tas", "rsdt", "rsut", "rlut")


def patchy(lat, lon, k):
    """A field with missing cells (NaN, written as the fill value) that move from month to month."""
    field = 250.0 + 40.0 * np.cos(np.deg2rad(lat)) + 0.3 * k + 0.01 * lon
    return np.where((lat > 40) & (lon < 30 + 10 * (k % 3)), np.nan, field)


def archive(root, **layout):
    """A two-file run of patchy fields, rewritten in the given storage layout."""
    written = write_run(root / "src", MODEL, "piControl", MEMBER, VARIABLES, nyears=3, files_per_variable=2,
                        values={v: patchy for v in VARIABLES}, areacella=True, nlat=6, nlon=12)
    for path in written + list((root / "src").rglob("areacella*.nc")):
        rewrite_file(path, root / "out" / path.relative_to(root / "src"), **layout)
    return scan(root / "out").get(MODEL, MEMBER, "piControl")


LAYOUTS = {
    "12 steps per chunk": dict(chunk_steps=12),
    "1 step per chunk": dict(chunk_steps=1),
    "classic, uncompressed": dict(file_format="NETCDF3_64BIT_OFFSET"),
    "packed int16": dict(pack=True),
    "(time, lon, lat)": dict(transpose=True, chunk_steps=5),
}


@pytest.mark.filterwarnings("ignore:The specified chunks separate")
@pytest.mark.parametrize("layout", LAYOUTS)
def test_file_tasks_match_the_chunked_reduction_bit_for_bit(tmp_path, layout):
    # reference: the general path (xarray decoding, dask chunks, one map_blocks task per chunk) on the same files
    run = archive(tmp_path, **LAYOUTS[layout])
    tasks = global_mean_series(run)
    chunked = global_mean_series(run, chunks={"time": 7})
    assert len(dict(tasks["tas"].__dask_graph__())) < len(dict(chunked["tas"].__dask_graph__()))
    tasks, chunked = dask.compute(tasks, chunked)
    for variable in VARIABLES:
        assert np.isfinite(tasks[variable].values).all()
        np.testing.assert_array_equal(tasks[variable].values, chunked[variable].values)
        assert tasks[variable].attrs == chunked[variable].attrs


def test_one_task_per_file(tmp_path):
    run = archive(tmp_path, chunk_steps=12)
    graph = dict(global_mean_series(run)["rlut"].__dask_graph__())
    reads = [key for key, task in graph.items() if "file_global_means" in repr(task)]
    assert len(reads) == 2  # two files, each read and reduced in one task


def test_degrees_celsius_are_converted_per_value_as_on_the_other_path(tmp_path, cmip):
    # CF/UDUNITS: K = degC + 273.15, added to each value before averaging, as the chunked path does
    path = cmip.write_monthly_file(tmp_path / cmip.cmip_file_name("tas", MODEL, "piControl", MEMBER,
                                                                  time_range="185001-185112"),
                                   "tas", values=lambda lat, lon, k: 14.0 + 0.1 * lat, units="degC",
                                   attrs={"source_id": MODEL, "experiment_id": "piControl", "variant_label": MEMBER})
    from sensemble.extractor.catalog import RunFiles

    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [path]}, grid_label="gn")
    tasks = global_mean_series(run, required=()).compute()
    chunked = global_mean_series(run, required=(), chunks={"time": 5}).compute()
    np.testing.assert_array_equal(tasks["tas"].values, chunked["tas"].values)
    assert tasks["tas"].attrs["units"] == "K"


def test_slabs_smaller_than_a_file_give_the_same_means(tmp_path, monkeypatch):
    # a file read in many slabs (each a whole number of storage chunks) reduces to the same numbers as in one
    run = archive(tmp_path, chunk_steps=4)
    path = run.files["rsut"][0]
    with netCDF4.Dataset(path) as nc:
        steps = nc.variables["rsut"].shape[0]
    weights = np.random.default_rng(1).uniform(0.5, 1.5, size=(6, 12))
    source = FileSource(str(path), "rsut", steps, (0, 1, 2))
    whole = file_global_means(source, weights)
    from sensemble.extractor import filemeans

    monkeypatch.setattr(filemeans, "SLAB_BYTES", 1)  # one storage chunk (4 steps) per read
    np.testing.assert_array_equal(file_global_means(source, weights), whole)

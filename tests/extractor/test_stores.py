"""Tests of extractor/stores.py: NetCDF files and Zarr stores opened alike, and described for the cache."""
import numpy as np
import xarray as xr

from sensemble.extractor.stores import is_zarr, name_of, open_dataset, stat_location


def test_zarr_store_and_netcdf_file_open_to_the_same_values(tmp_path):
    ds = xr.Dataset({"tas": (("time", "lat"), np.arange(6.0).reshape(3, 2), {"units": "K"})})
    ds.to_netcdf(tmp_path / "tas.nc")
    ds.to_zarr(tmp_path / "tas_store", zarr_format=2, consolidated=True)
    assert is_zarr(tmp_path / "tas_store") and not is_zarr(tmp_path / "tas.nc")
    assert is_zarr("gs://bucket/CMIP6/x/v20260101/") and not is_zarr("https://server/tas.nc")
    with open_dataset(tmp_path / "tas.nc") as a, open_dataset(tmp_path / "tas_store") as b:
        xr.testing.assert_identical(a["tas"].load(), b["tas"].load())
    with open_dataset((tmp_path / "tas_store").as_uri()) as c:  # an fsspec URL (file://, no network)
        np.testing.assert_array_equal(c["tas"].values, ds["tas"].values)
    assert name_of("gs://bucket/a/v20260101/") == "v20260101" and name_of(tmp_path / "tas.nc") == "tas.nc"


def test_a_store_is_fingerprinted_by_all_its_files(tmp_path):
    ds = xr.Dataset({"tas": ("time", np.arange(4.0))})
    ds.to_zarr(tmp_path / "s", zarr_format=2)
    before = stat_location(tmp_path / "s")
    xr.Dataset({"tas": ("time", np.arange(4.0) + 1)}).to_zarr(tmp_path / "s", mode="w", zarr_format=2)
    chunk = next(p for p in (tmp_path / "s" / "tas").iterdir() if not p.name.startswith("."))
    chunk.write_bytes(chunk.read_bytes() + b"\0")  # a changed chunk changes size or time
    assert stat_location(tmp_path / "s") != before and before.st_size > 0

"""Files registered while building a batch's graph are closed by close_opened_files (common practice, no source)."""
import numpy as np
import xarray as xr

from sensemble.extractor import opened


def test_registered_files_are_closed_and_forgotten(tmp_path):
    path = tmp_path / "a.nc"
    xr.Dataset({"tas": ("time", np.arange(3.0))}).to_netcdf(path)
    ds = opened.register(xr.open_dataset(path))
    closed = []
    ds.set_close(lambda: closed.append(True))
    opened.close_opened_files()
    assert closed == [True]
    assert opened._OPENED == []
    opened.close_opened_files()  # nothing left: a second call closes nothing
    assert closed == [True]

"""Series files: one NetCDF file per (model, member), one group per experiment of annual global-mean anomalies."""
from __future__ import annotations

from pathlib import Path

import xarray as xr

from sensemble.contract import series as schema
from sensemble.contract.cf import anomaly_attributes

from sensemble.contract.atomic import atomic_path, local_writes

SERIES_VARIABLES = schema.VARIABLES


def series_group(ds: xr.Dataset, role: str) -> xr.Dataset:
    """A run's annual anomalies as a series-file group: the series variables, ``year`` from 1, the role."""
    keep = [v for v in SERIES_VARIABLES if v in ds]
    out = ds[keep].astype("float64")
    what = ("annual global mean, drift-removed residual of the control" if role == schema.CONTROL else
            "annual global-mean anomaly, drift-corrected against the control")
    for v in keep:
        # each value is an area mean over the globe and a mean over its year (CF §7.3 names the group's own
        # dimension; the monthly `time` of the archive is gone)
        out[v].attrs = anomaly_attributes(ds[v].attrs, what) | {"cell_methods": "area: mean year: mean"}
    out.attrs = {schema.ROLE: role, schema.EXPERIMENT_ID: str(ds.attrs.get("experiment_id", "")),
                 schema.BRANCH_YEAR: int(ds.attrs.get("branch_year", -1))}
    if schema.CHAIN in ds.attrs:
        out.attrs[schema.CHAIN] = ds.attrs[schema.CHAIN]
    if schema.CALENDAR_YEAR in ds.coords:
        out = out.assign_coords({schema.CALENDAR_YEAR: ds[schema.CALENDAR_YEAR].astype("int64")})
    out[schema.YEAR] = out[schema.YEAR].astype("int64")
    out[schema.YEAR].attrs = {"long_name": "year counted from 1 at the branch from the control", "units": "1"}
    return out


def write_series(path: Path, groups: dict[str, xr.Dataset], attrs: dict) -> Path:
    """One NetCDF file, one group per experiment, written atomically."""
    with atomic_path(path) as tmp, local_writes():
        root = xr.Dataset(attrs=attrs)
        root.to_netcdf(tmp, mode="w", engine="netcdf4")
        for name, ds in groups.items():
            ds.to_netcdf(tmp, mode="a", group=name, engine="netcdf4")
    return path

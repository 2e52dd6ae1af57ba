"""Tiny CMIP-style NetCDF files for tests: a few years of monthly fields on a 4×8 grid.

Reusable helpers (plain functions, also offered as the fixture ``cmip``):

- `write_monthly_file(path, var, values, calendar=…, start_year=…, nyears=…, units=…, …)`
- `write_areacella(path, nlat, nlon, units="m2", …)`
- `cmip_file_name(var, model, experiment, member, …)`, `drs_dir(root, model, experiment, member, var, …)`
- `write_run(root, model, experiment, …)`: all variables of one run, DRS or flat, one or several files each.

Values are numbers invented for tests; grids are regular latitude–longitude grids with bounds.
"""
from __future__ import annotations

import types
from pathlib import Path

import cftime
import netCDF4
import numpy as np
import pytest

DEFAULT_VALUES = {"tas": 287.0, "rsdt": 340.0, "rsut": 100.0, "rlut": 239.0, "rsutcs": 53.0, "rlutcs": 265.0}
REQUIRED = ("tas", "rsdt", "rsut", "rlut")


def grid(nlat: int = 4, nlon: int = 8):
    """Centres and bounds of a regular global grid: equal latitude bands, equal longitude sectors."""
    lat_edges = np.linspace(-90.0, 90.0, nlat + 1)
    lon_edges = np.linspace(0.0, 360.0, nlon + 1)
    lat = 0.5 * (lat_edges[:-1] + lat_edges[1:])
    lon = 0.5 * (lon_edges[:-1] + lon_edges[1:])
    lat_bnds = np.stack([lat_edges[:-1], lat_edges[1:]], axis=1)
    lon_bnds = np.stack([lon_edges[:-1], lon_edges[1:]], axis=1)
    return lat, lon, lat_bnds, lon_bnds


def month_list(start_year: int, nyears: int, start_month: int = 1, nmonths: int | None = None):
    """(year, month) pairs of consecutive months."""
    n = nyears * 12 if nmonths is None else nmonths
    first = start_year * 12 + start_month - 1
    return [((first + k) // 12, (first + k) % 12 + 1) for k in range(n)]


def _next_month(year: int, month: int) -> tuple[int, int]:
    return (year + month // 12, month % 12 + 1)


def write_monthly_file(
    path,
    var: str,
    values=None,
    *,
    calendar: str | None = "noleap",
    start_year: int = 1850,
    nyears: int = 2,
    start_month: int = 1,
    nmonths: int | None = None,
    months: list[tuple[int, int]] | None = None,
    units: str | None = "default",
    nlat: int = 4,
    nlon: int = 8,
    attrs: dict | None = None,
    var_attrs: dict | None = None,
    time_units: str | None = None,
    time_bounds: bool = True,
    lat_lon_bounds: bool = True,
    fill_value: float | None = 1.0e20,
    dtype: str = "f4",
) -> Path:
    """Write one monthly file ``var(time, lat, lon)`` and return its path.

    Parameters
    ----------
    values : None, number, array or callable
        None: a constant per variable (`DEFAULT_VALUES`); a number: that constant; an array of
        shape (time, lat, lon) or (time,); a callable ``f(lat2d, lon2d, k)`` giving the field of
        month ``k`` (0-based, counted from the first month written), with lat/lon in degrees.
        NaN values are written as the fill value.
    calendar : str or None
        CF calendar attribute; None writes no calendar attribute (times are then standard).
    months : list of (year, month), optional
        Explicit months (to make gaps, overlaps, duplicates); default consecutive months from
        ``start_year``/``start_month`` for ``nyears`` years (or ``nmonths`` months).
    units : str or None
        "default" gives K for tas and W m-2 otherwise; None writes no units attribute.
    attrs : dict
        Global attributes (e.g. source_id, experiment_id, variant_label, branch_time_in_parent).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    months = months if months is not None else month_list(start_year, nyears, start_month, nmonths)
    cal = calendar or "standard"
    first_year = months[0][0] if months else start_year
    time_units = time_units or f"days since {first_year:04d}-01-01 00:00:00"
    starts = [cftime.datetime(y, m, 1, calendar=cal) for y, m in months]
    ends = [cftime.datetime(*_next_month(y, m), 1, calendar=cal) for y, m in months]
    mids = [s + (e - s) / 2 for s, e in zip(starts, ends)]
    lat, lon, lat_bnds, lon_bnds = grid(nlat, nlon)
    nt = len(months)

    if values is None:
        values = DEFAULT_VALUES.get(var, 1.0)
    if callable(values):
        lat2d, lon2d = np.meshgrid(lat, lon, indexing="ij")
        data = np.stack([np.broadcast_to(values(lat2d, lon2d, k), (nlat, nlon)) for k in range(nt)])
    else:
        arr = np.asarray(values, dtype=np.float64)
        if arr.ndim == 1:
            arr = arr[:, None, None]
        data = np.broadcast_to(arr, (nt, nlat, nlon)).copy()
    if units == "default":
        units = "K" if var == "tas" else "W m-2"

    with netCDF4.Dataset(path, "w", format="NETCDF4") as nc:
        nc.createDimension("time", None)
        nc.createDimension("lat", nlat)
        nc.createDimension("lon", nlon)
        nc.createDimension("bnds", 2)
        t = nc.createVariable("time", "f8", ("time",))
        t.units = time_units
        if calendar is not None:
            t.calendar = calendar
        t.standard_name = "time"
        t.axis = "T"
        t[:] = cftime.date2num(mids, time_units, calendar=cal) if nt else []
        if time_bounds:
            t.bounds = "time_bnds"
            tb = nc.createVariable("time_bnds", "f8", ("time", "bnds"))
            if nt:
                tb[:] = np.stack(
                    [cftime.date2num(starts, time_units, calendar=cal), cftime.date2num(ends, time_units, calendar=cal)],
                    axis=1,
                )
        for name, centres, bnds, std, unit in (
            ("lat", lat, lat_bnds, "latitude", "degrees_north"),
            ("lon", lon, lon_bnds, "longitude", "degrees_east"),
        ):
            c = nc.createVariable(name, "f8", (name,))
            c.standard_name = std
            c.units = unit
            c[:] = centres
            if lat_lon_bounds:
                c.bounds = f"{name}_bnds"
                b = nc.createVariable(f"{name}_bnds", "f8", (name, "bnds"))
                b[:] = bnds
        v = nc.createVariable(var, dtype, ("time", "lat", "lon"), fill_value=fill_value)
        if units is not None:
            v.units = units
        v.cell_methods = "area: time: mean"
        for key, val in (var_attrs or {}).items():
            setattr(v, key, val)
        if nt:
            v[:] = np.ma.masked_invalid(data)
        for key, val in (attrs or {}).items():
            setattr(nc, key, val)
    return path


def write_areacella(path, nlat: int = 4, nlon: int = 8, units: str | None = "m2", radius: float = 6_371_000.0,
                    attrs: dict | None = None, values=None) -> Path:
    """Cell areas of the `grid` on a sphere (exact spherical-band formula), table fx."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    lat, lon, lat_bnds, lon_bnds = grid(nlat, nlon)
    if values is None:
        band = np.abs(np.sin(np.deg2rad(lat_bnds[:, 1])) - np.sin(np.deg2rad(lat_bnds[:, 0])))
        values = radius**2 * np.outer(band, np.deg2rad(lon_bnds[:, 1] - lon_bnds[:, 0]))
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("lat", nlat)
        nc.createDimension("lon", nlon)
        for name, centres, std, unit in (("lat", lat, "latitude", "degrees_north"), ("lon", lon, "longitude", "degrees_east")):
            c = nc.createVariable(name, "f8", (name,))
            c.standard_name, c.units = std, unit
            c[:] = centres
        a = nc.createVariable("areacella", "f8", ("lat", "lon"))
        if units is not None:
            a.units = units
        a[:] = values
        for key, val in (attrs or {}).items():
            setattr(nc, key, val)
    return path


def cmip_file_name(var, model, experiment, member="r1i1p1f1", table="Amon", grid_label="gn", time_range=None) -> str:
    name = f"{var}_{table}_{model}_{experiment}_{member}_{grid_label}"
    return f"{name}_{time_range}.nc" if time_range else f"{name}.nc"


def drs_dir(root, model, experiment, member="r1i1p1f1", var="tas", table="Amon", grid_label="gn",
            version="v20260101") -> Path:
    return Path(root) / model / experiment / member / table / var / grid_label / version


def write_run(
    root,
    model: str = "TESTMODEL-1",
    experiment: str = "piControl",
    member: str = "r1i1p1f1",
    variables=REQUIRED,
    *,
    layout: str = "drs",
    start_year: int = 1850,
    nyears: int = 2,
    files_per_variable: int = 1,
    calendar: str | None = "noleap",
    version: str = "v20260101",
    values: dict | None = None,
    attrs: dict | None = None,
    areacella: bool = False,
    grid_label: str = "gn",
    **kwargs,
) -> list[Path]:
    """Write every variable of one run; ``nyears`` split evenly over ``files_per_variable`` files.

    Global attributes source_id/experiment_id/variant_label follow the path unless ``attrs`` says otherwise.
    """
    root = Path(root)
    global_attrs = {"source_id": model, "experiment_id": experiment, "variant_label": member}
    global_attrs.update(attrs or {})
    per_file = nyears // files_per_variable
    written = []
    for var in variables:
        for f in range(files_per_variable):
            y0 = start_year + f * per_file
            n = per_file if f < files_per_variable - 1 else nyears - f * per_file
            time_range = f"{y0:04d}01-{y0 + n - 1:04d}12"
            folder = drs_dir(root, model, experiment, member, var, "Amon", grid_label, version) if layout == "drs" else root
            path = folder / cmip_file_name(var, model, experiment, member, "Amon", grid_label, time_range)
            written.append(
                write_monthly_file(
                    path, var, (values or {}).get(var), calendar=calendar, start_year=y0, nyears=n,
                    attrs=global_attrs, **kwargs,
                )
            )
    if areacella:
        folder = drs_dir(root, model, experiment, member, "areacella", "fx", grid_label, version) if layout == "drs" else root
        path = folder / cmip_file_name("areacella", model, experiment, member, "fx", grid_label)
        written.append(write_areacella(path, kwargs.get("nlat", 4), kwargs.get("nlon", 8), attrs=global_attrs))
    return written


@pytest.fixture
def cmip():
    """The helpers of this module, for tests that prefer a fixture to an import."""
    return types.SimpleNamespace(
        write_monthly_file=write_monthly_file,
        write_areacella=write_areacella,
        write_run=write_run,
        cmip_file_name=cmip_file_name,
        drs_dir=drs_dir,
        grid=grid,
        month_list=month_list,
    )


def rewrite_file(src, dst, *, file_format: str = "NETCDF4", chunk_steps: int | None = None, compress: bool = True,
                 pack: bool = False, transpose: bool = False) -> Path:
    """Copy a NetCDF file with its fields (time, lat, lon) stored another way.

    ``file_format`` "NETCDF3_64BIT_OFFSET" writes a classic, uncompressed file; ``chunk_steps`` sets the time
    steps per storage chunk (1: the layout many CMIP writers produce); ``pack`` stores the fields as int16 with
    ``scale_factor``/``add_offset`` (CF packing); ``transpose`` stores them as (time, lon, lat).
    """
    dst = Path(dst)
    dst.parent.mkdir(parents=True, exist_ok=True)
    with netCDF4.Dataset(src) as a, netCDF4.Dataset(dst, "w", format=file_format) as b:
        b.setncatts({k: a.getncattr(k) for k in a.ncattrs()})
        for name, dim in a.dimensions.items():
            b.createDimension(name, None if dim.isunlimited() else len(dim))
        for name, var in a.variables.items():
            var.set_auto_maskandscale(False)
            attrs = {k: var.getncattr(k) for k in var.ncattrs() if k != "_FillValue"}
            fill = var.getncattr("_FillValue") if "_FillValue" in var.ncattrs() else None
            dims, data, dtype = var.dimensions, var[...], var.dtype
            kwargs = {}
            if len(dims) == 3 and dims[0] == "time":
                if transpose:
                    dims, data = (dims[0], dims[2], dims[1]), data.transpose(0, 2, 1)
                if pack:
                    missing = ~np.isfinite(data) if fill is None else (data == fill) | ~np.isfinite(data)
                    lo, hi = float(data[~missing].min()), float(data[~missing].max())
                    scale = np.float32((hi - lo) / 60000.0 or 1.0)
                    offset = np.float32((hi + lo) / 2.0)
                    data = np.where(missing, -32768, np.round((data - offset) / scale)).astype("i2")
                    dtype, fill = np.dtype("i2"), np.int16(-32768)
                    attrs.update(scale_factor=scale, add_offset=offset)
                if file_format.startswith("NETCDF4"):
                    steps = chunk_steps or max(1, data.shape[0])
                    kwargs = dict(zlib=compress, complevel=1, shuffle=compress,
                                  chunksizes=(min(steps, max(1, data.shape[0])),) + data.shape[1:])
            v = b.createVariable(name, dtype, dims, fill_value=fill, **kwargs)
            v.setncatts(attrs)
            if data.size:
                v[:] = data
    return dst

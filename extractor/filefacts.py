"""One local NetCDF file in one task, without xarray: its metadata read and checked, its values reduced.

Opening a file through xarray (its lazy arrays, CF decoding, indexes, merging) cost 25–30 ms of CPU per file,
as much as reading and decompressing a 13 MB file and several times the cost of reading an uncompressed one; and
it was done in the main process on a cluster. Here the file's task opens it once with netCDF4, takes the few
things the run needs (its dates, decoded as xarray decodes them; its grid; its attributes) and reduces its values
to global means (`filemeans.file_global_means`) with the same handle. What leaves the task is small.

This is a fast path, not a second reader: a file with anything it does not handle exactly as the reference path
(`runs.global_mean_series`, through xarray) does — a missing calendar, packed or masked times, auxiliary
coordinates, a grid other than the run's, any check that fails — comes back as `Deferred`, and its whole run
takes the reference path, which gives the same numbers and names the problem with its own message.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import netCDF4
import numpy as np
from xarray.coding.times import decode_cf_datetime

from .catalog import RunFiles
from .classicmap import open_classic
from .errors import ArchiveError
from .filemeans import NETCDF_LOCK, FileSource, file_global_means
from .means import lat_lon_names
from .rawchunks import read_raw_chunks
from .runs import CALENDARS, month_index, units_offset

#: attributes xarray's CF decoding moves from a variable's ``attrs`` into its ``encoding`` (xarray's conventions)
ENCODING_ATTRS = frozenset({"_FillValue", "missing_value", "scale_factor", "add_offset", "_Unsigned", "dtype",
                            "coordinates", "_Encoding"})
#: and, for dates, their units and calendar
DATE_ATTRS = frozenset({"units", "calendar"})
# attributes that change the numbers a variable decodes to: dates carrying them take the reference path
_VALUE_ATTRS = frozenset({"_FillValue", "missing_value", "scale_factor", "add_offset", "_Unsigned"})


@dataclass(frozen=True)
class Deferred:
    """A file or run the fast path leaves to the reference path; `why` says what it does not handle."""

    why: str


@dataclass(frozen=True)
class FileFacts:
    """What a run needs of one of its files: dates, grid, attributes and the global means of its variable."""

    path: str
    calendar: str  # as given (lower case), one of `runs.CALENDARS`
    months: np.ndarray  # months since year 0 of each step
    times: np.ndarray  # the steps' dates as stored (numbers in `time_units`; decoded by `dates`)
    time_units: str
    time_attrs: dict  # decoded (units, calendar and encoding attributes left out)
    bounds: np.ndarray | None  # (steps, 2) dates as stored, or None without time bounds
    bounds_attrs: dict
    bounds_encoding: tuple[str, str] | None  # the bounds' units and calendar
    lat: np.ndarray
    lon: np.ndarray
    attrs: dict  # the file's global attributes
    var_attrs: dict  # the variable's, decoded, units the run's
    offset: float | None = None  # added to every value to reach the run's units (CF/UDUNITS degC → K)
    scalars: dict = field(default_factory=dict)  # scalar coordinate name → (value, attrs)
    means: np.ndarray | None = None


def _attrs(var) -> dict:
    return {k: var.getncattr(k) for k in var.ncattrs()}


def _decoded(attrs: dict, dates: bool = False) -> dict:
    drop = ENCODING_ATTRS | DATE_ATTRS if dates else ENCODING_ATTRS
    return {k: v for k, v in attrs.items() if k not in drop}


def _raw(var) -> np.ndarray:
    var.set_auto_maskandscale(False)
    return np.asarray(var[...])


def read_file_facts(run: RunFiles, path, variable: str, grid: tuple[str, str],
                    weights: np.ndarray) -> FileFacts | Deferred:
    """The facts of one file of `run` (its `variable` on the run's `grid`, (lat, lon) dims of `weights`), or
    `Deferred` when the reference path must take the run."""
    # a classic file's header read by scipy, its values mapped (classicmap.py); anything else through netCDF4
    nc = open_classic(path) if read_raw_chunks() else None
    if nc is None:
        try:
            with NETCDF_LOCK:
                nc = netCDF4.Dataset(str(path), "r")
        except Exception as err:  # noqa: BLE001 — the reference path names the unreadable file
            return Deferred(f"cannot be opened ({type(err).__name__})")
    try:
        try:
            with NETCDF_LOCK:
                facts = _metadata(nc, run, path, variable, grid)
        except Exception as err:  # noqa: BLE001 — e.g. an unreadable coordinate: the reference path names it
            return Deferred(f"metadata cannot be read ({type(err).__name__})")
        if isinstance(facts, Deferred):
            return facts
        dims = nc.variables[variable].dimensions
        axes = (dims.index("time"), dims.index(grid[0]), dims.index(grid[1]))
        source = FileSource(str(path), variable, int(facts.times.size), axes, facts.offset)
        try:
            means = file_global_means(source, weights, handle=nc)
        except Exception as err:  # noqa: BLE001 — the reference path names the damaged file
            return Deferred(f"values cannot be read ({type(err).__name__})")
        return replace(facts, means=means)
    finally:
        with NETCDF_LOCK:
            nc.close()


def _metadata(nc, run: RunFiles, path, variable: str, grid: tuple[str, str]) -> FileFacts | Deferred:
    variables = nc.variables
    if variable not in variables or "time" not in variables:
        return Deferred("variable or time missing")
    var = variables[variable]
    dims = var.dimensions
    if len(dims) != 3 or set(dims) != {"time", *grid} or any(g not in variables for g in grid):
        return Deferred(f"dims {dims} are not time and the run's grid {grid}")
    var_attrs = _attrs(var)
    scalars = {}
    for name in str(var_attrs.get("coordinates", "")).split():
        coord = variables.get(name)
        if coord is None or coord.ndim != 0 or _VALUE_ATTRS & set(coord.ncattrs()):
            return Deferred(f"coordinate {name!r} is not a plain scalar")
        scalars[name] = (_raw(coord), _decoded(_attrs(coord)))
    if _lat_lon(variables, grid, scalars) != grid:
        return Deferred("latitude/longitude found elsewhere than the run's grid")
    try:
        units, offset = units_offset(var_attrs.get("units"), variable, path, run)
    except ArchiveError:
        return Deferred("units")
    time = variables["time"]
    time_attrs = _attrs(time)
    calendar = str(time_attrs.get("calendar", "")).strip().lower()
    time_units = time_attrs.get("units")
    if (calendar not in CALENDARS or not isinstance(time_units, str) or " since " not in time_units
            or time.dimensions != ("time",) or _VALUE_ATTRS & set(time_attrs)):
        return Deferred("time's calendar or units")
    values = _raw(time)
    try:
        months = month_index(dates(values, time_units, calendar), path, run)
    except Exception as err:  # noqa: BLE001 — the reference path names the problem
        return Deferred(f"time ({type(err).__name__})")
    bounds, bounds_attrs, bounds_encoding = _bounds(variables, time_attrs, time_units, calendar)
    if isinstance(bounds, Deferred):
        return bounds
    decoded = _decoded(var_attrs)
    decoded["units"] = units
    return FileFacts(str(path), calendar, months, values, time_units, _decoded(time_attrs, dates=True), bounds,
                     bounds_attrs, bounds_encoding, np.asarray(_raw(variables[grid[0]]), dtype=np.float64),
                     np.asarray(_raw(variables[grid[1]]), dtype=np.float64), _attrs(nc), decoded, offset, scalars)


def dates(values: np.ndarray, units: str, calendar: str) -> np.ndarray:
    """Stored dates decoded as the reference path decodes them (xarray's own function, cftime dates).

    Each distinct number is decoded once: time bounds share every inner edge with the next step's (2N numbers, N + 1
    dates), and a date costs about 2.5 µs to build."""
    values = np.asarray(values)
    distinct, where = np.unique(values.ravel(), return_inverse=True)
    if distinct.size == values.size:
        return decode_cf_datetime(values, units, calendar, use_cftime=True)
    return decode_cf_datetime(distinct, units, calendar, use_cftime=True)[where].reshape(values.shape)


def _bounds(variables, time_attrs: dict, units: str, calendar: str):
    """The time bounds as stored (steps × 2), their decoded attributes and their (units, calendar); Nones without
    bounds. Dates travel between tasks as numbers: a thousand cftime dates take 20 ms to pickle and unpickle."""
    name = time_attrs.get("bounds")
    if not name or name not in variables:
        return None, {}, None
    var = variables[name]
    attrs = _attrs(var)
    if var.ndim != 2 or "time" not in var.dimensions or _VALUE_ATTRS & set(attrs):
        return Deferred("time bounds"), {}, None
    values = _raw(var)
    if var.dimensions[0] != "time":
        values = values.T
    # xarray gives bounds the time's units and calendar unless they carry their own
    return values, _decoded(attrs, dates=True), (attrs.get("units", units), attrs.get("calendar", calendar))


def _lat_lon(variables, grid: tuple[str, str], scalars: dict) -> tuple[str | None, str | None]:
    """The names `means.find_lat_lon` would find among the variable's coordinates (its grid and its scalars)."""
    return lat_lon_names({name: _attrs(variables[name]) for name in (*grid, *scalars)})

"""Writing demo runs as CF/CMIP-style NetCDF files in the CMIP data reference syntax.

Paths: <archive>/<source_id>/<experiment_id>/<member_id>/<table_id>/<variable_id>/<grid_label>/<version>/
Names: <variable_id>_<table_id>_<source_id>_<experiment_id>_<member_id>_<grid_label>[_<YYYYMM>-<YYYYMM>].nc
Fields are written in time blocks so memory stays bounded on large grids; each file goes to a temporary
name in its folder first and is renamed when complete.
"""
from __future__ import annotations

import contextlib
from pathlib import Path

import netCDF4
import numpy as np

from sensemble.contract.atomic import atomic_path
from sensemble.contract.cf import CONVENTIONS as CF_CONVENTIONS, TEMPERATURE_ON_SCALE

from . import generations
from .fields import FieldRecipe, Grid
from .models import CONTROL, ModelSpec, Run

__all__ = ["VARIABLE_ATTRS", "GRID_LABEL", "VERSION", "CONVENTIONS", "branch_attributes", "write_run",
           "write_areacella"]

GRID_LABEL = "gn"
VERSION = "v20250101"
# CF version first (CF §2.6.1), then the CMIP global-attribute conventions the files imitate.
CONVENTIONS = f"{CF_CONVENTIONS} CMIP-6.2"
# No time stamp: the same seed must give byte-identical files.
HISTORY = "sensemble demo-archive: invented data, not output of any climate model"
FILL_VALUE = np.float32(1.0e20)
_COMPLEVEL = 1  # zlib level: 1 is several times faster than 4 for ~the same size on noisy float32
_BLOCK_BYTES = 32_000_000  # float64 bytes of one write block
_CHUNK_BYTES = 4_000_000  # at most this many float32 bytes in one storage chunk
# Storage chunks of 10 years or a divisor of it, so readers taking decades (or years) never split one.
_CHUNK_MONTHS = (120, 60, 24, 12, 6, 4, 3, 2, 1)

# CF standard names (CF standard name table) and CMIP-style long names.
VARIABLE_ATTRS = {
    "tas": {"standard_name": "air_temperature", "long_name": "Near-Surface Air Temperature", "units": "K",
            "cell_methods": "area: time: mean", "coordinates": "height", "units_metadata": TEMPERATURE_ON_SCALE},
    "rsdt": {"standard_name": "toa_incoming_shortwave_flux", "long_name": "TOA Incident Shortwave Radiation",
             "units": "W m-2", "positive": "down", "cell_methods": "area: time: mean"},
    "rsut": {"standard_name": "toa_outgoing_shortwave_flux", "long_name": "TOA Outgoing Shortwave Radiation",
             "units": "W m-2", "positive": "up", "cell_methods": "area: time: mean"},
    "rlut": {"standard_name": "toa_outgoing_longwave_flux", "long_name": "TOA Outgoing Longwave Radiation",
             "units": "W m-2", "positive": "up", "cell_methods": "area: time: mean"},
    "rsutcs": {"standard_name": "toa_outgoing_shortwave_flux_assuming_clear_sky",
               "long_name": "TOA Outgoing Clear-Sky Shortwave Radiation", "units": "W m-2", "positive": "up",
               "cell_methods": "area: time: mean"},
    "rlutcs": {"standard_name": "toa_outgoing_longwave_flux_assuming_clear_sky",
               "long_name": "TOA Outgoing Clear-Sky Longwave Radiation", "units": "W m-2", "positive": "up",
               "cell_methods": "area: time: mean"},
    "areacella": {"standard_name": "cell_area", "long_name": "Grid-Cell Area for Atmospheric Grid Variables",
                  "units": "m2", "cell_methods": "area: sum"},
}

_EXPERIMENT_TEXT = {
    "piControl": "pre-industrial control",
    "abrupt-4xCO2": "abrupt quadrupling of CO2",
    "1pctCO2": "1 percent per year increase in CO2",
    "hist-demo": "invented historical-type forcing (demo only)",
    "demo-rise": "invented scenario continuing hist-demo (demo only)",
    "demo-steady": "invented lower scenario continuing hist-demo, forcing levelling off (demo only)",
}


def _global_attributes(model: ModelSpec, run: Run | None, variable: str, grid: Grid, frequency: str,
                       table: str) -> dict:
    experiment_id = run.experiment_id if run else CONTROL
    member = run.member if run else "r1i1p1f1"
    nlat, nlon = grid.shape
    indices = member[1:].replace("i", " ").replace("p", " ").replace("f", " ").split()
    attrs = {
        "Conventions": CONVENTIONS,
        "history": HISTORY,
        "title": f"{model.source_id} output for the sensemble demo ensemble (invented data)",
        "comment": "Invented data from sensemble's demo_ensemble generator: not output of any real climate model.",
        "activity_id": "DEMO",
        "institution_id": model.institution_id,
        "institution": model.institution,
        "source_id": model.source_id,
        "source": f"{model.source_id}: invented two-layer energy-balance model with prescribed spatial patterns",
        "experiment_id": experiment_id,
        "experiment": _EXPERIMENT_TEXT[experiment_id],
        "sub_experiment_id": "none",
        "variant_label": member,
        "member_id": member,
        "realization_index": np.int32(indices[0]),
        "initialization_index": np.int32(indices[1]),
        "physics_index": np.int32(indices[2]),
        "forcing_index": np.int32(indices[3]),
        "frequency": frequency,
        "table_id": table,
        "variable_id": variable,
        "realm": "atmos",
        "grid_label": GRID_LABEL,
        "grid": f"regular latitude-longitude grid, {nlat} x {nlon}",
        "nominal_resolution": f"{180.0 / nlat:g} degree",
        "product": "model-output",
        "license": "Invented demonstration data; free to use for any purpose.",
    }
    if run is None or run.parent_experiment_id is None:
        attrs.update({"parent_experiment_id": "no parent", "parent_variant_label": "no parent",
                      "parent_source_id": "no parent", "parent_activity_id": "no parent"})
    return attrs


def _drs_folder(archive: Path, model: ModelSpec, experiment_id: str, member: str, table: str,
                variable: str) -> Path:
    return archive / model.source_id / experiment_id / member / table / variable / GRID_LABEL / VERSION


@contextlib.contextmanager
def _atomic_dataset(path: Path, file_format: str = "NETCDF4"):
    """A new NetCDF file open for writing under a temporary name; it replaces ``path`` when the block ends."""
    with atomic_path(path) as tmp:
        ds = netCDF4.Dataset(tmp, "w", format=file_format)
        try:
            yield ds
        finally:
            ds.close()


def _add_lat_lon(ds, grid: Grid) -> None:
    ds.createDimension("lat", grid.shape[0])
    ds.createDimension("lon", grid.shape[1])
    if "bnds" not in ds.dimensions:
        ds.createDimension("bnds", 2)
    for name, values, bounds, units, std, axis in (
        ("lat", grid.lat, grid.lat_bnds, "degrees_north", "latitude", "Y"),
        ("lon", grid.lon, grid.lon_bnds, "degrees_east", "longitude", "X"),
    ):
        v = ds.createVariable(name, "f8", (name,))
        v.setncatts({"bounds": f"{name}_bnds", "units": units, "axis": axis, "long_name": std.capitalize(),
                     "standard_name": std})
        v[:] = values
        b = ds.createVariable(f"{name}_bnds", "f8", (name, "bnds"))
        b[:] = bounds


def write_areacella(archive: Path, model: ModelSpec, grid: Grid, era: str = generations.CMIP6) -> Path:
    """The fx cell-area file, filed under the control run as is usual (CMIP5: member r0i0p0)."""
    gattrs = _global_attributes(model, model.run(CONTROL), "areacella", grid, "fx", "fx")
    file_format = "NETCDF4"
    if era == generations.CMIP5:
        ensemble = generations.CMIP5_FIXED_MEMBER
        path = (generations.folder(archive, model.institution_id, model.source_id, CONTROL, ensemble, "fx",
                                   "areacella", VERSION)
                / generations.file_name("areacella", "fx", model.source_id, CONTROL, ensemble))
        gattrs, file_format = generations.attributes(gattrs, None, ensemble), generations.CMIP5_FORMAT
    else:
        folder = _drs_folder(archive, model, CONTROL, "r1i1p1f1", "fx", "areacella")
        path = folder / f"areacella_fx_{model.source_id}_{CONTROL}_r1i1p1f1_{GRID_LABEL}.nc"
    with _atomic_dataset(path, file_format) as ds:
        ds.setncatts(gattrs)
        _add_lat_lon(ds, grid)
        v = ds.createVariable("areacella", "f4", ("lat", "lon"), zlib=True, complevel=_COMPLEVEL, shuffle=True,
                              fill_value=FILL_VALUE)
        v.setncatts(VARIABLE_ATTRS["areacella"])
        v[:] = grid.area
    return path


def branch_attributes(model: ModelSpec, run: Run, branch_time_in_parent: float,
                      branch_time_in_child: float) -> dict:
    """Where the run leaves its parent: `branch_time_in_parent` is in the parent's time units."""
    return {
        "parent_experiment_id": run.parent_experiment_id,
        "parent_variant_label": run.parent_member,
        "parent_source_id": model.source_id,
        "parent_activity_id": "DEMO",
        "parent_time_units": model.time_units,
        "branch_method": "standard",
        "branch_time_in_parent": float(branch_time_in_parent),
        "branch_time_in_child": float(branch_time_in_child),
    }


def write_run(archive: Path, model: ModelSpec, run: Run, branch: dict | None, variable: str,
              recipe: FieldRecipe, series: np.ndarray, grid: Grid, bounds: np.ndarray,
              era: str = generations.CMIP6) -> list[Path]:
    """Write one variable of one run, split into files of `model.file_years` years (or one file).

    bounds : month bounds (n_months, 2) in the model's time units and calendar
    branch : the run's branch attributes (`branch_attributes`), None for the control
    era : "CMIP6", or "CMIP5" for that generation's directories, names, attributes and file format
    """
    n_months = len(series)
    per_file = 12 * model.file_years if model.file_years else n_months
    folder = _drs_folder(archive, model, run.experiment_id, run.member, "Amon", variable)
    gattrs = _global_attributes(model, run, variable, grid, "mon", "Amon")
    if branch is not None:
        gattrs.update(branch)
    stem, file_format = f"{variable}_Amon_{model.source_id}_{run.experiment_id}_{run.member}_{GRID_LABEL}", "NETCDF4"
    if era == generations.CMIP5:
        experiment_id, ensemble = generations.experiment(run.experiment_id), generations.member(run.member)
        folder = generations.folder(archive, model.institution_id, model.source_id, experiment_id, ensemble, "Amon",
                                    variable, VERSION)
        gattrs = generations.attributes(gattrs, branch, ensemble)
        stem = generations.file_name(variable, "Amon", model.source_id, experiment_id, ensemble)[:-3]
        file_format = generations.CMIP5_FORMAT
    nlat, nlon = grid.shape
    block = max(1, _BLOCK_BYTES // (8 * nlat * nlon))
    paths = []
    for first in range(0, n_months, per_file):
        last = min(first + per_file, n_months)  # exclusive
        y0, m0 = run.start_year + first // 12, first % 12 + 1
        y1, m1 = run.start_year + (last - 1) // 12, (last - 1) % 12 + 1
        path = folder / f"{stem}_{y0:04d}{m0:02d}-{y1:04d}{m1:02d}.nc"
        nt = last - first
        file_bounds = bounds[first:last]
        with _atomic_dataset(path, file_format) as ds:
            # the cell areas live in their own fx file (CF §2.6.3, §7.2)
            ds.setncatts(gattrs | {"external_variables": "areacella"})
            ds.createDimension("time", nt)
            ds.createDimension("bnds", 2)
            t = ds.createVariable("time", "f8", ("time",))
            t.setncatts({"bounds": "time_bnds", "units": model.time_units, "calendar": model.calendar,
                         "axis": "T", "long_name": "time", "standard_name": "time"})
            t[:] = file_bounds.mean(axis=1)
            tb = ds.createVariable("time_bnds", "f8", ("time", "bnds"))
            tb[:] = file_bounds
            _add_lat_lon(ds, grid)
            if variable == "tas":
                h = ds.createVariable("height", "f8", ())
                h.setncatts({"units": "m", "axis": "Z", "positive": "up", "long_name": "height",
                             "standard_name": "height"})
                h.assignValue(2.0)
            fits = [c for c in _CHUNK_MONTHS if c * 4 * nlat * nlon <= _CHUNK_BYTES] or [1]
            chunk_t = min(nt, fits[0])
            v = ds.createVariable(variable, "f4", ("time", "lat", "lon"), zlib=True, complevel=_COMPLEVEL, shuffle=True,
                                  chunksizes=(chunk_t, nlat, nlon), fill_value=FILL_VALUE)
            v.setncatts(VARIABLE_ATTRS[variable] | {"cell_measures": "area: areacella"})
            for lo in range(first, last, block):
                hi = min(lo + block, last)
                months = np.arange(lo, hi) % 12
                v[lo - first: hi - first] = recipe.build(series[lo:hi], months).astype(np.float32)
        paths.append(path)
    return paths

"""Opening one run: its files checked and joined along time, then reduced to lazy global means.

Every check raises `ArchiveError` naming the model, the file and the problem, so a batch
can record the failure of this run and go on with the others. Fallbacks that are safe
(a missing calendar read as CF's default, file attributes disagreeing with the path, which
names the run) are kept as quality flags in ``attrs["flags"]``. Files are opened read-only and stay lazy (dask);
nothing in the archive is modified.
"""
from __future__ import annotations

import re
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from sensemble.contract.flags import ATTRIBUTE_MISMATCH, BRANCH_TIME_UNREADABLE, CALENDAR_DEFAULTED, TIME_TRIMMED

from .catalog import RunFiles
from .errors import ArchiveError
from .filemeans import READ_THROUGH_XARRAY, file_task_mean, open_file
from .means import EARTH_RADIUS_M, MIN_SPHERE_FRACTION, area_weights, find_lat_lon, global_mean, sphere_fraction
from .settings import ExtractionSettings
from .opened import register
from .stores import name_of, open_dataset

#: time chunk of the lazy arrays: ten years of monthly fields
DEFAULT_CHUNKS = None  # sized per file: whole years, about CHUNK_BYTES of data per chunk
# A chunk of ~64 MB keeps task overhead small on coarse grids and memory bounded on fine ones
# (a 1° month of float32 is 0.26 MB, so ~20 years; an 8×16 grid takes a whole file in one chunk).
CHUNK_BYTES = 64 * 2**20

#: variables a run must have unless the caller says otherwise (DESIGN.md: tas, rsdt, rsut, rlut)
REQUIRED_VARIABLES = ExtractionSettings().required_variables

#: CF calendar names (CF conventions §4.4.1), lower case; aliases map to one name
CALENDARS = {
    "standard": "standard",
    "gregorian": "standard",
    "proleptic_gregorian": "proleptic_gregorian",
    "noleap": "noleap",
    "365_day": "noleap",
    "all_leap": "all_leap",
    "366_day": "all_leap",
    "360_day": "360_day",
    "julian": "julian",
}

TEMPERATURE = {"tas"}
#: CF/UDUNITS: K = degC + 273.15
CELSIUS_TO_KELVIN = 273.15
KELVIN = {"K", "kelvin", "Kelvin", "degK", "deg_K", "degrees_K"}
CELSIUS = {"degC", "deg_C", "Celsius", "celsius", "degree_Celsius", "degrees_Celsius", "degree_C", "degrees_C", "°C"}
# spellings of W m-2 once "**"/"^" are dropped and separators reduced to one space
FLUX_UNITS = {"W m-2", "W/m2", "W / m2", "Wm-2", "W m -2", "watt m-2", "watts m-2", "W/m 2"}

# global attributes naming the run, checked against the path: attribute name → RunFiles field.
# CMIP5 files name the model `model_id` and give the member as three integers (see `_cmip5_member`).
_IDENTITY = {"source_id": "model", "model_id": "model", "experiment_id": "experiment_id", "variant_label": "member"}


def open_run(
    run: RunFiles, chunks: dict | None = None, required: tuple[str, ...] = REQUIRED_VARIABLES
) -> xr.Dataset:
    """Open, check and join the files of one run, lazily.

    Parameters
    ----------
    run : RunFiles
        From `extractor.catalog.scan`.
    chunks : dict, optional
        Dask chunks; default: whole years, about `CHUNK_BYTES` per chunk, chosen per file.
    required : tuple of str
        Variables the run must have (default `REQUIRED_VARIABLES`; pass
        ``settings.required_variables`` to follow a config).

    Returns
    -------
    Dataset
        Every variable of the run on one ``time`` axis (cftime dates, the run's calendar),
        temperatures in K, fluxes in W m-2; ``time_bnds``, ``lat_bnds``, ``lon_bnds`` when the
        files have them (cell areas: `open_area`). Attributes as in the
        "Annual global-mean series" contract of DEVELOPERS.md.

    Raises
    ------
    ArchiveError
        Unreadable file, missing variable, wrong units, unknown calendar, time steps that are
        not monthly, gaps, overlaps, duplicated or non-monotonic times, grids that differ
        between variables, files of one run disagreeing on who they are.
    """
    return _open_run(run, chunks, required)[0]


def _open_run(run: RunFiles, chunks: dict | None, required: tuple[str, ...]) -> tuple[xr.Dataset, dict]:
    """`open_run`, and where each variable's time steps lie: variable → (its files in time order as
    (path, steps, dims, offset), the positions kept on the run's time axis or None for all)."""
    chunks = None if chunks is None else dict(chunks)
    flags: list[str] = list(run.flags)
    missing = [v for v in required if v not in run.files]
    if missing or not run.files:
        folder = next((Path(str(paths[0])).parent for paths in run.files.values() if paths), None)
        raise _error(
            run, folder, f"no files of required variable(s) {', '.join(missing) or 'any'}",
            "add the missing variables to the archive or leave this run out",
        )

    series: dict[str, xr.DataArray] = {}
    months: dict[str, np.ndarray] = {}
    first: dict[str, xr.Dataset] = {}
    bounds: dict[str, xr.DataArray] = {}
    mismatches: list[str] = []
    layout: dict[str, tuple[list, np.ndarray | None]] = {}
    calendar: tuple[str, Path] | None = None
    for variable, paths in run.files.items():
        opened = []
        for path in paths:
            ds, file_calendar, defaulted, offset = _open_file(path, variable, run, chunks)
            if defaulted and CALENDAR_DEFAULTED not in flags:
                flags.append(CALENDAR_DEFAULTED)
            if calendar is None:
                calendar = (file_calendar, path, defaulted)
            elif CALENDARS[file_calendar] != CALENDARS[calendar[0]]:
                if defaulted or calendar[2]:
                    # name the file without a calendar attribute: that is the one to fix
                    lacking, other, cal = ((path, calendar[1], calendar[0]) if defaulted
                                           else (calendar[1], path, file_calendar))
                    raise _error(
                        run, lacking, f"time has no calendar attribute (read as CF's default 'standard') but "
                        f"{name_of(other)} uses {cal!r}", f"add calendar = {cal!r} to the time variable of this file",
                    )
                raise _error(
                    run, path, f"calendar {file_calendar!r} differs from {calendar[0]!r} in {name_of(calendar[1])}",
                    "all files of a run must use one calendar",
                )
            _collect_identity(ds.attrs, path, run, mismatches)
            opened.append((ds, _month_index(ds, path, run), path, offset))
        opened.sort(key=lambda item: item[1][0])
        _check_joins(opened, run)
        _check_same_grid([(ds[variable], path) for ds, _, path, _ in opened], run)
        series[variable] = xr.concat(
            [ds[variable] for ds, _, _, _ in opened], dim="time", coords="minimal", compat="override", join="override"
        )
        layout[variable] = ([(path, ds.sizes["time"], ds[variable].dims, offset) for ds, _, path, offset in opened],
                            None)
        months[variable] = np.concatenate([m for _, m, _, _ in opened])
        first[variable] = opened[0][0]
        if variable == next(iter(run.files)):  # the run's time axis and bounds are the first variable's
            bnds = _time_bounds(opened)
            if bnds is not None:
                bounds[variable] = bnds

    reference = next(iter(run.files))
    ref_path = run.files[reference][0]
    _check_grids_between_variables(series, run, reference)

    # one time axis for all variables: the months every variable has
    common = months[reference]
    for variable in series:
        common = np.intersect1d(common, months[variable])
    if common.size == 0:
        raise _error(run, ref_path, "the variables share no time step", "give all variables the same period")
    trimmed = any(months[v].size != common.size for v in series)
    if trimmed:
        flags.append(TIME_TRIMMED)
    ref_positions = np.flatnonzero(np.isin(months[reference], common))
    time = series[reference]["time"].isel(time=ref_positions)
    data_vars = {}
    for variable, da in series.items():
        keep = np.flatnonzero(np.isin(months[variable], common))
        # all steps kept (the usual case): no indexing layer, which would copy every chunk
        part = da if keep.size == da.sizes["time"] else da.isel(time=keep)
        if part is not da:
            layout[variable] = (layout[variable][0], keep)
        data_vars[variable] = part.assign_coords(time=time.values)
    ds = xr.Dataset(data_vars)
    time_attrs = {k: v for k, v in time.attrs.items() if k != "bounds"}
    if reference in bounds:
        ds["time_bnds"] = bounds[reference].isel(time=ref_positions).assign_coords(time=time.values)
        time_attrs["bounds"] = "time_bnds"
    ds["time"].attrs = time_attrs  # after the bounds: adding them replaced the time coordinate's attributes
    template = first[reference]
    lat, lon = find_lat_lon(template)
    for coord in (lat, lon):
        name = template[coord].attrs.get("bounds") or f"{coord}_bnds"
        if name in template.variables and "time" not in template[name].dims:
            ds[f"{coord}_bnds"] = template[name].load()
            ds[coord].attrs["bounds"] = f"{coord}_bnds"

    attrs = _run_attributes(run, mismatches, template.attrs, flags)
    attrs["calendar"] = CALENDARS[calendar[0]] if calendar else "standard"
    attrs["time_units"] = str(template["time"].encoding.get("units", ""))
    attrs["files"] = ";".join(str(p) for p in run.all_files())
    attrs["flags"] = ";".join(dict.fromkeys(flags))
    ds.attrs = attrs
    return ds, layout


def global_mean_series(
    run: RunFiles, chunks: dict | None = None, required: tuple[str, ...] = REQUIRED_VARIABLES
) -> xr.Dataset:
    """Lazy float64 global means (dim ``time``) of every variable of a run.

    All variables sit in one Dataset so that a single ``dask.compute`` over a batch of runs
    reads each file once. Weights come from `extractor.means.area_weights`; a fallback to
    cos φ adds the flag ``cos_weights``.

    Returns
    -------
    Dataset
        Dimension ``time``; the run's variables (units kept, ``cell_methods`` with ``area: mean``),
        ``time_bnds`` when present; attributes of `open_run` plus ``weights``.
    """
    ds, layout = _open_run(run, chunks, required)
    try:
        weights, flag = area_weights(ds, open_area(run))
    except ArchiveError as err:
        raise _error(run, run.areacella or run.files[next(iter(run.files))][0], err.message, err.hint) from None
    fraction = sphere_fraction(weights)
    if fraction is not None and fraction < MIN_SPHERE_FRACTION:
        source = "areacella" if weights.attrs.get("weight_source") == "areacella" else "cell areas from lat/lon bounds"
        raise _error(
            run, run.areacella if source == "areacella" else run.files[next(iter(run.files))][0],
            f"the grid covers {fraction:.1%} of the sphere ({source} against 4πR², R = {EARTH_RADIUS_M / 1e3:g} km; "
            f"at least {MIN_SPHERE_FRACTION:.0%} needed): a regional subset, not a global grid",
            "give the run's global fields (a global mean needs the whole sphere), or leave this run out",
        )
    # one task per file, read and reduced together (`extractor.filemeans`), unless chunks were asked for
    means, through_xarray = {}, []
    for v in run.files:
        mean = file_task_mean(ds[v], weights, *layout[v]) if chunks is None else None
        means[v] = global_mean(ds[v], weights) if mean is None else mean
        if mean is None:
            through_xarray.append(v)
    out = xr.Dataset(means)
    out.encoding[READ_THROUGH_XARRAY] = tuple(through_xarray)
    if "time_bnds" in ds:
        out["time_bnds"] = ds["time_bnds"]
    out["time"].attrs = dict(ds["time"].attrs)
    out.attrs = dict(ds.attrs)
    out.attrs["weights"] = weights.attrs.get("weight_source", "")
    if flag:
        flags = [f for f in out.attrs["flags"].split(";") if f]
        out.attrs["flags"] = ";".join(dict.fromkeys(flags + [flag]))
    return out


# ---------------------------------------------------------------------------- files


def _error(run: RunFiles, path, message: str, hint: str | None = None) -> ArchiveError:
    return ArchiveError(message, path=path, model=run.model, member=run.member, experiment_id=run.experiment_id, hint=hint)


def _time_chunks(raw: xr.Dataset, variable: str) -> dict:
    """Whole years of about `CHUNK_BYTES` of `variable` per chunk."""
    da = raw[variable]
    per_step = max(1, int(np.prod([n for d, n in da.sizes.items() if d != "time"])) * da.dtype.itemsize)
    years = max(1, CHUNK_BYTES // (per_step * 12))
    return {"time": int(min(years * 12, max(da.sizes.get("time", 1), 1)))}


def _open_file(path: Path, variable: str, run: RunFiles,
               chunks: dict | None) -> tuple[xr.Dataset, str, bool, float | None]:
    """One file, lazily, with checks on the variable, its units and the calendar; and the offset its values
    were given to reach the run's units (None: none)."""
    try:
        if chunks is None:
            raw = open_file(path, decode_times=False)
            if variable in raw.data_vars and "time" in raw[variable].dims:
                # named by file and variable (unique in a batch): dask would otherwise hash the lazy array's
                # description, a third of what chunking costs
                raw[variable] = raw[variable].chunk(_time_chunks(raw, variable),
                                                    token=dask.base.tokenize(str(path), variable))
        else:
            raw = open_dataset(path, decode_times=False, chunks=chunks)
        register(raw)
    except Exception as err:  # netCDF4 raises OSError, xarray ValueError; both mean unreadable
        text = str(err).replace(f": {str(path)!r}", "").replace(str(path), "the file")
        raise _error(run, path, f"cannot be read ({type(err).__name__}: {text})",
                     "the file is truncated or not NetCDF: replace it with a good copy") from None
    if variable not in raw.data_vars:
        raise _error(run, path, f"has no variable {variable!r}", "check the file's contents against its name")
    if "time" not in raw[variable].dims:
        raise _error(run, path, f"{variable} has no time dimension", "give monthly fields on a 'time' axis")
    time = raw["time"]
    if "units" not in time.attrs or " since " not in str(time.attrs["units"]):
        raise _error(run, path, "time has no CF units ('<unit> since <date>')", "add units to the time variable")
    defaulted = False
    calendar = time.attrs.get("calendar")
    if calendar is None:
        # CF conventions §4.4.1: a missing calendar attribute means the standard calendar
        calendar, defaulted = "standard", True
    calendar = str(calendar).strip().lower()
    if calendar not in CALENDARS:
        raise _error(
            run, path, f"unknown calendar {time.attrs.get('calendar')!r}",
            f"use a CF calendar name ({', '.join(sorted(CALENDARS))})",
        )
    raw["time"].attrs["calendar"] = calendar
    bounds_name = time.attrs.get("bounds")
    if bounds_name in raw.variables:
        raw[bounds_name].attrs.setdefault("calendar", calendar)
        raw[bounds_name].attrs.setdefault("units", time.attrs["units"])
    try:
        ds = xr.decode_cf(raw, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True))
    except Exception as err:
        raise _error(run, path, f"time cannot be decoded ({err})", "check the time units and calendar") from None
    ds[variable], offset = _checked_units(ds[variable], variable, path, run)
    return ds, calendar, defaulted, offset


def units_offset(units, variable: str, path, run: RunFiles) -> tuple[str, float | None]:
    """The run's units of `variable` (K or W m-2) and the offset its values need to reach them (None: none), from
    the file's ``units`` attribute (None: missing); raises `ArchiveError` for anything else."""
    if units is None:
        raise _error(run, path, f"{variable} has no units attribute", "add CF units; units are never guessed")
    text = str(units).strip()
    if variable in TEMPERATURE:
        if text in KELVIN:
            return "K", None
        if text in CELSIUS:
            return "K", CELSIUS_TO_KELVIN
        raise _error(run, path, f"{variable} units {text!r} are not a temperature (K or degC)", "fix the units attribute")
    spelled = re.sub(r"[\s.·]+", " ", text.replace("**", "").replace("^", "")).strip()
    if spelled not in FLUX_UNITS:
        raise _error(run, path, f"{variable} units {text!r} are not W m-2", "give fluxes in W m-2 (fix the units attribute)")
    return "W m-2", None


def _checked_units(da: xr.DataArray, variable: str, path: Path, run: RunFiles) -> tuple[xr.DataArray, float | None]:
    units, offset = units_offset(da.attrs.get("units"), variable, path, run)
    if offset is not None:
        out = da + offset
        out.attrs = dict(da.attrs)
        out.encoding = dict(da.encoding)
        out = out.rename(da.name)
    else:
        out = da if variable in TEMPERATURE else da.copy()
    out.attrs["units"] = units
    return out, offset


def _month_index(ds: xr.Dataset, path: Path, run: RunFiles) -> np.ndarray:
    """Months since year 0 of each time step; checks the file's steps are monthly and in order."""
    return month_index(ds["time"].values, path, run)


def month_index(times: np.ndarray, path, run: RunFiles) -> np.ndarray:
    """Months since year 0 of each of a file's decoded times (cftime dates); checks they are monthly and in order."""
    if times.size == 0:
        raise _error(run, path, "has no time steps", "replace the file")
    index = np.array([t.year * 12 + t.month - 1 for t in times], dtype=np.int64)
    step = np.diff(index)
    # report the most fundamental problem first: order, then duplicates, then spacing
    checks = (
        (step < 0, lambda i: f"time is not monotonic ({times[i]} → {times[i + 1]})"),
        (np.array([a == b for a, b in zip(times[:-1], times[1:])], dtype=bool), lambda i: f"duplicated time step {times[i]}"),
        (step == 0, lambda i: f"time steps are not monthly ({times[i]} → {times[i + 1]})"),
        (step > 1, lambda i: f"gap of {step[i] - 1} month(s) in time ({times[i]} → {times[i + 1]})"),
    )
    for bad, problem in checks:
        if bad.size and bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise _error(run, path, problem(i), "monthly fields with one step per month, in order, are needed")
    return index


def _check_joins(opened: list, run: RunFiles) -> None:
    """Consecutive files of one variable must follow each other month by month."""
    for (_, before, path_a, _), (_, after, path_b, _) in zip(opened, opened[1:]):
        step = after[0] - before[-1]
        if step <= 0:
            raise _error(
                run, path_b, f"overlaps {name_of(path_a)} by {1 - step} month(s)", "remove the duplicate or overlapping file"
            )
        if step > 1:
            raise _error(
                run, path_b, f"gap of {step - 1} month(s) after {name_of(path_a)}", "supply the missing file"
            )


def _grid_of(da: xr.DataArray) -> dict[str, np.ndarray]:
    lat, lon = find_lat_lon(da)
    return {name: np.asarray(da[name].values, dtype=np.float64) for name in (lat, lon)}


def _same_grid(a: dict, b: dict) -> bool:
    return a.keys() == b.keys() and all(
        a[k].shape == b[k].shape and np.allclose(a[k], b[k], atol=1e-4) for k in a
    )


def _check_same_grid(items: list[tuple[xr.DataArray, Path]], run: RunFiles) -> None:
    reference = _grid_of(items[0][0])
    for da, path in items[1:]:
        if not _same_grid(reference, _grid_of(da)):
            raise _error(run, path, f"grid differs from {name_of(items[0][1])}", "all files of a variable need one grid")


def _check_grids_between_variables(series: dict[str, xr.DataArray], run: RunFiles, reference: str) -> None:
    grid = _grid_of(series[reference])
    for variable, da in series.items():
        if variable != reference and not _same_grid(grid, _grid_of(da)):
            raise _error(
                run, run.files[variable][0], f"grid of {variable} differs from that of {reference}",
                "regrid or use the variables of one grid_label",
            )


def _time_bounds(opened: list) -> xr.DataArray | None:
    parts = []
    for ds, *_ in opened:
        name = ds["time"].attrs.get("bounds") or ds["time"].encoding.get("bounds")
        if not name or name not in ds.variables:
            return None
        b = ds[name]
        parts.append(b.rename({d: "bnds" for d in b.dims if d != "time"}).transpose("time", "bnds"))
    # joined as plain arrays: xr.concat would align the files' cftime indexes (slow, and open_run puts the
    # run's time coordinate on the bounds anyway)
    values = np.concatenate([np.asarray(b.values) for b in parts])
    return xr.DataArray(values, dims=("time", "bnds"), name="time_bnds", attrs=dict(parts[0].attrs))


def open_area(run: RunFiles) -> xr.DataArray | None:
    """The run's cell areas (loaded: a single 2-D field), or None when the run has none."""
    path = run.areacella
    if path is None:
        return None
    try:
        with open_dataset(path) as area_file:
            if "areacella" not in area_file.data_vars:
                raise _error(run, path, "has no variable 'areacella'", "check the file's contents against its name")
            return area_file["areacella"].load()
    except ArchiveError:
        raise
    except Exception as err:
        raise _error(run, path, f"cannot be read ({type(err).__name__}: {err})", "replace the file") from None


# ---------------------------------------------------------------------------- identity


def _cmip5_member(attrs: dict) -> str | None:
    """CMIP5's ensemble member ``r<realization>i<initialization_method>p<physics_version>``, when all three are given."""
    try:
        parts = [int(np.asarray(attrs[k]).ravel()[0]) for k in ("realization", "initialization_method", "physics_version")]
    except (KeyError, TypeError, ValueError, IndexError):
        return None
    return "r{}i{}p{}".format(*parts)


def _collect_identity(file_attrs, path: Path, run: RunFiles, mismatches: list[str]) -> None:
    """Note every identity attribute of one file that disagrees with the run's path.

    Runs are identified by their DRS path and file names (issue 11: one file's typo in ``source_id`` must not
    fail a model), so a disagreement is recorded with the file's name, never refused.
    """
    found = {attr: str(file_attrs[attr]).strip() for attr in _IDENTITY if file_attrs.get(attr) is not None}
    if "variant_label" not in found and (member := _cmip5_member(file_attrs)) is not None:
        found["realization/initialization_method/physics_version"] = member
    for attr, value in found.items():
        expected = getattr(run, _IDENTITY.get(attr, "member"))
        if value != expected:
            mismatches.append(f"{name_of(path)}: {attr}={value!r} (path: {expected!r})")


def _run_attributes(run: RunFiles, mismatches: list[str], template: dict, flags: list[str]) -> dict:
    """The run's attributes: who it is, its parent and branch time (from `template`, the global attributes of its
    first file), the grid; flags it raises are appended to `flags`."""
    attrs = {"model": run.model, "member": run.member, "experiment_id": run.experiment_id, "mip_era": run.mip_era,
             "origin": run.origin}
    if mismatches:
        # the path names the run; the files' own attributes are kept for the report
        flags.append(ATTRIBUTE_MISMATCH)
        attrs["attribute_mismatch"] = "; ".join(dict.fromkeys(mismatches))
    attrs["parent_experiment_id"] = str(template.get("parent_experiment_id", "")).strip()
    attrs["parent_time_units"] = str(template.get("parent_time_units", "")).strip()
    branch = template.get("branch_time_in_parent")
    if branch is None and template.get("branch_time") is not None:
        # CMIP5: `branch_time` is in the parent's own time units, which the file does not repeat
        # (no parent_time_units); `extractor.control.branch_year` takes them from the control run
        branch = template["branch_time"]
        attrs["branch_time_convention"] = "CMIP5"
    if branch is not None:
        try:
            attrs["branch_time_in_parent"] = float(np.asarray(branch, dtype=np.float64).ravel()[0])
        except (TypeError, ValueError, IndexError):
            flags.append(BRANCH_TIME_UNREADABLE)
    attrs["grid_label"] = run.grid_label
    if run.version:
        attrs["version"] = run.version
    return attrs

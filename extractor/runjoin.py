"""One run's global-mean series joined from its files' facts (`filefacts`), as `runs.global_mean_series` gives it.

The fast path's two small steps around the file tasks: `run_weights` (the run's area weights, from its first
file and its ``areacella``, as the reference path computes them) before, and `join_run` after. `join_run` makes
the reference path's checks on what the files said — one calendar, months that follow each other, one grid — and
builds the same Dataset: same values, dates, attributes and flags (the test suite compares the two on every
fixture). Anything it would have to judge differently, including every check that fails, comes back as
`Deferred`, and the run takes the reference path, which names the problem.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from sensemble.contract.cf import with_cell_method
from sensemble.contract.flags import TIME_TRIMMED

from .catalog import RunFiles
from .errors import ArchiveError
from .filemeans import OPENING_LOCK
from .filefacts import Deferred, FileFacts, dates, read_file_facts
from .means import MIN_SPHERE_FRACTION, area_weights, find_lat_lon, sphere_fraction
from .runs import CALENDARS, _check_joins, _collect_identity, _run_attributes, open_area
from .stores import open_dataset


@dataclass(frozen=True)
class RunWeights:
    """A run's area weights on its grid dims (lat, lon), where they came from, and the flag of a fallback."""

    values: np.ndarray
    grid: tuple[str, str]
    source: str
    flag: str | None


def run_weights(run: RunFiles) -> RunWeights | Deferred:
    """The weights `runs.global_mean_series` would use for `run`: from its first file's grid (and bounds) and its
    ``areacella``; `Deferred` for grids it does not take (not 1-D lat/lon) and for any problem."""
    reference = next(iter(run.files), None)
    if reference is None:
        return Deferred("no files")
    path = run.files[reference][0]
    try:
        # xarray reads a file's metadata without a lock of its own: no other thread of this process may be in
        # netCDF-C meanwhile (file tasks take the same lock, `filemeans.NETCDF_LOCK`)
        with OPENING_LOCK, open_dataset(path, decode_times=False) as template:
            lat, lon = find_lat_lon(template[reference])
            if template[lat].dims != (lat,) or template[lon].dims != (lon,):
                return Deferred("not a latitude-longitude grid")
            grid = xr.Dataset(coords={lat: template[lat].load(), lon: template[lon].load()})
            for coord in (lat, lon):  # as `runs.open_run` keeps them beside the run's variables
                name = template[coord].attrs.get("bounds") or f"{coord}_bnds"
                if name in template.variables and "time" not in template[name].dims:
                    grid[f"{coord}_bnds"] = template[name].load()
                    grid[coord].attrs["bounds"] = f"{coord}_bnds"
        with OPENING_LOCK:
            area = open_area(run)
        weights, flag = area_weights(grid, area)
    except Exception as err:  # noqa: BLE001 — the reference path names the problem
        return Deferred(f"weights ({type(err).__name__})")
    fraction = sphere_fraction(weights)
    if fraction is not None and fraction < MIN_SPHERE_FRACTION:
        return Deferred("regional grid")
    if weights.dims != (lat, lon):
        return Deferred("weights' dims")
    return RunWeights(np.asarray(weights.values, dtype=np.float64), (lat, lon),
                      str(weights.attrs.get("weight_source", "")), flag)


def file_task(run: RunFiles, path, variable: str, weights: RunWeights | Deferred) -> FileFacts | Deferred:
    """One file of `run` read and reduced with the run's weights (`filefacts.read_file_facts`)."""
    if isinstance(weights, Deferred):
        return weights
    return read_file_facts(run, path, variable, weights.grid, weights.values)


@dataclass(frozen=True)
class JoinedRun:
    """A run joined and checked, before its dates are decoded and its Dataset built (`joined_dataset`): numbers,
    attributes and names only, cheap to send between processes (a Dataset's cftime dates cost more to pickle and
    unpickle than the join itself: 65 ms for a run of 150 years, against 25 ms to join it)."""

    means: dict  # variable → (values, attrs)
    times: list  # [(stored dates, units, calendar)] of the reference variable's files, in time order
    bounds: list | None  # the same for its time bounds, or None
    positions: np.ndarray  # the reference variable's steps kept (every variable has them)
    scalars: dict  # scalar coordinate name → (value, attrs)
    time_attrs: dict
    bounds_attrs: dict
    attrs: dict  # the run's


def join_run(run: RunFiles, weights: RunWeights | Deferred, facts: dict[str, list]) -> xr.Dataset | Deferred:
    """The run's lazy-path result (`runs.global_mean_series`, computed) from its files' facts, in `run.files`'
    order; `Deferred` for anything the reference path must judge."""
    return finish_join(join_numbers(run, weights, facts))


def join_numbers(run: RunFiles, weights: RunWeights | Deferred, facts: dict[str, list]) -> JoinedRun | Deferred:
    """`join_run` without its last step (`joined_dataset`): what a worker process sends back."""
    try:
        return _join(run, weights, facts)
    except Exception as err:  # noqa: BLE001 — never a guess: the reference path takes the run
        return Deferred(f"join ({type(err).__name__}: {err})")


def finish_join(joined):
    """`joined_dataset` of a `JoinedRun` (`Deferred` if its dates do not decode); anything else as it is."""
    if not isinstance(joined, JoinedRun):
        return joined
    try:
        return joined_dataset(joined)
    except Exception as err:  # noqa: BLE001 — never a guess: the reference path takes the run
        return Deferred(f"join ({type(err).__name__}: {err})")


def joined_dataset(joined: JoinedRun) -> xr.Dataset:
    """The run's Dataset, as `runs.global_mean_series` gives it, with its dates decoded (xarray's decoding).

    Built in one constructor from plain variables (each labelled as `means.labelled_mean` labels a mean, by `with_cell_method`): adding
    coordinates and variables one by one cost 34 ms per run in the main process, as much as decoding its dates."""
    times = np.concatenate([dates(*part) for part in joined.times])[joined.positions]
    time_attrs = dict(joined.time_attrs)
    variables = {}
    for variable, (values, var_attrs) in joined.means.items():
        variables[variable] = xr.Variable(("time",), values, with_cell_method(var_attrs, "area: mean"))
    if joined.bounds is not None:
        bounds = np.concatenate([dates(*part) for part in joined.bounds])[joined.positions]
        variables["time_bnds"] = xr.Variable(("time", "bnds"), bounds, dict(joined.bounds_attrs))
        time_attrs["bounds"] = "time_bnds"
    coords = {"time": xr.Variable(("time",), times, time_attrs),
              **{name: xr.Variable((), value, dict(attrs)) for name, (value, attrs) in joined.scalars.items()}}
    return xr.Dataset(variables, coords=coords, attrs=dict(joined.attrs))


def _join(run: RunFiles, weights: RunWeights | Deferred, facts: dict[str, list]) -> JoinedRun | Deferred:
    if isinstance(weights, Deferred):
        return weights
    for found in facts.values():
        for fact in found:
            if isinstance(fact, Deferred):
                return fact
    flags = list(run.flags)
    mismatches: list[str] = []
    first_calendar = None
    ordered: dict[str, list[FileFacts]] = {}
    for variable, found in facts.items():
        for path, fact in zip(run.files[variable], found):
            if first_calendar is None:
                first_calendar = fact.calendar
            elif CALENDARS[fact.calendar] != CALENDARS[first_calendar]:
                return Deferred("calendars differ")
            _collect_identity(fact.attrs, path, run, mismatches)
        pairs = sorted(zip(found, run.files[variable]), key=lambda item: item[0].months[0])
        try:
            _check_joins([(None, f.months, path, None) for f, path in pairs], run)
        except ArchiveError:
            return Deferred("files do not follow each other")
        ordered[variable] = [f for f, _ in pairs]
    reference = next(iter(ordered))
    first = ordered[reference][0]
    if Path(first.path) != Path(run.files[reference][0]):
        return Deferred("the weights' file is not the run's first")
    for found in ordered.values():
        if any(not (np.array_equal(f.lat, first.lat) and np.array_equal(f.lon, first.lon)) for f in found):
            return Deferred("grids differ")
    scalars = {}
    for found in ordered.values():
        for name, (value, attrs) in found[0].scalars.items():
            if name in scalars and not (np.array_equal(scalars[name][0], value) and scalars[name][1] == attrs):
                return Deferred(f"scalar coordinate {name!r} differs between variables")
            scalars.setdefault(name, (value, attrs))

    months = {v: np.concatenate([f.months for f in found]) for v, found in ordered.items()}
    common = months[reference]
    for variable in ordered:
        common = np.intersect1d(common, months[variable])
    if common.size == 0:
        return Deferred("no common step")
    if any(m.size != common.size for m in months.values()):
        flags.append(TIME_TRIMMED)
    ref_positions = np.flatnonzero(np.isin(months[reference], common))
    means = {variable: (np.concatenate([f.means for f in found])[np.flatnonzero(np.isin(months[variable], common))],
                        dict(found[0].var_attrs))
             for variable, found in ordered.items()}
    time_attrs = {k: v for k, v in first.time_attrs.items() if k != "bounds"}
    bounds = None
    if all(f.bounds is not None for f in ordered[reference]):
        bounds = [(f.bounds, *f.bounds_encoding) for f in ordered[reference]]
    attrs = _run_attributes(run, mismatches, first.attrs, flags)
    attrs["calendar"] = CALENDARS[first_calendar]
    attrs["time_units"] = first.time_units
    attrs["files"] = ";".join(str(p) for p in run.all_files())
    attrs["flags"] = ";".join(dict.fromkeys(flags + ([weights.flag] if weights.flag else [])))
    attrs["weights"] = weights.source
    return JoinedRun(means, [(f.times, f.time_units, f.calendar) for f in ordered[reference]], bounds, ref_positions,
                     scalars, time_attrs, dict(first.bounds_attrs), attrs)

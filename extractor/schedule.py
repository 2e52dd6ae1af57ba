"""Scheduling: the global-mean series of every run of a batch, and the fits of its models, in one dask graph.

Runs of local NetCDF files take the fast path (`lean_graph`): every file is one task that opens, checks and reduces
it, and each run one join task, so any worker takes any file and a batch of a few runs still keeps many workers
busy. Each model and member whose runs all take that path is fitted in the same graph (`reduce_and_fit`). Anything
else takes the reference path (`reduce_runs_reference`, through xarray): one task per run on a local scheduler,
the run's file tasks on a cluster. A failure comes back as a task's value (an `ArchiveError` naming the file), and
on a distributed client each run is its own future, so one bad run never stops the graph. Which scheduler runs the
graph is chosen outside (`sensemble.compute`); here it is submitted once, with the progress bar that suits it.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import dask
import xarray as xr

from .catalog import RunFiles
from .diagnose import empty_steps, read_failure
from .errors import ArchiveError
from .filemeans import OPENING_LOCK, READ_THROUGH_XARRAY
from .opened import close_opened_files, opened_by_this_task
from .runjoin import JoinedRun, file_task, finish_join, join_numbers, run_weights
from .runs import global_mean_series
from .stores import is_url, is_zarr

#: dask config key under which a batch declares how many bytes of input its graph reads, so that the scheduler
#: chosen outside can size itself (a small batch is not worth starting worker processes for)
BATCH_BYTES_KEY = "sensemble.batch-bytes"


def distributed_client():
    """The distributed client dask would compute on now, or None for a local scheduler."""
    try:
        from distributed import default_client
    except ImportError:  # pragma: no cover — distributed is a dependency
        return None
    try:
        return default_client()
    except ValueError:
        return None


def compute_all(collections: list, progress: bool) -> list:
    """One `dask.compute` for the whole batch, with the progress bar that suits the scheduler."""
    client = distributed_client()
    if client is None:
        if not progress:
            return list(dask.compute(*collections))
        from dask.diagnostics import ProgressBar

        with ProgressBar(minimum=1.0):
            return list(dask.compute(*collections))
    # dask's local ProgressBar sees nothing of a cluster: follow the futures instead
    futures = client.compute(collections)
    if progress:
        from distributed import progress as follow

        follow(futures)
    return client.gather(futures)


def compute_each_on_client(client, collections: list, progress: bool) -> list:
    """Each collection as its own future over one graph: its value, or the exception that stopped it (as the value).

    One failing task errs only the futures that depend on it; the others run on (common practice with distributed's
    futures, no source).
    """
    from distributed import wait

    futures = client.compute(collections)
    if progress:
        from distributed import progress as follow

        follow(futures)
    wait(futures)
    values = []
    for future in futures:
        try:
            values.append(future.result())
        except Exception as err:  # noqa: BLE001 — returned as the value: the caller names the damaged file
            values.append(err)
    return values


def open_and_reduce_run(run: RunFiles, required: tuple[str, ...]) -> xr.Dataset | ArchiveError | BaseException:
    """One run opened, checked and reduced to global means inside one task (local schedulers): its series, or what
    stopped it (returned as the value, not raised: one bad run never stops the graph).

    Only for worker processes that run one task at a time (`_runs_in_processes`). Opening is part of the task so
    that the workers of the local pool open their runs' files in parallel (their
    metadata, time axes and checks cost about a quarter of reading the values); the main process reads nothing.
    Inside the task the run's files are reduced one after another, so a worker holds one slab at a time, and every
    file the task opened is closed by it, in its own thread.
    """
    with opened_by_this_task(OPENING_LOCK):
        try:
            with OPENING_LOCK:
                lazy = global_mean_series(run, required=required)
        except ArchiveError as err:
            return err
        except Exception as err:  # noqa: BLE001 — recorded, never hidden
            return _unreadable(run, err)
        try:
            if lazy.encoding.pop(READ_THROUGH_XARRAY, ()):
                with OPENING_LOCK:
                    series = lazy.compute(scheduler="sync")
            else:
                series = lazy.compute(scheduler="sync")
        except Exception as err:  # noqa: BLE001 — diagnosed by the caller, which names the damaged file
            return err
    return empty_steps(series, run) or series


class _Held:
    """Hands a lazy dataset to a task as it is: dask does not make its chunks the task's dependencies."""

    def __init__(self, value):
        self.value = value


def reduce_run(held: _Held, run: RunFiles) -> xr.Dataset | ArchiveError | BaseException:
    """One run opened in this process, its global means computed in one task (threads of this process), or what
    stopped it (returned as the value, not raised)."""
    try:
        series = held.value.compute(scheduler="sync")
    except Exception as err:  # noqa: BLE001 — diagnosed by the caller, which names the damaged file
        return err
    return empty_steps(series, run) or series


def _runs_in_processes(input_bytes: int | None) -> bool:
    """Whether the local scheduler in force runs this batch's tasks in worker processes of their own
    (`sensemble.compute.LocalPool` says so): one task at a time in each, so a task may open its own files. Threads of
    one process open nothing: netCDF-C and xarray's locks let one thread open while others read only by chance."""
    scheduler = dask.config.get("scheduler", None)
    with dask.config.set({BATCH_BYTES_KEY: input_bytes}):
        return bool(getattr(scheduler, "uses_processes", lambda: False)())


def _unreadable(run: RunFiles, err: BaseException) -> ArchiveError:
    return ArchiveError(f"could not be read ({type(err).__name__}: {err})",
                        path=";".join(map(str, run.all_files()[:1])), model=run.model)


def reduce_runs(runs: list[RunFiles], required: tuple[str, ...], progress: bool,
                input_bytes: int | None = None) -> tuple[dict[str, xr.Dataset], dict[str, ArchiveError]]:
    """Global-mean series of ``runs``: ``({label: series}, {label: error})`` (`reduce_and_fit` with nothing to fit)."""
    reduced = reduce_and_fit(runs, required, progress, input_bytes)
    return reduced.series, reduced.errors


@dataclass
class Reduced:
    """What one batch's graph gave: series for the main process to fit, errors, and the units fitted in the graph."""

    series: dict[str, xr.Dataset]  # run label → series, for every run not only used by units fitted in the graph
    errors: dict[str, ArchiveError]  # run label → what stopped it
    fitted: dict[str, object] = field(default_factory=dict)  # unit key → the fit's value, or `FitFailed`
    attrs: dict[str, dict] = field(default_factory=dict)  # run label → its series' attributes, for every run reduced


def reduce_and_fit(runs: list[RunFiles], required: tuple[str, ...], progress: bool, input_bytes: int | None = None,
                   units: list = (), fit: Callable | None = None) -> Reduced:
    """Global-mean series of ``runs``, and ``fit(unit, series)`` of each of `units` in the same graph.

    Runs of local NetCDF files take the fast path first (`lean_graph`: every file one task that opens, checks and
    reduces it, on whatever scheduler is in force; nothing is opened here); what it defers (`filefacts.Deferred`:
    Zarr stores, remote files, unusual files, and every run with a problem) takes the reference path
    (`reduce_runs_reference`), which names the problem.

    A unit whose runs all take the fast path is fitted in the graph too (`fit_in_task`, on a worker, as soon as its
    runs are joined): the fits of a batch then run on every core, beside the reading, instead of one after another
    in the main process once everything is read (0.1–0.26 s per model and member, a floor on the wall time of any batch
    however many cores read it). A unit with a run the fast path defers is left to the caller (not in `fitted`),
    with its runs' series in `series`.
    """
    reduced = Reduced({}, {})
    deferred, lean = [], []
    for run in runs:
        (lean if _all_local_netcdf(run, required) else deferred).append(run)
    if lean:
        client = distributed_client()
        eager = client is None and not _runs_in_processes(input_bytes)
        order = sorted(lean, key=_run_bytes, reverse=True)  # the largest first: the last tasks are short ones
        joins = {run.label: lean_graph(run, eager) for run in order}
        fits = {}
        if fit is not None:
            for unit in units:
                if all(run.label in joins for run in unit.runs()):
                    token = dask.base.tokenize(unit.key, [run.label for run in unit.runs()])
                    fits[unit.key] = dask.delayed(fit_in_task, pure=True)(
                        fit, unit, {run.label: joins[run.label] for run in unit.runs()}, dask_key_name=f"fit-{token}")
        collections = [*joins.values(), *fits.values()]
        with dask.config.set({BATCH_BYTES_KEY: input_bytes}):
            values = (compute_all(collections, progress) if client is None
                      else compute_each_on_client(client, collections, progress))
        # a task that did not run at all (its worker lost, …) comes back as an exception: the caller fits that unit
        reduced.fitted = {key: value for key, value in zip(fits, values[len(joins):])
                          if value is not NOT_FITTED and not isinstance(value, BaseException)}
        fitted_only = _used_only_by(units, set(reduced.fitted))
        for run, value in zip(order, values[: len(joins)]):
            if run.label in fitted_only and isinstance(value, JoinedRun):  # its unit's fit built its series
                reduced.attrs[run.label] = value.attrs
                continue
            series = _finished(value, run)  # dates decoded here: cftime dates are slow to send between processes
            if series is not None:
                reduced.series[run.label] = series
                reduced.attrs[run.label] = series.attrs
            else:  # deferred, failed or with an empty month: the reference path says what is wrong
                deferred.append(run)
    if deferred:
        more, reduced.errors = reduce_runs_reference(deferred, required, progress, input_bytes)
        reduced.series.update(more)
        reduced.attrs.update({label: ds.attrs for label, ds in more.items()})
    return reduced


#: what `fit_in_task` gives for a unit the caller must fit itself (a run of it did not come through the fast path)
NOT_FITTED = "not fitted"


@dataclass
class FitFailed:
    """The exception a fit in the graph raised, as a value (the caller raises it where it records failures)."""

    error: Exception


def fit_in_task(fit: Callable, unit, joined: dict[str, object]):
    """`fit(unit, series)` from the unit's joined runs (`runjoin.JoinedRun`), inside the graph: its value, or the
    exception it raised as a `FitFailed` (returned, not raised: one unit's failure never stops the batch), or
    `NOT_FITTED` when a run is not one the fast path finished (deferred, or with an empty month: the caller's
    reference path judges it)."""
    series = {}
    for run in unit.runs():
        series[run.label] = _finished(joined[run.label], run)
        if series[run.label] is None:
            return NOT_FITTED
    try:
        return fit(unit, series)
    except Exception as err:  # noqa: BLE001 — the caller records it as it records a fit of its own that fails
        return FitFailed(err)


def _finished(joined, run: RunFiles) -> xr.Dataset | None:
    """The run's series from its join task's value, or None when the fast path did not finish it (deferred, failed,
    or a month without any valid cell: the reference path judges it)."""
    value = finish_join(joined)
    return value if isinstance(value, xr.Dataset) and empty_steps(value, run) is None else None


def _used_only_by(units: list, keys: set[str]) -> set[str]:
    """Labels of the runs that only units in `keys` use."""
    used_elsewhere = {run.label for unit in units if unit.key not in keys for run in unit.runs()}
    return {run.label for unit in units if unit.key in keys for run in unit.runs()} - used_elsewhere


def lean_graph(run: RunFiles, eager_weights: bool):
    """The fast path's tasks for one run: its weights, one task per file, the join (`extractor.runjoin`; its value
    a `JoinedRun`, whose Dataset the caller builds with `runjoin.finish_join`)."""
    token = dask.base.tokenize(run.label, [str(p) for p in run.all_files()])
    weights = run_weights(run) if eager_weights else dask.delayed(run_weights, pure=True)(
        run, dask_key_name=f"weights-{token}")
    facts = {
        variable: [dask.delayed(file_task, pure=True)(run, path, variable, weights,
                                                      dask_key_name=f"file-{Path(path).name}-{token}")
                   for path in paths]
        for variable, paths in run.files.items()
    }
    return dask.delayed(join_numbers, pure=True)(run, weights, facts, dask_key_name=f"join-{token}")


def _all_local_netcdf(run: RunFiles, required: tuple[str, ...]) -> bool:
    files = run.all_files()
    return (bool(files) and all(v in run.files for v in required)
            and not any(is_url(p) or is_zarr(p) or not str(p).endswith(".nc") for p in files))


def reduce_runs_reference(runs: list[RunFiles], required: tuple[str, ...], progress: bool,
                          input_bytes: int | None = None) -> tuple[dict[str, xr.Dataset], dict[str, ArchiveError]]:
    """Global-mean series of ``runs`` through xarray (the reference path), in one graph: ``({label: series},
    {label: error})``.

    On the local pool of processes each run is one task that opens and reduces it (`open_and_reduce_run`), the
    largest runs first, so the last tasks to finish are short ones. On threads and on a distributed client the
    files are opened here, one after another (the HDF5 library must not open files in several threads at once),
    and their values are read in the graph (one task per run on threads, the cluster's file tasks on a client). `input_bytes` (the size of the files the graph reads) is declared to the
    scheduler under `BATCH_BYTES_KEY`.
    """
    client = distributed_client()
    if client is None and _runs_in_processes(input_bytes):
        opened = sorted(runs, key=_run_bytes, reverse=True)
        reduce = dask.delayed(open_and_reduce_run, pure=True)
        tasks = [reduce(run, tuple(required), dask_key_name=f"reduce-run-{i:05d}") for i, run in enumerate(opened)]
        series, errors = {}, {}
    else:
        series, errors, tasks, opened = {}, {}, [], []
        for run in runs:
            try:
                lazy = global_mean_series(run, required=required)
            except ArchiveError as err:
                errors[run.label] = err
                continue
            except Exception as err:  # noqa: BLE001 — recorded, never hidden
                errors[run.label] = _unreadable(run, err)
                continue
            lazy.encoding.pop(READ_THROUGH_XARRAY, None)
            if client is None:
                tasks.append(dask.delayed(reduce_run, pure=True)(_Held(lazy), run,
                                                                 dask_key_name=f"reduce-run-{len(tasks)}"))
            else:  # the run's file tasks go to the cluster as they are (see the module's docstring)
                tasks.append(lazy)
            opened.append(run)
    try:
        with dask.config.set({BATCH_BYTES_KEY: input_bytes}):
            if not tasks:
                values = []
            elif client is None:
                values = compute_all(tasks, progress)
            else:
                values = compute_each_on_client(client, tasks, progress)
    finally:
        close_opened_files()
    for run, value in zip(opened, values):
        if isinstance(value, xr.Dataset) and client is not None:
            value = empty_steps(value, run) or value
        if isinstance(value, xr.Dataset):
            series[run.label] = value
        elif isinstance(value, ArchiveError):
            errors[run.label] = value
        else:
            errors[run.label] = read_failure(run, value)
    return series, errors


def _run_bytes(run: RunFiles) -> int:
    try:
        return sum(Path(path).stat().st_size for path in run.all_files() if not is_url(path))
    except OSError:  # the run's task reports what is wrong with its files
        return 0

"""Scheduling: the global-mean series of every run of a batch, computed in one dask graph.

On a local scheduler the graph has one task per run: each task reduces its run's files one after another and
checks the result; a failure comes back as the task's value (an `ArchiveError` naming the file), so one bad run
never stops the graph. On a distributed client (a local cluster, a scheduler, SLURM/PBS workers) every file's
read-and-reduce task is a task of the cluster, so any worker takes any file and a batch of a few runs still keeps
many workers busy; each run is its own future over that one graph, so a failure errs only its own run. Which
scheduler runs the graph is chosen outside (`sensemble.compute`); here it is submitted once, with the progress
bar that suits the scheduler.
"""
from __future__ import annotations

import dask
import xarray as xr

from .catalog import RunFiles
from .diagnose import empty_steps, read_failure
from .errors import ArchiveError
from .opened import close_opened_files
from .runs import global_mean_series

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


class _Held:
    """Hands a lazy dataset to a task as it is: dask does not make its chunks the task's dependencies."""

    def __init__(self, value):
        self.value = value


def reduce_run(held: _Held, run: RunFiles) -> xr.Dataset | ArchiveError | BaseException:
    """One run's global means computed in memory, or what stopped it (returned as the value, not raised).

    Inside this task the run's chunks are reduced one after another, so a worker holds one chunk at a time.
    """
    try:
        series = held.value.compute(scheduler="sync")
    except Exception as err:  # noqa: BLE001 — diagnosed by the caller, which names the damaged file
        return err
    return empty_steps(series, run) or series


def reduce_runs(runs: list[RunFiles], required: tuple[str, ...], progress: bool,
                input_bytes: int | None = None) -> tuple[dict[str, xr.Dataset], dict[str, ArchiveError]]:
    """Global-mean series of ``runs`` in one graph: ``({label: series}, {label: error})``.

    The files are opened here, one after another (the HDF5 library must not open files in several threads
    at once); their values are read in the graph. `input_bytes` (the size of the files the graph reads) is
    declared to the scheduler under `BATCH_BYTES_KEY`.
    """
    client = distributed_client()
    series, errors, tasks, opened = {}, {}, [], []
    for run in runs:
        try:
            lazy = global_mean_series(run, required=required)
        except ArchiveError as err:
            errors[run.label] = err
            continue
        except Exception as err:  # noqa: BLE001 — recorded, never hidden
            errors[run.label] = ArchiveError(f"could not be read ({type(err).__name__}: {err})",
                                             path=";".join(map(str, run.all_files()[:1])), model=run.model)
            continue
        if client is None:
            key = f"reduce-run-{len(tasks)}"
            tasks.append(dask.delayed(reduce_run, pure=True)(_Held(lazy), run, dask_key_name=key))
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

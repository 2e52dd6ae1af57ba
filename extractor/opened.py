"""Files opened lazily for a batch's graph, and closing them in the thread that opened them.

Left to the garbage collector, xarray's file manager may close a file from another thread (a distributed client's
event loop) while this thread writes a series file; HDF5 is not thread-safe ("HDF error"). So every file
`runs.global_mean_series` opens is registered here and closed in the thread that opened it: by the run's own
task (`opened_by_this_task`, which closes them when the task ends) or, outside a task, by `close_opened_files`.
Inside a task, the netCDF4 handle a file was opened with is kept here too (`share_handle`), so that the task's
read-and-reduce of that file uses it instead of opening the file a second time.
"""
from __future__ import annotations

import contextlib
import threading
from typing import Iterator

import xarray as xr

_OPENED: list[xr.Dataset] = []
_TASKS = threading.local()  # this thread's task's own list, while a task runs


def register(ds: xr.Dataset) -> xr.Dataset:
    """Remember `ds` for the running task (or for `close_opened_files` outside one); returns it."""
    getattr(_TASKS, "opened", _OPENED).append(ds)
    return ds


@contextlib.contextmanager
def opened_by_this_task(lock: contextlib.AbstractContextManager) -> Iterator[None]:
    """Files registered in this thread inside the block are closed when it ends (also when it raises), holding
    `lock` (the one the task opened them under: no other thread may be in netCDF-C meanwhile)."""
    outer = getattr(_TASKS, "opened", None), getattr(_TASKS, "handles", None)
    _TASKS.opened, _TASKS.handles = mine, _ = [], {}
    try:
        yield
    finally:
        _TASKS.opened, _TASKS.handles = outer
        if outer[0] is None:
            del _TASKS.opened, _TASKS.handles
        with lock:
            _close(mine)


def in_task() -> bool:
    """Whether this thread runs a run's task (`opened_by_this_task`)."""
    return getattr(_TASKS, "handles", None) is not None


def share_handle(path, handle) -> None:
    """Keep the netCDF4 handle `path` is open with, for this task's other readers (`shared_handle`)."""
    _TASKS.handles[str(path)] = handle


def shared_handle(path):
    """The netCDF4 handle this thread's task opened `path` with, or None (closed with the task's files)."""
    handles = getattr(_TASKS, "handles", None)
    return None if handles is None else handles.get(str(path))


def close_opened_files() -> None:
    """Close every file registered outside a task (call after the batch's graph has been computed)."""
    _close(_OPENED)


def _close(files: list[xr.Dataset]) -> None:
    while files:
        files.pop().close()

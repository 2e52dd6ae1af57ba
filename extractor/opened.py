"""Files opened lazily for a batch's graph, and closing them in the thread that opened them.

Left to the garbage collector, xarray's file manager may close a file from another thread (a distributed client's
event loop) while this thread writes a series file; HDF5 is not thread-safe ("HDF error"). So every file
`runs.global_mean_series` opens is registered here and closed in the thread that opened it: by the run's own
task (`opened_by_this_task`, which closes them when the task ends) or, outside a task, by `close_opened_files`.
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
def opened_by_this_task() -> Iterator[None]:
    """Files registered in this thread inside the block are closed when it ends (also when it raises)."""
    outer = getattr(_TASKS, "opened", None)
    _TASKS.opened = mine = []
    try:
        yield
    finally:
        if outer is None:
            del _TASKS.opened
        else:
            _TASKS.opened = outer
        _close(mine)


def close_opened_files() -> None:
    """Close every file registered outside a task (call after the batch's graph has been computed)."""
    _close(_OPENED)


def _close(files: list[xr.Dataset]) -> None:
    while files:
        files.pop().close()

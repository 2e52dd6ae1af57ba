"""Files opened lazily for a batch's graph, and closing them in the thread that opened them.

Left to the garbage collector, xarray's file manager may close a file from another thread (a distributed client's
event loop) while this thread writes a series file; HDF5 is not thread-safe ("HDF error"). So every file
`runs.global_mean_series` opens is registered here and closed by `close_opened_files` once the graph has run.
"""
from __future__ import annotations

import xarray as xr

_OPENED: list[xr.Dataset] = []


def register(ds: xr.Dataset) -> xr.Dataset:
    """Remember `ds` for `close_opened_files`; returns it."""
    _OPENED.append(ds)
    return ds


def close_opened_files() -> None:
    """Close every registered file (call after the batch's graph has been computed)."""
    while _OPENED:
        _OPENED.pop().close()

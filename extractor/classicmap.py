"""A classic-format (netCDF-3) variable's values mapped straight from the file, outside netCDF-C.

An uncompressed classic file costs nothing to decode, so reading it through netCDF-C is three passes over the
values: the kernel copies the pages into netCDF-C's buffer, netCDF-C swaps their bytes (the format is
big-endian), and the reduction reads them again to widen them to float64. On the project's 2-core machine the
kernel's copy alone was half of the read-only floor's time. Here the file is memory-mapped and its header read
by scipy's netCDF-3 reader (``scipy.io.netcdf_file(..., mmap=True)``: the variable is a numpy view of the file,
record variables a strided view over the records), and the reduction's one widening pass (`means.weighted_block_mean`)
reads the file's pages where they lie and swaps the bytes on the way: one pass instead of three, and no lock
(netCDF-C is not involved, so threads of one process read in parallel too).

The values are exactly netCDF4's with auto mask and scale off (the same bytes, read as big-endian): decoding (fill
values, packing) stays the caller's, as on the netCDF4 path. Anything else comes back as None with the reason
logged, and the caller reads through netCDF4 as before: a file scipy does not read (the CDF-5 variant, netCDF-4),
a variable that is not there or not a plain number type. A file shorter than its header promises is not mapped
(numpy refuses a view past the end of the map), so a truncated file is never read past its end.
"""
from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass

import numpy as np

_log = logging.getLogger(__name__)


@dataclass
class MappedVariable:
    """One variable of a classic file as a read-only numpy view of the mapped file; `close` unmaps it."""

    path: str
    variable: str
    values: np.ndarray  # the variable's dims, big-endian dtype, a view of the map
    _file: object

    def close(self) -> None:
        self.values = None
        with warnings.catch_warnings():  # scipy warns when views may outlive the map; ours are the caller's slabs
            warnings.simplefilter("ignore", RuntimeWarning)
            self._file.close()


def open_mapped(path, variable: str, shape: tuple[int, ...]) -> MappedVariable | None:
    """`variable` of the classic file at `path` mapped, or None where it is read through netCDF4 (logged why).

    `shape` is the variable's shape as netCDF4 reports it: a map that disagrees is not used."""
    try:
        from scipy.io import netcdf_file
    except ImportError:  # pragma: no cover — scipy is a core dependency
        return None
    try:
        handle = netcdf_file(str(path), "r", mmap=True, maskandscale=False)
    except Exception as err:  # noqa: BLE001 — not one scipy reads (or too short): netCDF4 reads it and names problems
        _log.debug("%s: %s read through netCDF4: %s", path, variable, err)
        return None
    mapped = MappedVariable(str(path), variable, None, handle)
    var = handle.variables.get(variable)
    values = None if var is None else var.data
    if (not isinstance(values, np.ndarray) or values.dtype.kind not in "fiu" or tuple(values.shape) != tuple(shape)):
        _log.debug("%s: %s read through netCDF4: not a plain numeric variable of shape %s", path, variable, shape)
        mapped.close()
        return None
    mapped.values = values
    return mapped

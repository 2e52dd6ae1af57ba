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
    _file: object  # the scipy file it unmaps on `close`, or None when the map is a `ClassicFile`'s (it closes it)

    def close(self) -> None:
        self.values = None
        if self._file is not None:
            _close(self._file)


def _plain_numbers(values, shape: tuple[int, ...]) -> bool:
    """Whether a mapped variable's values can be read as they lie: numbers, of the shape netCDF4 reports."""
    return isinstance(values, np.ndarray) and values.dtype.kind in "fiu" and tuple(values.shape) == tuple(shape)


def _close(handle) -> None:
    with warnings.catch_warnings():  # scipy warns when views may outlive the map; ours are the caller's slabs
        warnings.simplefilter("ignore", RuntimeWarning)
        handle.close()


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
    if not _plain_numbers(values, shape):
        _log.debug("%s: %s read through netCDF4: not a plain numeric variable of shape %s", path, variable, shape)
        mapped.close()
        return None
    mapped.values = values
    return mapped


#: the first bytes of the two classic variants scipy reads (CDF-1, CDF-2) and netCDF4's names for them
_MAGIC = {b"CDF\x01": "NETCDF3_CLASSIC", b"CDF\x02": "NETCDF3_64BIT_OFFSET"}


class ClassicVariable:
    """One variable of a `ClassicFile`, as the netCDF4 calls the fast path makes see it: dims, shape, a dtype in
    the machine's order, attributes as netCDF4 gives them, values copied in the machine's order (auto mask and
    scale off: the caller decodes)."""

    def __init__(self, variable):
        self._variable = variable
        self.dimensions = tuple(variable.dimensions)
        self.ndim = len(self.dimensions)
        self.shape = tuple(variable.data.shape)
        self.dtype = variable.data.dtype.newbyteorder("=")
        self._attrs = {name: _as_netcdf4_attribute(name, value) for name, value in variable._attributes.items()}

    def ncattrs(self) -> list[str]:
        return list(self._attrs)

    def getncattr(self, name: str):
        return self._attrs[name]

    def set_auto_maskandscale(self, flag: bool) -> None:
        if flag:  # the values are always raw here; decoding stays the caller's
            raise ValueError("a mapped classic variable gives raw values only")

    def chunking(self) -> None:  # as netCDF4 answers for a classic file
        return None

    def __getitem__(self, index) -> np.ndarray:
        if self.dtype.kind not in "fiu":  # characters: netCDF4's own conversions are not copied here
            raise TypeError(f"{self.dtype} values are read through netCDF4")
        return np.array(self._variable.data[index], dtype=self.dtype)


class ClassicFile:
    """A classic (CDF-1/CDF-2) file opened by scipy's netCDF-3 reader and mapped, offering the few calls of a
    netCDF4 ``Dataset`` the fast path makes (`filefacts.read_file_facts`, `filemeans.file_global_means`).

    netCDF-C reads the first 4 MB of a classic file into a buffer of its own when it opens it (measured: 5 ms per
    file, the cost of reducing 20 MB of its values); scipy reads the header alone (0.3 ms) and the values are
    mapped (`mapped`). Attributes come as netCDF4 gives them (`_as_netcdf4_attribute`): the file's facts are
    the same either way (tested against netCDF4 on every kind of attribute the format has)."""

    def __init__(self, path: str, handle, data_model: str):
        self.path = path
        self.data_model = data_model
        self._handle = handle
        self.variables = {name: ClassicVariable(var) for name, var in handle.variables.items()}
        self._attrs = {name: _as_netcdf4_attribute(name, value) for name, value in handle._attributes.items()}

    def ncattrs(self) -> list[str]:
        return list(self._attrs)

    def getncattr(self, name: str):
        return self._attrs[name]

    def mapped(self, variable: str, shape: tuple[int, ...]) -> MappedVariable | None:
        """`variable`'s values as a view of the map (closed with this file, not by the view), or None."""
        values = self._handle.variables[variable].data
        if not _plain_numbers(values, shape):
            return None
        return MappedVariable(self.path, variable, values, None)

    def close(self) -> None:
        self.variables = {}
        _close(self._handle)


def open_classic(path) -> ClassicFile | None:
    """The file at `path` opened as a `ClassicFile`, or None where netCDF4 opens it (not CDF-1/CDF-2, a header
    scipy does not read, a file shorter than its header promises); why is logged."""
    try:
        with open(path, "rb") as stream:
            data_model = _MAGIC.get(stream.read(4))
    except OSError as err:  # netCDF4 opens it and names the problem
        _log.debug("%s: opened by netCDF4: %s", path, err)
        return None
    if data_model is None:
        return None
    try:
        from scipy.io import netcdf_file

        handle = netcdf_file(str(path), "r", mmap=True, maskandscale=False)
    except Exception as err:  # noqa: BLE001 — netCDF4 opens it and names problems
        _log.debug("%s: opened by netCDF4: %s", path, err)
        return None
    try:
        return ClassicFile(str(path), handle, data_model)
    except Exception as err:  # noqa: BLE001 — an attribute scipy reads differently: netCDF4 opens it
        _log.debug("%s: opened by netCDF4: %s", path, err)
        _close(handle)
        return None


def _as_netcdf4_attribute(name: str, value):
    """An attribute as scipy reads it, given as netCDF4 gives it: text decoded (UTF-8, bad bytes replaced, NULs
    removed; a text ``_FillValue`` stays bytes), one number a numpy scalar, several an array in the machine's
    order."""
    if isinstance(value, bytes):
        return value if name == "_FillValue" else value.decode("utf-8", errors="replace").replace("\x00", "")
    if isinstance(value, np.generic):
        return value.dtype.type(value)
    if isinstance(value, np.ndarray):
        return value.astype(value.dtype.newbyteorder("="))
    raise TypeError(f"attribute {name!r}: {type(value).__name__}")

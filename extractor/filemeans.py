"""Global means of one NetCDF file, read and reduced inside one task.

Reading and decompressing the files is the whole cost of an extraction, so each file is one dask task
that reads its variable in slabs of whole storage chunks and reduces every slab to area-weighted global
means at once: what leaves the task is one float64 per time step, never a field. This is what lets a
process pool (or a cluster) use every core at the speed of the disk: one process holds HDF5 for its own
files (netCDF-C is not thread-safe, so threads of one process read one at a time), tasks are few and
large, and no large array is ever passed between tasks or processes.

Compressed NetCDF-4 files are read by `rawchunks` (storage chunks inflated outside HDF5's lock, in threads, bit
for bit netCDF4's values) and classic files by `classicmap` (mapped, read by the reduction's own pass); what
neither reads (other filters, the CDF-5 variant, …) goes through netCDF4.

Values are decoded as `xarray.decode_cf` decodes them on the other path (``_FillValue`` and
``missing_value`` cells are missing; packed integers unpacked by xarray itself), so both paths give
bit-identical means.
"""
from __future__ import annotations

import ctypes
import os
import threading
from dataclasses import dataclass
from pathlib import Path

import dask
import dask.array as dask_array
import netCDF4
import numpy as np
import xarray as xr
from xarray.backends import NetCDF4DataStore
from xarray.backends.locks import HDF5_LOCK, combine_locks

from .means import labelled_mean, weighted_block_mean
from .opened import in_task, share_handle, shared_handle
from .classicmap import ClassicFile, open_mapped
from .rawchunks import RawChunkError, open_raw, read_raw_chunks
from .stores import is_url, is_zarr, open_dataset

# One lock per process around netCDF-C calls: the library is not thread-safe. Worker processes each have
# their own, so they read in parallel; threads of one process take turns reading and reduce in parallel.
# The lock includes xarray's own HDF5 lock, which xarray takes around its netCDF-C calls (files opened for the
# catalogue, the chunked path, packed values): with a lock of our own only, a thread reading here and one inside
# xarray could be in netCDF-C at once — an intermittent segmentation fault of the thread pool. `_FILE_TASK_LOCK`
# alone serialises the file tasks' own xarray decoding (which takes the HDF5 lock itself; same order, no deadlock).
_FILE_TASK_LOCK = threading.RLock()  # re-entrant: a run's task may hold it (OPENING_LOCK) around file tasks
NETCDF_LOCK = combine_locks([_FILE_TASK_LOCK, HDF5_LOCK])
# Held while a run's task opens its files (xarray reads their metadata without any lock of its own), and while it
# reads values through xarray's backends: then no other thread of the process is in netCDF-C by way of a file task.
OPENING_LOCK = _FILE_TASK_LOCK

#: key of a lazy run's ``encoding``: the variables whose means are read through xarray's backends (Zarr stores,
#: remote files, unusual dims), not by file tasks — the run's task reads those holding `OPENING_LOCK`
READ_THROUGH_XARRAY = "sensemble_read_through_xarray"

#: about this many bytes of decoded values in memory per read (whole storage chunks, at least one). It bounds a
#: worker's memory: with 64 MB, the peak RSS of a worker followed the archive's file lengths (243 MiB with 100-year
#: files, 282 MiB once a second model stored whole 300-year runs in one file); with 16 MB it is 203–206 MiB on
#: both, and reading is no slower (the scaling benchmark, `tests/benchmarks/bench_scale.py --memory`)
SLAB_BYTES = 16 * 2**20

# glibc allocator thresholds for worker processes whose environment froze them (see `_allocator_for_slabs`)
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
MMAP_THRESHOLD_BYTES = 32 * 2**20  # glibc's own ceiling for its dynamic threshold on 64-bit systems
TRIM_THRESHOLD_BYTES = 2 * MMAP_THRESHOLD_BYTES  # glibc's dynamic rule: twice the mmap threshold
_allocator_checked = False


def _allocator_for_slabs() -> None:
    """Undo, in this process, a frozen 128 kB mmap threshold of glibc's allocator (once per process).

    distributed's nanny starts every worker with ``MALLOC_TRIM_THRESHOLD_`` set, which turns off glibc's
    dynamic mmap threshold: each decompression buffer and each float64 temporary of a few MB is then a
    fresh mmap, zero-filled page by page and unmapped again. Measured on one 39 MB file of the scaling
    benchmark: reduction 0.24 s in such a worker against 0.03–0.04 s in a plain process or in a worker
    without that setting, and reading about 1.5× slower. The thresholds set here are where glibc's own
    dynamic rule ends up for buffers of that size; memory stays bounded by the slab size. Only done where
    the environment froze them, and only on glibc (elsewhere nothing happens).
    """
    global _allocator_checked
    if _allocator_checked:
        return
    _allocator_checked = True
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ or "MALLOC_MMAP_THRESHOLD_" in os.environ:
        return
    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES)
        libc.mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES)
    except (OSError, AttributeError):  # not glibc: its own allocator, nothing frozen
        pass


@dataclass(frozen=True)
class FileSource:
    """Where one file's part of a variable lies, and how its values become the run's.

    ``axes`` orders the variable's dims as (time, *grid dims of the weights); ``offset`` is added to every
    decoded value (273.15 for a temperature in degC, CF/UDUNITS), as the other path does.
    """

    path: str
    variable: str
    steps: int
    axes: tuple[int, ...]
    offset: float | None = None


def file_global_means(source: FileSource, weights: np.ndarray, handle=None) -> np.ndarray:
    """Area-weighted global mean of every time step of one file's variable (float64, missing cells left out);
    `handle`: the file's open netCDF4 Dataset (or `classicmap.ClassicFile`), if the caller has one (it stays open)."""
    _allocator_for_slabs()
    n_grid = weights.ndim
    out = np.empty(source.steps, dtype=np.float64)
    # opened by the caller, or by this run's task for its checks: not opened twice
    shared = handle if handle is not None else shared_handle(source.path)
    if shared is None:
        with NETCDF_LOCK:
            nc = netCDF4.Dataset(source.path, "r")
    else:
        nc = shared
    chunks = mapped = None
    try:
        with NETCDF_LOCK:
            var = nc.variables[source.variable]
            raw = _plain_floats(var)
            if raw:
                var.set_auto_maskandscale(False)
            fills = _fill_values(var) if raw else ()
            classic = nc.data_model.startswith("NETCDF3")
            shape = var.shape
            chunking = var.chunking()
            per_chunk = chunking[source.axes[0]] if isinstance(chunking, list) else 1
            step_bytes = int(np.prod([var.shape[a] for a in source.axes[1:]])) * var.dtype.itemsize
        slab = max(per_chunk, (SLAB_BYTES // max(1, step_bytes * per_chunk)) * per_chunk)
        time_axis = source.axes[0]
        if raw and read_raw_chunks():  # read outside netCDF-C: classic files mapped, compressed chunks inflated
            if isinstance(nc, ClassicFile):  # mapped when it was opened
                mapped = nc.mapped(source.variable, shape)
            elif classic:
                mapped = open_mapped(source.path, source.variable, shape)
            else:
                chunks = open_raw(source.path, source.variable)
        for lo in range(0, source.steps, slab):
            index = [slice(None)] * len(source.axes)
            index[time_axis] = slice(lo, min(lo + slab, source.steps))
            block = None
            if mapped is not None:  # a view of the mapped file: the reduction's widening pass reads it (classicmap.py)
                block = mapped.values[tuple(index)]
            elif chunks is not None:  # the same raw values, inflated outside HDF5 (rawchunks.py)
                try:
                    block = chunks.read(time_axis, lo, min(lo + slab, source.steps))
                except RawChunkError:  # netCDF4 reads it, or says what is wrong with the file in its own words
                    chunks = None
            if chunks is None and mapped is None:
                with NETCDF_LOCK:
                    block = var[tuple(index)] if raw else None
            if block is None:
                block = _decoded_by_xarray(source, tuple(index))
            block = np.asarray(block)
            if source.axes != tuple(range(len(source.axes))):
                block = block.transpose(source.axes)
            if source.offset is not None:  # missing cells found before the offset moves them
                block = _as_missing(block, fills) + source.offset
            out[lo: lo + block.shape[0]] = weighted_block_mean(block, weights, n_grid,
                                                               fills if source.offset is None else ())
    finally:
        block = None
        if mapped is not None:
            mapped.close()
        if shared is None:
            with NETCDF_LOCK:
                nc.close()
    return out


def open_file(path, **kwargs) -> xr.Dataset:
    """A file through xarray, as `stores.open_dataset` opens it; inside a run's task a local NetCDF file is opened
    with netCDF4 here and that handle kept for the task's file tasks (`opened.share_handle`): an HDF5 open costs
    about 6 ms of CPU, 5 % of reading a 13 MB file, and the file task would otherwise open the file again."""
    if not in_task() or is_url(path) or is_zarr(path):
        return open_dataset(path, **kwargs)
    with NETCDF_LOCK:
        nc = netCDF4.Dataset(path, "r")
    try:
        ds = xr.open_dataset(NetCDF4DataStore(nc), **kwargs)
    except Exception:
        nc.close()
        raise
    share_handle(path, nc)
    return ds


def _plain_floats(var) -> bool:
    """Floats that decode by masking alone: no packing attributes, no unsigned flag."""
    attrs = set(var.ncattrs())
    return var.dtype.kind == "f" and not attrs & {"scale_factor", "add_offset", "_Unsigned"}


def _fill_values(var) -> tuple:
    """The values xarray's CF decoding reads as missing: ``_FillValue`` and ``missing_value``."""
    values = []
    for name in ("_FillValue", "missing_value"):
        if name in var.ncattrs():
            values.extend(np.atleast_1d(np.asarray(var.getncattr(name))).tolist())
    return tuple(v for v in dict.fromkeys(values) if not np.isnan(v))


def _as_missing(block: np.ndarray, fills: tuple) -> np.ndarray:
    for fill in fills:
        hit = block == block.dtype.type(fill)
        if hit.any():
            block = np.where(hit, block.dtype.type(np.nan), block)
    return block


def _decoded_by_xarray(source: FileSource, index: tuple) -> np.ndarray:
    """Packed or integer values, decoded by xarray itself (the other path's decoding, to the bit)."""
    import xarray as xr

    with _FILE_TASK_LOCK:
        with xr.open_dataset(source.path, engine="netcdf4", decode_times=False, cache=False) as ds:
            return np.asarray(ds[source.variable][index].values)


def lazy_file_means(sources: list[FileSource], weights: np.ndarray, name: str) -> dask_array.Array:
    """The time series of global means of one variable over its files: one task per file, joined along time."""
    weights_key = dask.delayed(np.asarray(weights, dtype=np.float64), pure=True)
    reduce_file = dask.delayed(file_global_means, pure=True)
    parts = [
        dask_array.from_delayed(reduce_file(source, weights_key, dask_key_name=f"{name}-{Path(source.path).name}-"
                                            f"{dask.base.tokenize(source)}"),
                                shape=(source.steps,), dtype=np.float64)
        for source in sources
    ]
    return parts[0] if len(parts) == 1 else dask_array.concatenate(parts)


def file_task_mean(da, weights, files: list, keep: np.ndarray | None):
    """Lazy global mean of `da` with one read-and-reduce task per local NetCDF file, or None for Zarr stores,
    remote files and variables with dims other than time and the grid (the general dask reduction,
    `means.global_mean`, handles those). `files` are (path, steps, dims, offset) in time order; `keep` the
    positions kept on the run's time axis (None: all)."""
    grid = tuple(weights.dims)
    sources = []
    for path, steps, dims, offset in files:
        if is_url(path) or is_zarr(path):  # Zarr stores and remote files: read through xarray's backends
            return None
        if set(dims) != {"time", *grid} or len(dims) != len(grid) + 1:
            return None
        axes = (dims.index("time"), *(dims.index(d) for d in grid))
        sources.append(FileSource(str(path), str(da.name), int(steps), axes, offset))
    data = lazy_file_means(sources, np.asarray(weights.values, dtype=np.float64), f"global-mean-{da.name}")
    if keep is not None:
        data = data[keep]
    return labelled_mean(data, da, ("time",))

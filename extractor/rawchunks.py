"""A NetCDF-4 variable's storage chunks read straight from the file and inflated outside HDF5.

netCDF4 reads a compressed variable through HDF5, which inflates each storage chunk and undoes the shuffle
inside the library, under the one lock per process that netCDF-C needs (it is not thread-safe): a process
decodes one chunk at a time. Here the file's chunk index (where each chunk lies, how long it is) is asked of
HDF5 once per file, through h5py (h5py docs: ``DatasetID.chunk_iter``, one call for every written chunk);
after that no HDF5 call is made: each chunk's bytes are read with ``os.pread``, inflated with libdeflate (the
``deflate`` package; ``zlib`` if it is missing) and unshuffled in numpy, several chunks at a time in threads
(all three release the GIL). The decoded block is exactly what netCDF4 returns with auto mask and scale off:
the same raw values, bit for bit, in the variable's own dims order; decoding (fill values, packing) is the
caller's, as on the netCDF4 path.

Handled: chunked layout; the deflate filter, with or without the shuffle filter before it; little-endian
integer or float values; chunks that span the whole grid or tile it, and edge chunks (HDF5 stores them whole:
the part beyond the variable's shape is dropped). Anything else is not read here — `open_raw` returns None and
says why (`unsupported_reason`), and the caller reads the file through netCDF4 as before (or, for a classic
file, maps it: `classicmap`): classic (netCDF-3) files, contiguous or compact layouts, any other filter
(fletcher32 checksums, szip, scale-offset, plugins), a chunk whose filter mask says a filter was skipped, chunks
never written (fill-value-only chunks: HDF5 would make them up from the fill value), big-endian values, a file
with a user block, h5py not installed. Nothing is guessed:
a chunk that does not inflate to its full size raises `RawChunkError`.
"""
from __future__ import annotations

import itertools
import logging
import os
import sys
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

try:  # libdeflate: about 2× zlib's inflate speed on our chunks (README, "Running at scale")
    import deflate as _libdeflate
except ImportError:  # pragma: no cover - a dependency; zlib gives the same bytes, slower
    _libdeflate = None

# HDF5 filter identifiers (HDF5 reference manual, H5Zpublic.h): the only two handled here
FILTER_DEFLATE, FILTER_SHUFFLE = 1, 2
# HDF5 dataset layouts (H5Dpublic.h)
LAYOUT_CHUNKED = 2

#: threads that read and inflate chunks in one process (the chunks of one slab are dealt to them), unless the
#: environment variable ``SENSEMBLE_READ_THREADS`` says otherwise (`read_threads`)
READ_THREADS = max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)
#: set by `sensemble.compute` in the worker processes it starts: their share of the machine's cores (one per worker
#: when there are as many workers as cores), so that N workers do not start N threads each on an N-core node
READ_THREADS_VARIABLE = "SENSEMBLE_READ_THREADS"

#: whether the extractor reads compressed chunks here by default; the environment variable
#: ``SENSEMBLE_RAW_CHUNKS`` (``1``/``0``) overrides it in every process of a batch, workers included
RAW_CHUNKS_DEFAULT = True
RAW_CHUNKS_VARIABLE = "SENSEMBLE_RAW_CHUNKS"

_log = logging.getLogger(__name__)
_pool: ThreadPoolExecutor | None = None
_pool_pid: int | None = None


class RawChunkError(RuntimeError):
    """A storage chunk did not decode as its index promised (corrupt or truncated file)."""


@dataclass(frozen=True)
class RawChunks:
    """Where every storage chunk of one variable lies in its file, and how to decode it."""

    path: str
    variable: str
    shape: tuple[int, ...]
    chunk_shape: tuple[int, ...]
    dtype: np.dtype
    shuffle: bool
    offsets: np.ndarray  # (n chunks, ndim): each chunk's first index along each dim
    addresses: np.ndarray  # (n chunks,): byte offset of its compressed bytes in the file
    sizes: np.ndarray  # (n chunks,): their length

    @property
    def chunk_bytes(self) -> int:
        return int(np.prod(self.chunk_shape)) * self.dtype.itemsize

    def read(self, axis: int, start: int, stop: int) -> np.ndarray:
        """Indices ``start:stop`` along `axis` (all of every other dim), decoded: the values netCDF4's
        ``var[..., start:stop, ...]`` gives with auto mask and scale off."""
        stop = min(stop, self.shape[axis])
        out_shape = list(self.shape)
        out_shape[axis] = max(0, stop - start)
        out = np.empty(out_shape, dtype=self.dtype)
        first = self.offsets[:, axis]
        wanted = np.flatnonzero((first < stop) & (first + self.chunk_shape[axis] > start))
        wanted = wanted[np.argsort(first[wanted], kind="stable")]  # along time: neighbours decode together
        if wanted.size == 0:
            return out
        threads = read_threads()
        groups = np.array_split(wanted, min(wanted.size, 4 * threads))
        fd = os.open(self.path, os.O_RDONLY)
        try:
            work = [(self, fd, group, out, axis, start, stop) for group in groups]
            if len(work) == 1 or threads == 1:
                for item in work:
                    _decode_group(*item)
            else:
                list(_thread_pool().map(lambda item: _decode_group(*item), work))
        finally:
            os.close(fd)
        return out


def read_raw_chunks() -> bool:
    """Whether `open_raw` should be tried at all (`RAW_CHUNKS_DEFAULT`, or ``SENSEMBLE_RAW_CHUNKS``)."""
    setting = os.environ.get(RAW_CHUNKS_VARIABLE, "").strip()
    return RAW_CHUNKS_DEFAULT if setting == "" else setting not in ("0", "false", "no", "off")


def open_raw(path, variable: str) -> RawChunks | None:
    """The chunk index of `variable` in the file at `path`, or None where this module does not read it
    (see `unsupported_reason`; the caller then reads through netCDF4)."""
    index = _chunk_index(str(path), variable)
    if isinstance(index, RawChunks):
        return index
    _log.debug("%s: %s read through netCDF4: %s", path, variable, index)
    return None


def unsupported_reason(path, variable: str) -> str | None:
    """Why `open_raw` gives None for this variable (None: it is read here)."""
    index = _chunk_index(str(path), variable)
    return None if isinstance(index, RawChunks) else index


def _chunk_index(path: str, variable: str) -> RawChunks | str:
    try:
        import h5py
    except ImportError:
        return "h5py is not installed"
    if sys.byteorder != "little":
        return "this machine is big-endian (the unshuffle assumes little-endian memory)"
    try:
        if not h5py.is_hdf5(path):
            return "not an HDF5 file (classic netCDF format)"
        with h5py.File(path, "r") as f:
            if f.userblock_size:
                return f"the file has a user block of {f.userblock_size} bytes"
            dataset = f.get(variable)
            if not isinstance(dataset, h5py.Dataset):
                return f"no HDF5 dataset {variable!r} at the file's root"
            return _dataset_index(path, variable, dataset)
    except OSError as error:  # h5py could not open it: netCDF4 will say what is wrong
        return f"h5py could not read it ({error})"


def _dataset_index(path: str, variable: str, dataset) -> RawChunks | str:
    dcpl = dataset.id.get_create_plist()
    if dcpl.get_layout() != LAYOUT_CHUNKED:
        return "not a chunked layout (contiguous or compact)"
    filters = [dcpl.get_filter(i)[0] for i in range(dcpl.get_nfilters())]
    if filters not in ([FILTER_DEFLATE], [FILTER_SHUFFLE, FILTER_DEFLATE]):
        return f"HDF5 filters {filters}: only deflate, with or without shuffle before it, are read here"
    dtype = dataset.dtype
    if dtype.kind not in "fiu" or dtype.byteorder == ">" or (dtype.byteorder == "=" and sys.byteorder != "little"):
        return f"values of type {dtype.str}: only little-endian integers and floats are read here"
    shape, chunk_shape = tuple(dataset.shape), tuple(dataset.chunks)
    found: list[tuple] = []
    try:
        dataset.id.chunk_iter(lambda info: found.append((info.chunk_offset, info.filter_mask, info.byte_offset,
                                                         info.size)))
    except (AttributeError, RuntimeError) as error:  # an HDF5 older than 1.12.3 has no chunk iteration
        return f"the chunk index could not be listed ({error})"
    expected = {tuple(o) for o in itertools.product(*(range(0, n, c) for n, c in zip(shape, chunk_shape)))}
    if {tuple(o) for o, *_ in found} != expected or len(found) != len(expected):
        return f"{len(expected) - len(found)} of {len(expected)} chunks never written (HDF5 fills them)"
    if any(mask for _, mask, _, _ in found):
        return "a chunk was stored with one of its filters skipped"
    return RawChunks(path, variable, shape, chunk_shape, np.dtype(dtype), FILTER_SHUFFLE in filters,
                     np.array([o for o, *_ in found], dtype=np.int64).reshape(len(found), len(shape)),
                     np.array([a for *_, a, _ in found], dtype=np.int64),
                     np.array([s for *_, s in found], dtype=np.int64))


def read_threads() -> int:
    """Chunk-reading threads of this process: ``SENSEMBLE_READ_THREADS`` if set to a positive number, else
    `READ_THREADS`."""
    setting = os.environ.get(READ_THREADS_VARIABLE, "").strip()
    return int(setting) if setting.isdigit() and int(setting) > 0 else READ_THREADS


def _thread_pool() -> ThreadPoolExecutor:
    """This process's pool of chunk readers (a forked child makes its own: a parent's threads do not follow)."""
    global _pool, _pool_pid
    if _pool is None or _pool_pid != os.getpid():
        _pool, _pool_pid = ThreadPoolExecutor(read_threads(), thread_name_prefix="sensemble-chunks"), os.getpid()
    return _pool


def _decode_group(index: RawChunks, fd: int, group: np.ndarray, out: np.ndarray, axis: int, start: int,
                  stop: int) -> None:
    """Read, inflate and unshuffle the chunks `group` of `index` and put their part of ``start:stop`` in `out`."""
    if _consecutive_whole_grid(index, group, axis):
        per_run = max(1, _RUN_BYTES // index.chunk_bytes)
        for lo in range(0, group.size, per_run):
            _decode_run(index, fd, group[lo: lo + per_run], out, start, stop)
        return
    for k in group:
        values = _unshuffle(_read_chunk(index, fd, k), index.dtype) if index.shuffle else \
            np.frombuffer(_read_chunk(index, fd, k), dtype=index.dtype)
        chunk = values.reshape(index.chunk_shape)
        source, target = [], []
        for dim, (first, size, length) in enumerate(zip(index.offsets[k], index.chunk_shape, index.shape)):
            lo, hi = (max(start, first), min(stop, first + size)) if dim == axis else (first, min(first + size, length))
            source.append(slice(lo - first, hi - first))
            target.append(slice(lo - start, hi - start) if dim == axis else slice(lo, hi))
        out[tuple(target)] = chunk[tuple(source)]


def _consecutive_whole_grid(index: RawChunks, group: np.ndarray, axis: int) -> bool:
    """Whether the chunks of `group` follow one another along time (axis 0), each spanning the whole grid."""
    if axis != 0 or index.chunk_shape[1:] != index.shape[1:]:
        return False
    first = index.offsets[group, 0]
    return bool(np.array_equal(first, first[0] + index.chunk_shape[0] * np.arange(group.size)))


def _decode_run(index: RawChunks, fd: int, group: np.ndarray, out: np.ndarray, start: int, stop: int) -> None:
    """Chunks one after another along time, each the whole grid (the usual CMIP layouts): inflated into one
    buffer and unshuffled together — numpy's per-call cost paid once per group, not once per chunk (a third of
    the time with chunks of one 64×128 step)."""
    nbytes = index.chunk_bytes
    buffer = np.empty((group.size, nbytes), dtype=np.uint8)
    for row, k in enumerate(group):
        buffer[row] = np.frombuffer(_read_chunk(index, fd, k), dtype=np.uint8)
    values = _unshuffle(buffer, index.dtype, group.size) if index.shuffle else buffer.view(index.dtype)
    steps = index.chunk_shape[0]
    first = int(index.offsets[group[0], 0])
    lo, hi = max(start, first), min(stop, first + steps * group.size, index.shape[0])
    values = values.reshape((group.size * steps,) + index.chunk_shape[1:])
    out[lo - start: hi - start] = values[lo - first: hi - first]


def _read_chunk(index: RawChunks, fd: int, k: int):
    """Chunk `k` of `index`, read and inflated: its whole chunk's bytes (edge chunks are stored whole too)."""
    compressed = os.pread(fd, int(index.sizes[k]), int(index.addresses[k]))
    if len(compressed) != index.sizes[k]:
        raise RawChunkError(f"{index.path}: chunk {k} of {index.variable} is cut short by the end of the file")
    return _inflate(compressed, index.chunk_bytes, index)


def _inflate(compressed: bytes, nbytes: int, index: RawChunks):
    try:
        data = _libdeflate.zlib_decompress(compressed, nbytes) if _libdeflate else zlib.decompress(compressed)
    except (zlib.error, getattr(_libdeflate, "DeflateError", zlib.error)) as error:
        raise RawChunkError(f"{index.path}: a chunk of {index.variable} does not inflate ({error})") from None
    if len(data) != nbytes:
        raise RawChunkError(f"{index.path}: a chunk of {index.variable} inflates to {len(data)} bytes, "
                            f"not the {nbytes} of a whole chunk")
    return data


_UNSIGNED = {2: np.uint16, 4: np.uint32, 8: np.uint64}
# chunks decoded together stay within about this many bytes, so the unshuffle's passes over them hit the cache
_RUN_BYTES = 2**20


def _unshuffle(data, dtype: np.dtype, chunks: int = 1) -> np.ndarray:
    """Undo HDF5's shuffle filter on `chunks` chunks one after another in `data`: each chunk holds the first bytes
    of its values, then their second bytes, and so on (HDF5 reference manual, H5Pset_shuffle); little-endian.

    For 2-, 4- and 8-byte values the bytes are put back together with shifts and ors of whole byte planes —
    each a contiguous pass — which measured 5× faster than numpy's transposing copy of the (itemsize, n) bytes.
    """
    size = dtype.itemsize
    planes = np.frombuffer(data, dtype=np.uint8).reshape(chunks, size, -1)
    if size == 1:
        return planes.reshape(-1).view(dtype)
    if size not in _UNSIGNED:
        return np.ascontiguousarray(planes.transpose(0, 2, 1)).view(dtype).reshape(-1)
    word = _UNSIGNED[size]
    values = planes[:, size - 1].astype(word)
    for byte in range(size - 2, -1, -1):
        values <<= word(8)
        values |= planes[:, byte]
    return values.view(dtype).reshape(-1)

"""Tests of extractor/rawchunks.py: storage chunks read and inflated outside HDF5 give netCDF4's values bit for bit.

The reference throughout is netCDF4 reading the same file through HDF5 with auto mask and scale off (common
practice, no source: the library the extractor used before is the judge of the bytes it returns); the chunk
index comes from h5py's ``DatasetID.chunk_iter`` (h5py docs). Where this module does not read a file, the
extractor's means must still be the netCDF4 path's, to the bit.
"""
import netCDF4
import numpy as np
import pytest

from sensemble.extractor import filemeans, rawchunks
from sensemble.extractor.catalog import scan
from sensemble.extractor.filemeans import FileSource, file_global_means
from sensemble.extractor.rawchunks import RawChunkError, open_raw, unsupported_reason
from sensemble.extractor.runs import global_mean_series
from tests.extractor.conftest import rewrite_file, write_run

NLAT, NLON, STEPS = 6, 12, 30


def patchy_field(steps=STEPS, seed=0):
    """Values with noise in every bit of the mantissa and missing cells (NaN) that move from step to step."""
    rng = np.random.default_rng(seed)
    lat = np.linspace(-75, 75, NLAT)[:, None]
    lon = np.linspace(15, 345, NLON)[None, :]
    data = 250.0 + 40.0 * np.cos(np.deg2rad(lat)) + 0.01 * lon + rng.normal(0, 3, (steps, NLAT, NLON))
    for k in range(steps):
        data[k][(lat > 40) & (lon < 30 + 40 * (k % 3))] = np.nan
    return data


def write_field(path, data=None, *, dims=("time", "lat", "lon"), dtype="f4", file_format="NETCDF4", steps=None,
                **storage):
    """One variable ``tas`` in a file, NaN written as the fill value, stored as `storage` says (netCDF4's
    createVariable keywords: zlib, complevel, shuffle, chunksizes, fletcher32, contiguous, endian)."""
    data = patchy_field() if data is None else data
    if dims != ("time", "lat", "lon"):
        data = data.transpose([("time", "lat", "lon").index(d) for d in dims])
    with netCDF4.Dataset(path, "w", format=file_format) as nc:
        for name, size in zip(dims, data.shape):
            nc.createDimension(name, size)
        fill = np.array(1e20, dtype=dtype) if np.dtype(dtype).kind == "f" else None
        var = nc.createVariable("tas", dtype, dims, fill_value=fill, **storage)
        if steps is None:
            var[:] = np.ma.masked_invalid(data)
        else:  # only these time steps written: the chunks between them never are
            for lo, hi in steps:
                var[lo:hi] = np.ma.masked_invalid(data[lo:hi])
    return path


ZLIB = dict(zlib=True, complevel=1, shuffle=True)
READ_HERE = {
    "12 steps per chunk, uneven last chunk": dict(chunksizes=(12, NLAT, NLON), **ZLIB),
    "1 step per chunk": dict(chunksizes=(1, NLAT, NLON), **ZLIB),
    "tiled grid, uneven edge chunks": dict(chunksizes=(7, 4, 5), zlib=True, complevel=4, shuffle=True),
    "deflate without shuffle": dict(chunksizes=(5, NLAT, NLON), zlib=True, complevel=1),
    "float64 values": dict(chunksizes=(4, 3, NLON), dtype="f8", **ZLIB),
    "(time, lon, lat), tiled": dict(chunksizes=(6, 5, 4), dims=("time", "lon", "lat"), **ZLIB),
}
NOT_READ_HERE = {  # layout: (storage, a word of the reason given)
    "classic, uncompressed": (dict(file_format="NETCDF3_64BIT_OFFSET"), "classic"),
    "fletcher32 checksums": (dict(chunksizes=(12, NLAT, NLON), fletcher32=True, **ZLIB), "filters"),
    "chunked, uncompressed": (dict(chunksizes=(12, NLAT, NLON)), "filters"),
    "contiguous": (dict(contiguous=True), "contiguous"),
    "big-endian": (dict(chunksizes=(12, NLAT, NLON), dtype=">f4", endian="big", **ZLIB), "little-endian"),
    "chunks never written": (dict(chunksizes=(5, NLAT, NLON), steps=[(0, 10), (20, 30)], **ZLIB), "never written"),
}


def netcdf4_block(path, axis, lo, hi):
    with netCDF4.Dataset(path) as nc:
        var = nc.variables["tas"]
        var.set_auto_maskandscale(False)
        index = [slice(None)] * var.ndim
        index[axis] = slice(lo, hi)
        return np.asarray(var[tuple(index)])


def means(path, dims=("time", "lat", "lon"), raw="1", monkeypatch=None):
    """file_global_means of the file, with raw chunk reads on ("1") or off ("0")."""
    monkeypatch.setenv(rawchunks.RAW_CHUNKS_VARIABLE, raw)
    axes = (dims.index("time"), dims.index("lat"), dims.index("lon"))
    weights = np.cos(np.deg2rad(np.linspace(-75, 75, NLAT)))[:, None] * np.linspace(1.0, 2.0, NLON)[None, :]
    return file_global_means(FileSource(str(path), "tas", STEPS, axes), weights)


@pytest.mark.parametrize("layout", READ_HERE)
def test_raw_blocks_are_netcdf4s_bit_for_bit(tmp_path, layout):
    storage = dict(READ_HERE[layout])
    dims = storage.get("dims", ("time", "lat", "lon"))
    path = write_field(tmp_path / "f.nc", **storage)
    chunks = open_raw(path, "tas")
    assert chunks is not None, unsupported_reason(path, "tas")
    axis = dims.index("time")
    for lo, hi in [(0, STEPS), (0, 12), (12, 24), (24, 36), (5, 17), (29, 30), (3, 3)]:
        expected = netcdf4_block(path, axis, lo, hi)
        block = chunks.read(axis, lo, hi)
        assert block.dtype == expected.dtype and block.shape == expected.shape
        assert block.tobytes() == expected.tobytes(), (lo, hi)  # bytes: NaN and fill values compared too


@pytest.mark.parametrize("layout", READ_HERE)
def test_global_means_are_the_netcdf4_paths_bit_for_bit(tmp_path, layout, monkeypatch):
    storage = dict(READ_HERE[layout])
    dims = storage.get("dims", ("time", "lat", "lon"))
    path = write_field(tmp_path / "f.nc", **storage)
    reads = []
    original = rawchunks.RawChunks.read
    monkeypatch.setattr(rawchunks.RawChunks, "read", lambda self, *a: reads.append(a) or original(self, *a))
    monkeypatch.setattr(filemeans, "SLAB_BYTES", 1)  # one slab per storage chunk along time: many reads
    off = means(path, dims, "0", monkeypatch)
    assert not reads
    on = means(path, dims, "1", monkeypatch)
    assert reads  # the raw path was taken, not a fallback
    assert np.isnan(off).sum() == 0 and off.tobytes() == on.tobytes()


@pytest.mark.parametrize("layout", NOT_READ_HERE)
def test_what_is_not_read_here_falls_back_to_netcdf4_and_says_why(tmp_path, layout, monkeypatch):
    storage, word = NOT_READ_HERE[layout]
    path = write_field(tmp_path / "f.nc", **storage)
    assert open_raw(path, "tas") is None
    assert word in unsupported_reason(path, "tas")
    off, on = means(path, raw="0", monkeypatch=monkeypatch), means(path, raw="1", monkeypatch=monkeypatch)
    assert off.tobytes() == on.tobytes()
    if layout == "chunks never written":  # HDF5 fills them: every cell missing, so those means are NaN
        assert np.isnan(on[10:20]).all() and np.isfinite(on[:10]).all()


def test_packed_integers_are_decoded_by_xarray_as_before(tmp_path, monkeypatch):
    # int16 with scale_factor/add_offset: the extractor decodes those through xarray (filemeans), never raw
    src = write_field(tmp_path / "src.nc", chunksizes=(12, NLAT, NLON), **ZLIB)
    path = rewrite_file(src, tmp_path / "packed.nc", chunk_steps=12, pack=True)
    opened = []
    monkeypatch.setattr(filemeans, "open_raw", lambda *a: opened.append(a) or rawchunks.open_raw(*a))
    off, on = means(path, raw="0", monkeypatch=monkeypatch), means(path, raw="1", monkeypatch=monkeypatch)
    assert not opened and off.tobytes() == on.tobytes()
    # the module itself reads the raw int16 values (2-byte unshuffle) as netCDF4 does
    assert open_raw(path, "tas").read(0, 0, STEPS).tobytes() == netcdf4_block(path, 0, 0, STEPS).tobytes()


@pytest.mark.parametrize("threads", [1, 3])
def test_any_number_of_threads_gives_the_same_bytes(tmp_path, monkeypatch, threads):
    path = write_field(tmp_path / "f.nc", chunksizes=(1, 4, 5), **ZLIB)  # 180 chunks dealt to the threads
    monkeypatch.setattr(rawchunks, "READ_THREADS", threads)
    assert open_raw(path, "tas").read(0, 0, STEPS).tobytes() == netcdf4_block(path, 0, 0, STEPS).tobytes()


def test_a_damaged_chunk_is_an_error_not_a_guess(tmp_path, monkeypatch):
    path = write_field(tmp_path / "f.nc", chunksizes=(12, NLAT, NLON), **ZLIB)
    chunks = open_raw(path, "tas")
    with open(path, "r+b") as stream:  # overwrite the middle of the second chunk's compressed bytes
        stream.seek(int(chunks.addresses[1] + chunks.sizes[1] // 2))
        stream.write(b"\xff" * 16)
    with pytest.raises(RawChunkError, match="f.nc"):
        chunks.read(0, 0, STEPS)
    # in the extractor the damaged slab goes to netCDF4, which fails as it did before (its own HDF error)
    with pytest.raises(Exception) as before:
        means(path, raw="0", monkeypatch=monkeypatch)
    with pytest.raises(Exception) as after:
        means(path, raw="1", monkeypatch=monkeypatch)
    assert type(after.value) is type(before.value) and not isinstance(after.value, RawChunkError)


def test_a_runs_means_are_the_same_with_netcdf4_and_h5py_in_one_process(tmp_path, monkeypatch):
    # the run's task keeps each file open in netCDF4 while the raw reader opens it with h5py (a second HDF5)
    written = write_run(tmp_path / "src", "TESTMODEL-1", "piControl", "r1i1p1f1", ("tas", "rsdt", "rsut", "rlut"),
                        nyears=3, files_per_variable=2, areacella=True, nlat=NLAT, nlon=NLON,
                        values={v: lambda lat, lon, k: 250 + 0.3 * k + 0.01 * lon + np.cos(lat) for v in "tas"})
    for path in written:
        rewrite_file(path, tmp_path / "out" / path.relative_to(tmp_path / "src"), chunk_steps=1)
    run = scan(tmp_path / "out").get("TESTMODEL-1", "r1i1p1f1", "piControl")
    monkeypatch.setenv(rawchunks.RAW_CHUNKS_VARIABLE, "0")
    off = global_mean_series(run).compute()
    monkeypatch.setenv(rawchunks.RAW_CHUNKS_VARIABLE, "1")
    on = global_mean_series(run).compute()
    for variable in ("tas", "rsdt", "rsut", "rlut"):
        assert off[variable].values.tobytes() == on[variable].values.tobytes()


@pytest.mark.parametrize("setting, expected", [("1", True), ("0", False), ("off", False), ("", None)])
def test_the_setting_reads_from_the_environment(monkeypatch, setting, expected):
    monkeypatch.setenv(rawchunks.RAW_CHUNKS_VARIABLE, setting)
    assert rawchunks.read_raw_chunks() is (rawchunks.RAW_CHUNKS_DEFAULT if expected is None else expected)

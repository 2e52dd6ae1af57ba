"""Tests of extractor/classicmap.py: classic (netCDF-3) files mapped give netCDF4's values bit for bit.

The reference throughout is netCDF4 reading the same file through netCDF-C with auto mask and scale off (common
practice, no source: the library the extractor used before is the judge of the values); the header is read by
scipy's netCDF-3 reader (``scipy.io.netcdf_file``, scipy docs). Where the file is not mapped, the extractor's
means must still be the netCDF4 path's, to the bit.
"""
import netCDF4
import numpy as np
import pytest

from sensemble.extractor import classicmap, filemeans, rawchunks
from sensemble.extractor.classicmap import open_mapped
from sensemble.extractor.filemeans import FileSource, file_global_means
from tests.extractor.test_rawchunks import NLAT, NLON, STEPS, patchy_field

FORMATS = ["NETCDF3_CLASSIC", "NETCDF3_64BIT_OFFSET"]


def write_classic(path, *, file_format="NETCDF3_64BIT_OFFSET", record=True, dtype="f4", dims=("time", "lat", "lon"),
                  fill=1e20):
    """``tas`` in a classic file, NaN written as the fill value; `record`: time unlimited, with ``time`` and
    ``time_bnds`` as record variables beside it (the values of one step interleaved with theirs on disk)."""
    data = patchy_field()
    if dims != ("time", "lat", "lon"):
        data = data.transpose([("time", "lat", "lon").index(d) for d in dims])
    with netCDF4.Dataset(path, "w", format=file_format) as nc:
        for name, size in zip(dims, data.shape):
            nc.createDimension(name, None if (record and name == "time") else size)
        nc.createDimension("bnds", 2)
        time = nc.createVariable("time", "f8", ("time",))
        bounds = nc.createVariable("time_bnds", "f8", ("time", "bnds"))
        var = nc.createVariable("tas", dtype, dims, fill_value=np.array(fill, dtype=dtype))
        var.missing_value = np.array(-999.0, dtype=dtype)
        var[:] = np.ma.masked_invalid(data)
        time[:] = np.arange(STEPS) + 0.5
        bounds[:] = np.stack([np.arange(STEPS), np.arange(STEPS) + 1.0], axis=1)
    return path


def netcdf4_values(path):
    with netCDF4.Dataset(path) as nc:
        var = nc.variables["tas"]
        var.set_auto_maskandscale(False)
        return np.asarray(var[...])


def means(path, raw, monkeypatch, dims=("time", "lat", "lon")):
    monkeypatch.setenv(rawchunks.RAW_CHUNKS_VARIABLE, raw)
    axes = (dims.index("time"), dims.index("lat"), dims.index("lon"))
    weights = np.cos(np.deg2rad(np.linspace(-75, 75, NLAT)))[:, None] * np.linspace(1.0, 2.0, NLON)[None, :]
    return file_global_means(FileSource(str(path), "tas", STEPS, axes), weights)


@pytest.mark.parametrize("record", [True, False], ids=["record variable", "fixed time"])
@pytest.mark.parametrize("file_format", FORMATS)
@pytest.mark.parametrize("dtype", ["f4", "f8"])
def test_mapped_values_are_netcdf4s_bit_for_bit(tmp_path, file_format, record, dtype):
    path = write_classic(tmp_path / "f.nc", file_format=file_format, record=record, dtype=dtype)
    expected = netcdf4_values(path)
    mapped = open_mapped(path, "tas", expected.shape)
    assert mapped is not None
    try:
        values = mapped.values
        assert values.shape == expected.shape and values.dtype.newbyteorder("=") == expected.dtype
        # bytes in the machine's order: NaN, fill values and every mantissa bit compared
        assert values.astype(expected.dtype).tobytes() == expected.tobytes()
        for lo, hi in [(0, 12), (5, 17), (29, 30)]:
            assert values[lo:hi].astype(expected.dtype).tobytes() == expected[lo:hi].tobytes()
    finally:
        mapped.close()


@pytest.mark.parametrize("dims", [("time", "lat", "lon"), ("time", "lon", "lat")])
@pytest.mark.parametrize("record", [True, False], ids=["record variable", "fixed time"])
def test_global_means_are_the_netcdf4_paths_bit_for_bit(tmp_path, monkeypatch, record, dims):
    path = write_classic(tmp_path / "f.nc", record=record, dims=dims)
    opened = []
    monkeypatch.setattr(filemeans, "open_mapped", lambda *a: opened.append(classicmap.open_mapped(*a)) or opened[-1])
    monkeypatch.setattr(filemeans, "SLAB_BYTES", 1)  # one step per slab: many views of the map
    off = means(path, "0", monkeypatch, dims)
    assert not opened
    on = means(path, "1", monkeypatch, dims)
    assert opened and opened[0] is not None  # the map was read, not a fallback
    assert opened[0].values is None  # and closed by the file's task
    # common practice, no source: with cells missing at every step, a mean that came out NaN would hide a fill
    # value that was not found
    assert np.isfinite(off).all() and off.tobytes() == on.tobytes()


def test_a_variable_scipy_does_not_read_falls_back_to_netcdf4(tmp_path, monkeypatch):
    # the CDF-5 variant (64-bit data) is classic to netCDF4 but not read by scipy: netCDF4 reads it, same means
    path = write_classic(tmp_path / "f.nc", file_format="NETCDF3_64BIT_DATA")
    assert open_mapped(path, "tas", netcdf4_values(path).shape) is None
    assert means(path, "0", monkeypatch).tobytes() == means(path, "1", monkeypatch).tobytes()


def test_a_shape_other_than_netcdf4s_is_not_used(tmp_path):
    path = write_classic(tmp_path / "f.nc")
    assert open_mapped(path, "tas", (STEPS + 1, NLAT, NLON)) is None
    assert open_mapped(path, "pr", (STEPS, NLAT, NLON)) is None


@pytest.mark.parametrize("record", [True, False], ids=["record variable", "fixed time"])
def test_a_truncated_file_is_never_read_past_its_end(tmp_path, monkeypatch, record):
    # common practice, no source: a mapped read past the end of a file kills the process (SIGBUS); the map must
    # refuse it, so the file is read by netCDF4 and the extractor sees what it saw before (here netCDF-C reads
    # the lost steps as fill values: the run's later checks are the ones that judge it)
    path = write_classic(tmp_path / "f.nc", record=record)
    size = path.stat().st_size
    with open(path, "r+b") as stream:
        stream.truncate(size - 4 * NLAT * NLON * 3)
    assert open_mapped(path, "tas", (STEPS, NLAT, NLON)) is None
    assert means(path, "1", monkeypatch).tobytes() == means(path, "0", monkeypatch).tobytes()


def write_every_attribute(path, file_format):
    """A classic file with an attribute of every type the format has, one value and several, and text with
    non-ASCII characters, an embedded NUL and none at all; a scalar coordinate, integers and a record variable."""
    with netCDF4.Dataset(path, "w", format=file_format) as nc:
        nc.createDimension("time", None)
        nc.createDimension("lat", 3)
        nc.title = "Température — test"
        nc.empty = ""
        for name, dtype in [("b", "i1"), ("s", "i2"), ("i", "i4"), ("f", "f4"), ("d", "f8")]:
            nc.setncattr(f"one_{name}", np.array([7], dtype=dtype))
            nc.setncattr(f"many_{name}", np.array([1, -2, 3], dtype=dtype))
        time = nc.createVariable("time", "f8", ("time",))
        time.units, time.calendar = "days since 1850-01-01", "noleap"
        var = nc.createVariable("tas", "f4", ("time", "lat"), fill_value=np.float32(1e20))
        var.missing_value = np.float32(-999.0)
        var.valid_range = np.array([100.0, 400.0], dtype="f4")
        var.coordinates = "height"
        var.note = "a\x00b"
        height = nc.createVariable("height", "f8", ())
        height.units = "m"
        height[...] = 2.0
        counts = nc.createVariable("counts", "i2", ("lat",))
        counts[:] = [1, -2, 300]
        time[:] = [15.5, 45.0]
        var[:] = np.array([[280.0, 1e20, 290.5], [281.0, 282.0, np.nan]], dtype="f4")


def assert_same_attribute(got, want):
    assert type(got) is type(want)
    if isinstance(want, np.ndarray):
        assert got.dtype == want.dtype and got.tobytes() == want.tobytes()
    else:
        assert got == want


@pytest.mark.parametrize("file_format", FORMATS)
def test_a_classic_file_through_scipy_is_what_netcdf4_gives(tmp_path, file_format):
    # netCDF4 (auto mask and scale off) is the reference for every attribute, dim, shape, dtype and value the fast
    # path reads (common practice, no source)
    path = tmp_path / "f.nc"
    write_every_attribute(path, file_format)
    mapped = classicmap.open_classic(path)
    assert mapped is not None and mapped.data_model == file_format
    try:
        with netCDF4.Dataset(path) as nc:
            assert mapped.ncattrs() == nc.ncattrs()
            for name in nc.ncattrs():
                assert_same_attribute(mapped.getncattr(name), nc.getncattr(name))
            assert list(mapped.variables) == list(nc.variables)
            for name, var in nc.variables.items():
                var.set_auto_maskandscale(False)
                other = mapped.variables[name]
                other.set_auto_maskandscale(False)
                assert (other.dimensions, other.ndim, other.shape, other.dtype) == (var.dimensions, var.ndim, var.shape,
                                                                                    var.dtype)
                assert other.ncattrs() == var.ncattrs() and other.chunking() == var.chunking()
                for attr in var.ncattrs():
                    assert_same_attribute(other.getncattr(attr), var.getncattr(attr))
                want = np.asarray(var[...])
                got = other[...]
                assert got.dtype == want.dtype and got.shape == want.shape and got.tobytes() == want.tobytes()
    finally:
        mapped.close()


def test_only_the_classic_variants_scipy_reads_are_opened_so(tmp_path):
    # CDF-5 and netCDF-4 files are opened by netCDF4 (the magic numbers of the netCDF file format specification)
    assert classicmap.open_classic(write_classic(tmp_path / "a.nc", file_format="NETCDF3_64BIT_DATA")) is None
    with netCDF4.Dataset(tmp_path / "b.nc", "w", format="NETCDF4") as nc:
        nc.createDimension("x", 1)
    assert classicmap.open_classic(tmp_path / "b.nc") is None
    assert classicmap.open_classic(tmp_path / "missing.nc") is None
    truncated = write_classic(tmp_path / "c.nc", record=False)
    with open(truncated, "r+b") as stream:
        stream.truncate(truncated.stat().st_size // 2)
    assert classicmap.open_classic(truncated) is None

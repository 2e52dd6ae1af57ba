"""Where a dataset lives: a NetCDF file, or a Zarr store (a local folder or an fsspec URL).

One CMIP dataset (one variable of one run) is one NetCDF file per time chunk on disk, or one Zarr store in
cloud collections (``…/<source_id>/<experiment_id>/<member_id>/<table_id>/<variable_id>/<grid_label>/<version>/``
holding ``.zmetadata``/``.zgroup`` (Zarr v2) or ``zarr.json`` (Zarr v3)). Both open through xarray to the same
lazy Dataset, so every check and reduction after opening is the same. A location is a `Path` for local
files and folders, a plain ``str`` for a URL (``s3://…``, ``gs://…``, ``https://…``, anything fsspec knows).
"""
from __future__ import annotations

import os
from pathlib import Path
from typing import NamedTuple

import xarray as xr

#: files whose presence makes a folder a Zarr store (v2 group, v2 consolidated metadata, v3)
ZARR_MARKERS = (".zgroup", ".zmetadata", "zarr.json")


class LocationStat(NamedTuple):
    """Size and modification time of a location, for the cache fingerprint and the provenance."""

    st_size: int
    st_mtime_ns: int

    @property
    def st_mtime(self) -> float:
        return self.st_mtime_ns / 1e9


def is_url(location) -> bool:
    return isinstance(location, str) and "://" in location


def is_zarr(location) -> bool:
    """A Zarr store: a URL not ending in ``.nc``, or a local folder with Zarr metadata."""
    if is_url(location):
        return not location.rstrip("/").endswith(".nc")
    path = Path(location)
    return path.is_dir() and any((path / marker).exists() for marker in ZARR_MARKERS)


def name_of(location) -> str:
    """The last component of a path or URL (what a one-line message shows)."""
    return str(location).rstrip("/").rsplit("/", 1)[-1] if is_url(location) else Path(location).name


def open_dataset(location, **kwargs) -> xr.Dataset:
    """Open a NetCDF file or a Zarr store lazily (no dask chunks unless asked), times not decoded unless asked."""
    if is_zarr(location):
        kwargs.pop("engine", None)
        return xr.open_dataset(str(location), engine="zarr", **kwargs)
    kwargs.setdefault("engine", "netcdf4")
    return xr.open_dataset(location, **kwargs)


def stat_location(location) -> LocationStat:
    """Size and latest modification of a file, of every file of a local store, or of a remote store's metadata.

    A local store is walked (its chunks are files: a rewritten chunk changes the fingerprint). A remote store is
    described by its metadata object as fsspec reports it; where the store says nothing (no size or time), the
    zeros mean that only its URL enters the fingerprint — remote CMIP stores are versioned in their path.
    """
    if is_url(location):
        import fsspec

        fs, root = fsspec.core.url_to_fs(location)
        for marker in ZARR_MARKERS:
            try:
                info = fs.info(f"{root.rstrip('/')}/{marker}")
            except (FileNotFoundError, OSError):
                continue
            mtime = info.get("mtime") or info.get("LastModified") or info.get("updated") or 0
            mtime_ns = int(mtime.timestamp() * 1e9) if hasattr(mtime, "timestamp") else int(float(mtime or 0) * 1e9)
            return LocationStat(int(info.get("size") or 0), mtime_ns)
        return LocationStat(0, 0)
    path = Path(location)
    if not path.is_dir():
        st = os.stat(path)
        return LocationStat(st.st_size, st.st_mtime_ns)
    size, latest = 0, 0
    for folder, _, names in os.walk(path):
        for name in names:
            st = os.stat(os.path.join(folder, name))
            size += st.st_size
            latest = max(latest, st.st_mtime_ns)
    return LocationStat(size, latest)

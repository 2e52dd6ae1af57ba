"""Area weighting: cell areas of a grid and lazy global means over it."""
from __future__ import annotations

import dask.array as dask_array
import netCDF4
import numpy as np
import xarray as xr

from sensemble.contract.cf import with_cell_method
from sensemble.contract.flags import COS_WEIGHTS, LON_BOUNDS_DERIVED

from .errors import ArchiveError

# netCDF-C gives every variable of every open file a cache of decompressed HDF5 chunks (64 MB by default);
# xarray keeps up to 128 files open, so on a 1° archive the caches grew to the size of the data read
# (2 GB for 0.9 GB of files, measured) and with the number of files. A global mean reads each storage
# chunk once, in slabs of whole years: the cache would only save decompressing again a storage chunk that
# straddles two dask chunks (at most one per dask chunk), so none is kept — measured on a 1° archive: peak
# memory 525 → 475 MB with a 4 MB cache → none, and no slower. `netCDF4.set_chunk_cache` sets the default
# for files opened later in this process. It is set here, not where files are opened (runs.py), because
# this module is imported wherever its global-mean tasks run — dask worker processes included — before
# they read any file.
HDF5_CHUNK_CACHE_BYTES = 0
netCDF4.set_chunk_cache(HDF5_CHUNK_CACHE_BYTES, 1009, 0.75)

# mean radius of the Earth (IUGG mean radius R1 = 6 371.0088 km, rounded as is customary)
EARTH_RADIUS_M = 6_371_000.0

_AREA_UNITS = {"m2", "m^2", "m**2", "m 2", "m-2 m4", "square_meters", "square_metres"}


def find_lat_lon(obj: xr.Dataset | xr.DataArray) -> tuple[str, str]:
    """Names of the latitude and longitude coordinates (by CF standard_name, units or name)."""
    lat, lon = lat_lon_names({str(name): coord.attrs for name, coord in obj.coords.items()})
    if lat is None or lon is None:
        raise ArchiveError("no latitude/longitude coordinates found", hint="the file must carry CF lat/lon coordinates")
    return lat, lon


def lat_lon_names(coords: dict[str, dict]) -> tuple[str | None, str | None]:
    """`find_lat_lon` over coordinate names → attributes, in order: None for what is not found."""

    def find(kind: str, units: set[str], names: tuple[str, ...]) -> str | None:
        for name, attrs in coords.items():
            if attrs.get("standard_name") == kind:
                return name
        for name, attrs in coords.items():
            if attrs.get("units") in units:
                return name
        return next((name for name in names if name in coords), None)

    return (find("latitude", {"degrees_north", "degree_north", "degree_N", "degrees_N", "degreeN"}, ("lat", "latitude")),
            find("longitude", {"degrees_east", "degree_east", "degree_E", "degrees_E", "degreeE"}, ("lon", "longitude")))


def _bounds(ds: xr.Dataset, coord: str) -> xr.DataArray | None:
    """The cell bounds of a coordinate: the variable named by its ``bounds`` attribute, else ``<coord>_bnds``."""
    names = [ds[coord].attrs.get("bounds"), ds[coord].encoding.get("bounds"), f"{coord}_bnds", f"{coord}_bounds"]
    for name in names:
        if name and name in ds.variables:
            b = ds[name]
            if b.ndim == 2 and coord in b.dims:
                extra = [d for d in b.dims if d != coord][0]
                return b.transpose(coord, extra)
    return None


def area_weights(
    ds: xr.Dataset | xr.DataArray, areacella: xr.DataArray | None = None
) -> tuple[xr.DataArray, str | None]:
    """Weights for a global mean over the horizontal grid of ``ds``.

    In order of preference:

    1. ``areacella`` (units m2, same grid as ``ds``);
    2. cell areas from the latitude and longitude bounds, on a sphere of radius
       `EARTH_RADIUS_M`: area = R² · |sin φ₂ − sin φ₁| · |λ₂ − λ₁| (exact for a cell
       bounded by two parallels and two meridians);
    3. cos φ at the cell centres, returned with the flag ``"cos_weights"``.

    Parameters
    ----------
    ds : Dataset or DataArray
        Holds the lat/lon coordinates (and, for a Dataset, their bounds).
    areacella : DataArray, optional
        Cell areas.

    Returns
    -------
    weights : DataArray
        On the horizontal dims of ``ds``; ``attrs["weight_source"]`` says where they came from,
        ``units`` is ``m2`` for real areas and ``1`` for cos φ.
    flag : str or None
        A quality flag when the weights are a fallback.

    Raises
    ------
    ArchiveError
        When ``areacella`` has other units, another grid or unusable values.
    """
    lat, lon = find_lat_lon(ds)
    if areacella is not None:
        return _from_areacella(ds, areacella, lat, lon), None

    if isinstance(ds, xr.Dataset):
        lat_b = _bounds(ds, lat)
        lon_b = _bounds(ds, lon)
        if lat_b is not None and ds[lat].ndim == 1 and ds[lon].ndim == 1:
            flag = None
            phi = np.deg2rad(np.clip(lat_b.values.astype(np.float64), -90.0, 90.0))
            band = np.abs(np.sin(phi[:, 1]) - np.sin(phi[:, 0]))
            if lon_b is not None:
                width = _lon_widths(lon_b.values.astype(np.float64))
            else:
                width = _lon_widths_from_centres(ds[lon].values.astype(np.float64))
                flag = LON_BOUNDS_DERIVED
            area = EARTH_RADIUS_M**2 * np.outer(band, np.deg2rad(width))
            weights = xr.DataArray(
                area,
                dims=(lat, lon),
                coords={lat: ds[lat], lon: ds[lon]},
                name="cell_area",
                attrs={"units": "m2", "weight_source": "lat_lon_bounds"},
            )
            return weights, flag

    cos = np.cos(np.deg2rad(ds[lat].astype(np.float64))).clip(min=0.0)
    weights = (cos * xr.ones_like(ds[lon], dtype=np.float64)).rename("cell_weight")
    weights.attrs = {"units": "1", "weight_source": "cos_lat"}
    return weights, COS_WEIGHTS


def _lon_widths(bounds: np.ndarray) -> np.ndarray:
    width = np.mod(bounds[:, 1] - bounds[:, 0], 360.0)
    # a cell spanning the whole circle has equal bounds modulo 360
    whole = (width == 0.0) & (bounds[:, 1] != bounds[:, 0])
    return np.where(whole, 360.0, width)


def _lon_widths_from_centres(centres: np.ndarray) -> np.ndarray:
    # edges halfway between centres, the grid taken as periodic
    if centres.size == 1:
        return np.array([360.0])
    ordered = np.sort(np.mod(centres, 360.0))
    gaps = np.diff(np.concatenate([ordered, ordered[:1] + 360.0]))
    edges_width = 0.5 * (gaps + np.roll(gaps, 1))
    order = np.argsort(np.argsort(np.mod(centres, 360.0)))
    return edges_width[order]


def _from_areacella(ds, areacella: xr.DataArray, lat: str, lon: str) -> xr.DataArray:
    units = str(areacella.attrs.get("units", "")).strip()
    if units not in _AREA_UNITS:
        raise ArchiveError(
            f"areacella units are {units!r}, not m2", hint="give cell areas in m2 (CF units 'm2') or remove the file"
        )
    spatial = [d for d in (ds[lat].dims + ds[lon].dims) if d in ds.dims]
    spatial = list(dict.fromkeys(spatial))
    if set(areacella.dims) != set(spatial):
        raise ArchiveError(
            f"areacella dims {tuple(areacella.dims)} are not the grid's {tuple(spatial)}",
            hint="use cell areas of the same grid (grid_label) as the variables",
        )
    for dim in spatial:
        if areacella.sizes[dim] != ds.sizes[dim]:
            raise ArchiveError(
                f"areacella has {areacella.sizes[dim]} points along {dim}, the variables {ds.sizes[dim]}",
                hint="use cell areas of the same grid (grid_label) as the variables",
            )
    for name in (lat, lon):
        if name in areacella.coords:
            mine, theirs = np.asarray(areacella[name].values, float), np.asarray(ds[name].values, float)
            if mine.shape != theirs.shape or not np.allclose(mine, theirs, atol=1e-4):
                raise ArchiveError(
                    f"areacella {name} coordinates differ from the variables'",
                    hint="use cell areas of the same grid (grid_label) as the variables",
                )
    values = areacella.astype(np.float64).transpose(*spatial)
    data = np.asarray(values.values)
    if not np.all(np.isfinite(data)) or np.any(data < 0) or not np.any(data > 0):
        raise ArchiveError(
            "areacella has missing, negative or only zero cell areas", hint="replace the cell-area file"
        )
    weights = xr.DataArray(data, dims=spatial, name="cell_area", attrs={"units": "m2", "weight_source": "areacella"})
    return weights.assign_coords({c: ds[c] for c in (lat, lon) if set(ds[c].dims) <= set(spatial)})


#: A run whose cell areas add up to less than this share of the sphere is refused as regional. Models' own
#: areas differ from our sphere only by their Earth radius (6 371–6 378 km: ≤ 0.3 % of the area) and grids whose
#: bounds stop short of the poles (a last band ending at ±89°) lose under 0.02 %; a regional cut-out lacks far
#: more (the largest continent is under 10 % of the sphere). 2 % leaves a wide margin on both sides.
MIN_SPHERE_FRACTION = 0.98


def sphere_fraction(weights: xr.DataArray) -> float | None:
    """Share of the sphere 4πR² (R = `EARTH_RADIUS_M`) that the cell areas cover; None for cos φ weights."""
    if weights.attrs.get("units") != "m2":
        return None
    total = float(np.nansum(np.asarray(weights.values, dtype=np.float64)))
    return total / (4.0 * np.pi * EARTH_RADIUS_M**2)


def global_mean(da: xr.DataArray, weights: xr.DataArray) -> xr.DataArray:
    """Area-weighted mean over the horizontal dims of ``weights``, lazily.

    ``sum(w·x) / sum(w)`` with both sums over the cells where ``x`` is present, so missing
    (NaN or decoded fill-value) cells drop out of numerator and denominator alike. Sums
    accumulate in float64. On a dask array nothing is computed: each chunk (the grid whole in
    it) becomes one task giving its own time steps' means, so one ``dask.compute`` reads each
    chunk once.

    Returns a DataArray over the remaining dims (usually ``time``) with the attributes of
    ``da`` and ``"area: mean"`` appended to ``cell_methods``. A time step with no valid cell is NaN.
    """
    dims = list(weights.dims)
    missing = [d for d in dims if d not in da.dims]
    if missing:
        raise ArchiveError(f"variable {da.name} lacks the grid dims {missing}")
    other = [d for d in da.dims if d not in dims]
    values = da.transpose(*other, *dims)
    w = np.asarray(weights.transpose(*dims).values, dtype=np.float64)
    data = values.data
    if isinstance(data, dask_array.Array):
        # The grid dims whole in every chunk, so each chunk gives its own time steps' means:
        # one task per chunk, no combine step (a chunk → aggregate reduction in one pass).
        data = data.rechunk({values.get_axis_num(d): -1 for d in dims})
        out = data.map_blocks(weighted_block_mean, w, len(dims), drop_axis=list(range(len(other), da.ndim)),
                              dtype=np.float64)
    else:
        out = weighted_block_mean(np.asarray(data), w, len(dims))
    return labelled_mean(out, values, other)


def labelled_mean(data, da: xr.DataArray, dims) -> xr.DataArray:
    """The global means `data` (over `dims`, what is left of `da`) labelled as `da` is: its coordinates on those
    dims, its attributes, and ``"area: mean"`` appended to ``cell_methods``."""
    mean = xr.DataArray(data, dims=tuple(dims), coords={c: v for c, v in da.coords.items()
                                                         if set(v.dims) <= set(dims)}, name=da.name)
    mean.attrs = with_cell_method(da.attrs, "area: mean")
    return mean


#: bytes of float64 values reduced per pass inside a chunk (whole time steps, at least one): the temporaries stay
#: in the processor's cache whatever the chunk's size (64 steps of a 64×128 grid; one step of a 1° grid is 0.5 MB)
_PASS_BYTES = 4 * 2**20


def weighted_block_mean(block: np.ndarray, weights: np.ndarray, n_grid_dims: int, fills: tuple = ()) -> np.ndarray:
    """sum(w·x) / sum(w) over the trailing grid axes, cells with missing x (NaN, ±inf, or equal to one of `fills`,
    compared in the block's own dtype) left out of both; float64.

    The block is reduced a few time steps at a time (a pass stays in the processor's cache), each cast to float64
    once and reduced by one sum of products per step (`numpy.einsum`: each step's sum is computed alone, so the
    result does not depend on how steps are grouped into chunks and passes — a BLAS matrix-vector product does);
    a step whose sum is not finite has a missing cell and only such steps are summed again without their missing
    cells. Measured on 1200 steps of a 64×128 float32 field: 10.7 ms with the former multiply-and-sum passes and
    a separate search for fill values, 6.9 ms so.
    """
    block = np.asarray(block)
    w = np.asarray(weights, dtype=np.float64).reshape(-1)
    lead = block.shape[: block.ndim - n_grid_dims]
    x = block.reshape(-1, w.size)
    num = np.empty(x.shape[0], dtype=np.float64)
    # the weights' total summed as each step's values are: a field of ones averages to exactly one
    den = np.full(x.shape[0], np.einsum("ij,j->i", np.ones((1, w.size)), w)[0], dtype=np.float64)
    fills = tuple(x.dtype.type(f) for f in fills)
    floats = x.dtype.kind == "f"
    steps = max(1, _PASS_BYTES // (8 * max(1, w.size)))
    for lo in range(0, x.shape[0], steps):
        raw = x[lo: lo + steps]
        part = raw.astype(np.float64)
        for fill in fills:  # floats compared once widened (exact), in the pass that is in the cache
            hit = (part == np.float64(fill)) if floats else (raw == fill)
            if hit.any():
                part[hit] = np.nan
        rows = np.einsum("ij,j->i", part, w)
        bad = ~np.isfinite(rows)
        if bad.any():
            sub = part[bad]
            present = np.isfinite(sub)
            sub[~present] = 0.0
            rows[bad] = np.einsum("ij,j->i", sub, w)
            den[lo: lo + steps][bad] = np.einsum("ij,j->i", present.astype(np.float64), w)
        num[lo: lo + steps] = rows
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
    return out.reshape(lead)

"""Tests of extractor/means.py: cell areas and area-weighted global means."""
import dask
import dask.array as dsa
import hypothesis.extra.numpy as hnp
import hypothesis.strategies as st
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings

from sensemble.extractor.errors import ArchiveError
from sensemble.extractor.means import EARTH_RADIUS_M, area_weights, global_mean
from tests.extractor.conftest import grid

R = 6_371_000.0  # mean Earth radius, 6 371 km (handbook value)


def regular_grid(nlat, nlon, descending=False):
    lat, lon, lat_bnds, lon_bnds = grid(nlat, nlon)
    if descending:
        lat, lat_bnds = lat[::-1], lat_bnds[::-1, ::-1]
    ds = xr.Dataset(
        {"lat_bnds": (("lat", "bnds"), lat_bnds), "lon_bnds": (("lon", "bnds"), lon_bnds)},
        coords={
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude", "bounds": "lat_bnds"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude", "bounds": "lon_bnds"}),
        },
    )
    return ds


def field(ds, values, ntime=3, name="tas", units="K"):
    """values: (lat, lon) array → DataArray(time, lat, lon), dask-backed."""
    data = np.broadcast_to(np.asarray(values, dtype=np.float32), (ntime, ds.sizes["lat"], ds.sizes["lon"])).copy()
    return xr.DataArray(
        dsa.from_array(data, chunks=(1, -1, -1)),
        dims=("time", "lat", "lon"),
        coords={"time": np.arange(ntime), "lat": ds.lat, "lon": ds.lon},
        name=name,
        attrs={"units": units, "cell_methods": "time: mean"},
    )


def areacella_of(ds, units="m2"):
    weights, _ = area_weights(ds)
    return xr.DataArray(weights.values, dims=("lat", "lon"), coords={"lat": ds.lat, "lon": ds.lon}, attrs={"units": units})


@pytest.mark.parametrize("descending", [False, True])
def test_sphere_area_from_bounds_is_4_pi_r_squared(descending):
    # total area of a sphere 4πR² with R = 6 371 km (handbook value)
    ds = regular_grid(5, 7, descending=descending)
    weights, flag = area_weights(ds)
    assert flag is None
    assert weights.attrs["units"] == "m2"
    assert EARTH_RADIUS_M == R
    assert float(weights.sum()) == pytest.approx(4 * np.pi * R**2, rel=1e-12)


def test_band_area_matches_spherical_zone_formula():
    # area of the zone between two parallels: 2πR²(sin φ2 − sin φ1) (handbook formula)
    ds = regular_grid(4, 8)
    weights, _ = area_weights(ds)
    north_band = float(weights.sel(lat=67.5).sum())
    assert north_band == pytest.approx(2 * np.pi * R**2 * (1 - np.sin(np.deg2rad(45.0))), rel=1e-12)


def test_mean_of_sin_squared_latitude_is_one_third():
    # ∫ sin²φ dA / ∫ dA over the sphere = 1/3 (analytic, common practice); centre values on
    # 1° bands carry a discretization error of order Δφ², well below the tolerance
    ds = regular_grid(180, 4)
    sin2 = np.sin(np.deg2rad(ds.lat.values))[:, None] ** 2 * np.ones((1, 4))
    for source in ("bounds", "areacella"):
        areacella = areacella_of(ds) if source == "areacella" else None
        weights, _ = area_weights(ds, areacella)
        mean = global_mean(field(ds, sin2, ntime=1), weights).compute()
        assert float(mean[0]) == pytest.approx(1 / 3, abs=2e-5)


@pytest.mark.parametrize("source", ["areacella", "bounds", "cos"])
def test_constant_field_mean_is_the_constant_for_every_weight_source(source):
    # the weighted mean of a constant is that constant, whatever the weights (common practice, no source)
    ds = regular_grid(4, 8)
    areacella = areacella_of(ds) if source == "areacella" else None
    weighted_on = ds.drop_vars(["lat_bnds", "lon_bnds"]) if source == "cos" else ds
    weights, flag = area_weights(weighted_on, areacella)
    assert flag == ("cos_weights" if source == "cos" else None)
    mean = global_mean(field(ds, 287.25), weights).compute()
    np.testing.assert_allclose(mean.values, 287.25, rtol=0, atol=1e-9)


def test_cos_weights_are_flagged_and_proportional_to_cos_latitude():
    ds = regular_grid(4, 8).drop_vars(["lat_bnds", "lon_bnds"])
    weights, flag = area_weights(ds)
    assert flag == "cos_weights"
    assert weights.attrs["weight_source"] == "cos_lat"
    np.testing.assert_allclose(weights.isel(lon=0).values, np.cos(np.deg2rad(ds.lat.values)))


def test_missing_lon_bounds_derived_and_flagged():
    ds = regular_grid(4, 8).drop_vars("lon_bnds")
    ds.lon.attrs.pop("bounds")
    weights, flag = area_weights(ds)
    assert flag == "lon_bounds_derived"
    assert float(weights.sum()) == pytest.approx(4 * np.pi * R**2, rel=1e-12)


def test_nan_cells_drop_out_of_numerator_and_denominator():
    # weighted mean over present cells only: Σ w x / Σ w over non-missing cells (common practice, no source)
    ds = regular_grid(4, 8)
    weights, _ = area_weights(ds)
    rng = np.random.default_rng(3)
    values = rng.normal(280, 10, (4, 8))
    values[0, :5] = np.nan
    values[2, 3] = np.nan
    mean = global_mean(field(ds, values, ntime=2), weights).compute()
    w = weights.values
    present = ~np.isnan(values)
    expected = np.sum(w[present] * values.astype(np.float32)[present]) / np.sum(w[present])
    np.testing.assert_allclose(mean.values, expected, rtol=1e-12)


def test_all_missing_step_is_nan():
    ds = regular_grid(4, 8)
    weights, _ = area_weights(ds)
    da = field(ds, 1.0, ntime=2)
    da = da.where(da.time == 0)
    mean = global_mean(da, weights).compute()
    assert mean.values[0] == 1.0 and np.isnan(mean.values[1])


def test_global_mean_is_lazy_float64_and_keeps_metadata():
    ds = regular_grid(4, 8)
    weights, _ = area_weights(ds)
    mean = global_mean(field(ds, 240.0, name="rlut", units="W m-2"), weights)
    assert dask.is_dask_collection(mean)
    assert mean.dtype == np.float64
    assert mean.dims == ("time",)
    assert mean.name == "rlut"
    assert mean.attrs["units"] == "W m-2"
    assert mean.attrs["cell_methods"] == "time: mean area: mean"


def test_float32_values_accumulate_in_float64():
    # large and small values that float32 sums would round (common practice, no source)
    ds = regular_grid(4, 8)
    weights, _ = area_weights(ds)
    values = np.full((4, 8), 1.0e4, dtype=np.float32)
    values[1, 1] = 1.0e4 + 1.0
    mean = global_mean(field(ds, values, ntime=1), weights).compute()
    w = weights.values.astype(np.float64)
    expected = np.sum(w * values.astype(np.float64)) / np.sum(w)
    assert float(mean[0]) == pytest.approx(expected, rel=1e-14)


def test_areacella_in_wrong_units_is_refused():
    ds = regular_grid(4, 8)
    with pytest.raises(ArchiveError, match="units"):
        area_weights(ds, areacella_of(ds, units="km2"))
    with pytest.raises(ArchiveError, match="units"):
        area_weights(ds, areacella_of(ds, units=""))


def test_areacella_on_another_grid_is_refused():
    ds = regular_grid(4, 8)
    other = areacella_of(regular_grid(6, 8))
    with pytest.raises(ArchiveError, match="areacella"):
        area_weights(ds, other)
    shifted = areacella_of(ds).assign_coords(lon=ds.lon + 1.0)
    with pytest.raises(ArchiveError, match="coordinates differ"):
        area_weights(ds, shifted)


def test_areacella_with_missing_cells_is_refused():
    ds = regular_grid(4, 8)
    areas = areacella_of(ds)
    areas[0, 0] = np.nan
    with pytest.raises(ArchiveError, match="missing"):
        area_weights(ds, areas)


@settings(max_examples=25, deadline=None)
@given(
    values=hnp.arrays(np.float64, (2, 3, 4), elements=st.floats(-1e3, 1e3) | st.just(np.nan)),
    weights=hnp.arrays(np.float64, (3, 4), elements=st.floats(1e-3, 1e3)),
)
def test_global_mean_matches_numpy_weighted_average(values, weights):
    # reference library: numpy.average over the present cells of each time step
    ds = regular_grid(3, 4)
    w = xr.DataArray(weights, dims=("lat", "lon"), coords={"lat": ds.lat, "lon": ds.lon})
    da = xr.DataArray(dsa.from_array(values, chunks=(1, -1, -1)), dims=("time", "lat", "lon"),
                      coords={"lat": ds.lat, "lon": ds.lon}, name="tas")
    mean = global_mean(da, w).compute().values
    for t in range(2):
        present = ~np.isnan(values[t])
        if present.any():
            expected = np.average(values[t][present], weights=weights[present])
            assert mean[t] == pytest.approx(expected, rel=1e-9, abs=1e-9)
        else:
            assert np.isnan(mean[t])

"""Property-based checks (hypothesis) of invariants of the core numerics.

- Gregory fit after drift removal is invariant to a polynomial drift added to control and experiment alike
  (the drift fit is linear in the data and reproduces any drift of its own order exactly; Gregory et al.
  2004 for the regression; the drift removal is common practice, no source).
- Scaling every flux by k scales erf_4x and feedback by k and leaves ecs_eff = -erf_4x / (2 feedback) and
  its bootstrap interval unchanged (OLS is linear in the regressand; ratio of two k-scaled numbers).
- The order in which a run's files are listed does not change its global means (files are joined by time).
- The area-weighted mean of a constant field is that constant under every weight source and any set of
  missing cells (a weighted mean of equal values; common practice, no source).
"""
from __future__ import annotations

import dataclasses

import dask.array as dsa
import hypothesis.extra.numpy as hnp
import hypothesis.strategies as st
import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings

from sensemble.extractor.budget import toa_budget
from sensemble.extractor.catalog import scan
from sensemble.extractor.control import control_residuals, drift_corrected
from sensemble.extractor.ecs_interval import bootstrap_ecs, gregory_ecs_interval
from sensemble.extractor.gregory import ControlVariability, gregory_fit
from sensemble.extractor.means import area_weights, global_mean
from sensemble.extractor.runs import global_mean_series
from tests.extractor.conftest import write_run

FEW = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
FLUXES = ("rsdt", "rsut", "rlut")
CONTROL_START, CONTROL_YEARS, EXPERIMENT_YEARS = 1850, 90, 50


def annual(values: dict[str, np.ndarray], first_year: int, **attrs) -> xr.Dataset:
    years = np.arange(first_year, first_year + len(next(iter(values.values()))))
    return xr.Dataset({k: ("year", np.asarray(v, dtype=np.float64)) for k, v in values.items()},
                      coords={"year": years}, attrs=attrs)


def control_and_experiment(seed: int):
    """An invented control with noise and an abrupt experiment on ΔN = 7 − 1.2 ΔT plus noise."""
    rng = np.random.default_rng(seed)
    control = {"tas": 287.0 + 0.1 * rng.standard_normal(CONTROL_YEARS),
               "rsdt": np.full(CONTROL_YEARS, 340.0),
               "rsut": 100.0 + 0.3 * rng.standard_normal(CONTROL_YEARS),
               "rlut": 239.5 + 0.3 * rng.standard_normal(CONTROL_YEARS)}
    k = np.arange(1, EXPERIMENT_YEARS + 1)
    warming = 5.0 * (1.0 - np.exp(-k / 8.0)) + 0.1 * rng.standard_normal(EXPERIMENT_YEARS)
    net = 7.0 - 1.2 * warming + 0.3 * rng.standard_normal(EXPERIMENT_YEARS)
    experiment = {"tas": 287.0 + warming, "rsdt": np.full(EXPERIMENT_YEARS, 340.0),
                  "rsut": np.full(EXPERIMENT_YEARS, 100.0), "rlut": 240.0 - net + 0.5}
    return control, experiment


def fitted(control: dict, experiment: dict, branch_year: int, order: int = 1):
    ctl = toa_budget(annual(control, CONTROL_START, model="PROP-1", experiment_id="piControl"))
    exp = toa_budget(annual(experiment, 2000, model="PROP-1", experiment_id="abrupt-4xCO2"))
    anomalies, _ = drift_corrected(exp, ctl, branch_year, order=order)
    window = (1, EXPERIMENT_YEARS)
    fit = gregory_fit(anomalies["tas"], anomalies["rtnt"], years=window)
    interval = bootstrap_ecs(anomalies["tas"], anomalies["rtnt"], years=window, n_samples=200, seed=1)
    return fit, interval


def fitted_with_control(control: dict, experiment: dict, branch_year: int, order: int = 1):
    """The fit with the control's variability and its Fieller interval, as the pipeline makes them."""
    ctl = toa_budget(annual(control, CONTROL_START, model="PROP-1", experiment_id="piControl"))
    exp = toa_budget(annual(experiment, 2000, model="PROP-1", experiment_id="abrupt-4xCO2"))
    anomalies, _ = drift_corrected(exp, ctl, branch_year, order=order)
    variability = ControlVariability.of(control_residuals(ctl, order), anomalies)
    fit = gregory_fit(anomalies["tas"], anomalies["rtnt"], years=(1, EXPERIMENT_YEARS), control=variability)
    return fit, gregory_ecs_interval(fit)


@FEW
@given(seed=st.integers(0, 2**16), offset=st.integers(0, CONTROL_YEARS - EXPERIMENT_YEARS),
       order=st.sampled_from([1, 2]),
       drift=st.dictionaries(st.sampled_from(("tas",) + FLUXES),
                             st.tuples(st.floats(-5, 5), st.floats(-0.05, 0.05), st.floats(-1e-3, 1e-3)),
                             min_size=1))
def test_gregory_fit_invariant_to_a_drift_shared_by_control_and_experiment(seed, offset, order, drift):
    control, experiment = control_and_experiment(seed)
    branch = CONTROL_START + offset
    clean_fit, clean_interval = fitted(control, experiment, branch, order)

    control_t = np.arange(CONTROL_YEARS, dtype=float)  # years since the control's start
    experiment_t = offset + np.arange(EXPERIMENT_YEARS, dtype=float)  # the same clock for the experiment
    drifted_control, drifted_experiment = dict(control), dict(experiment)
    for name, (a, b, c) in drift.items():
        c = c if order == 2 else 0.0  # a drift of the fitted order or lower is removed exactly
        drifted_control[name] = control[name] + a + b * control_t + c * control_t**2
        drifted_experiment[name] = experiment[name] + a + b * experiment_t + c * experiment_t**2
    fit, interval = fitted(drifted_control, drifted_experiment, branch, order)

    for name in ("erf", "feedback", "ecs_eff", "erf_se", "feedback_se"):
        assert getattr(fit, name) == pytest.approx(getattr(clean_fit, name), rel=1e-7, abs=1e-9), name
    assert interval == pytest.approx(clean_interval, rel=1e-7)
    # the control's residuals lose the drift too, so the standard errors and the interval that use them hold
    clean_fit, clean_interval = fitted_with_control(control, experiment, branch, order)
    fit, interval = fitted_with_control(drifted_control, drifted_experiment, branch, order)
    for name in ("erf_se", "feedback_se", "erf_feedback_cov", "lag1"):
        assert getattr(fit, name) == pytest.approx(getattr(clean_fit, name), rel=1e-6, abs=1e-9), name
    assert interval == pytest.approx(clean_interval, rel=1e-6)


@FEW
@given(seed=st.integers(0, 2**16), k=st.one_of(st.floats(0.05, 20.0), st.floats(-20.0, -0.05)))
def test_scaling_all_fluxes_scales_forcing_and_feedback_not_sensitivity(seed, k):
    control, experiment = control_and_experiment(seed)
    base_fit, base_interval = fitted(control, experiment, CONTROL_START + 10)
    scale = lambda run: {n: (v * k if n in FLUXES else v) for n, v in run.items()}  # noqa: E731
    fit, interval = fitted(scale(control), scale(experiment), CONTROL_START + 10)
    assert fit.erf == pytest.approx(k * base_fit.erf, rel=1e-9)
    assert fit.feedback == pytest.approx(k * base_fit.feedback, rel=1e-9)
    assert fit.ecs_eff == pytest.approx(base_fit.ecs_eff, rel=1e-9)
    assert interval == pytest.approx(base_interval, rel=1e-9)
    scaled = dict(erf=0, erf_se=0, feedback=0, feedback_se=0, ecs_eff=0, erf_feedback_cov=0, erf_se_ols=0,
                  feedback_se_ols=0)
    assert dataclasses.replace(fit, **scaled) == dataclasses.replace(base_fit, **scaled, r2=fit.r2, lag1=fit.lag1)
    assert fit.r2 == pytest.approx(base_fit.r2, rel=1e-9)
    assert fit.lag1 == pytest.approx(base_fit.lag1, abs=1e-6)
    for name in ("erf_se", "feedback_se", "erf_se_ols", "feedback_se_ols"):
        assert getattr(fit, name) == pytest.approx(abs(k) * getattr(base_fit, name), rel=1e-6), name
    # with the control's variability: its residuals scale by k too, so the Fieller interval stays
    base_fit, base_interval = fitted_with_control(control, experiment, CONTROL_START + 10)
    fit, interval = fitted_with_control(scale(control), scale(experiment), CONTROL_START + 10)
    assert fit.feedback_se == pytest.approx(abs(k) * base_fit.feedback_se, rel=1e-6)
    assert interval == pytest.approx(base_interval, rel=1e-6)


@pytest.fixture(scope="module")
def split_run(tmp_path_factory):
    """One run whose variables come in three files each, with values that change every month and cell."""
    root = tmp_path_factory.mktemp("split")
    write_run(root, "PROP-2", "piControl", variables=("tas", "rlut"), nyears=6, files_per_variable=3,
              values={"tas": lambda lat, lon, k: 280.0 + 10 * np.cos(np.deg2rad(lat)) + 0.01 * k + 0.001 * lon,
                      "rlut": lambda lat, lon, k: 230.0 + np.sin(np.deg2rad(lon)) + 0.1 * (k % 12)})
    (run,) = scan(root).runs
    assert all(len(paths) == 3 for paths in run.files.values())
    reference = global_mean_series(run, required=("tas", "rlut")).compute()
    return run, reference


@settings(max_examples=8, deadline=None)
@given(orders=st.tuples(st.permutations(range(3)), st.permutations(range(3))))
def test_order_of_input_files_does_not_change_the_global_means(split_run, orders):
    run, reference = split_run
    shuffled = {var: [paths[i] for i in order] for (var, paths), order in zip(run.files.items(), orders)}
    result = global_mean_series(dataclasses.replace(run, files=shuffled), required=("tas", "rlut")).compute()
    for name in ("tas", "rlut"):
        np.testing.assert_array_equal(result[name].values, reference[name].values)
    assert [t.isoformat() for t in result["time"].values] == [t.isoformat() for t in reference["time"].values]


@st.composite
def grids(draw):
    nlat, nlon = draw(st.integers(1, 10)), draw(st.integers(1, 12))
    regular = draw(st.booleans())
    if regular:
        lat_edges = np.linspace(-90.0, 90.0, nlat + 1)
    else:
        inner = draw(hnp.arrays(np.float64, nlat - 1, elements=st.floats(-89.0, 89.0), unique=True))
        lat_edges = np.concatenate([[-90.0], np.sort(inner), [90.0]])
    lon_edges = np.linspace(0.0, 360.0, nlon + 1)
    lat = 0.5 * (lat_edges[:-1] + lat_edges[1:])
    lon = 0.5 * (lon_edges[:-1] + lon_edges[1:])
    return xr.Dataset(
        {"lat_bnds": (("lat", "bnds"), np.stack([lat_edges[:-1], lat_edges[1:]], 1)),
         "lon_bnds": (("lon", "bnds"), np.stack([lon_edges[:-1], lon_edges[1:]], 1))},
        coords={"lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude", "bounds": "lat_bnds"}),
                "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude", "bounds": "lon_bnds"})})


@FEW
@given(data=st.data(), grid=grids(), constant=st.floats(-1e3, 1e3),
       source=st.sampled_from(["areacella", "bounds", "cos"]))
def test_constant_field_has_that_global_mean_under_every_weight_source(data, grid, constant, source):
    shape = (grid.sizes["lat"], grid.sizes["lon"])
    areacella = None
    if source == "areacella":
        areas = data.draw(hnp.arrays(np.float64, shape, elements=st.floats(1.0, 1e12)))
        areacella = xr.DataArray(areas, dims=("lat", "lon"), attrs={"units": "m2"})
    layout = grid.drop_vars(["lat_bnds", "lon_bnds"]) if source == "cos" else grid
    weights, flag = area_weights(layout, areacella)
    assert flag == ("cos_weights" if source == "cos" else None)

    missing = data.draw(hnp.arrays(bool, (3,) + shape))
    missing[:, 0, 0] = False  # at least one cell per time step
    values = np.where(missing, np.nan, constant)
    da = xr.DataArray(dsa.from_array(values, chunks=(1, -1, -1)), dims=("time", "lat", "lon"),
                      coords={"lat": grid.lat, "lon": grid.lon}, name="tas", attrs={"units": "K"})
    mean = global_mean(da, weights).compute()
    np.testing.assert_allclose(mean.values, constant, rtol=1e-12, atol=1e-12)

"""Scenario forcings: CO2 files, forcing files and forcing diagnosed from the archive's runs, with their spread."""
import numpy as np
import pandas as pd
import pytest

from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.scenarios import CO2_DOUBLING_FORCING, co2_scenario, diagnosed_scenario, file_scenario


def test_co2_doubling_gives_3_71_before_rescaling(tmp_path):
    # Myhre et al. (1998, GRL): ΔF = 5.35 ln(C/C0), 3.71 W m-2 for a doubling
    path = tmp_path / "co2.csv"
    pd.DataFrame({"year": [2000, 2001, 2002], "co2": [278.0, 556.0, 1112.0]}).to_csv(path, index=False)
    scenario = co2_scenario("doubling", path)
    assert scenario.reference[1] == pytest.approx(3.71, abs=0.005)
    assert scenario.reference[2] == pytest.approx(2 * scenario.reference[1], rel=1e-12)
    # rescaled to each sampled F2x: a doubling forces exactly that model's F2x
    f2x = np.array([3.2, 3.7, 4.1])
    np.testing.assert_allclose(scenario.scales(f2x) * scenario.reference[1], f2x, rtol=1e-12)
    assert scenario.f2x_reference == pytest.approx(CO2_DOUBLING_FORCING)


def test_forcing_file_keeps_every_year_and_scales_to_the_ensemble_median(tmp_path):
    # Common practice, no source: a pathway is never cut; the file is the forcing of a median-F2x model
    path = tmp_path / "forcing.csv"
    pd.DataFrame({"year": np.arange(2000, 2251), "erf": np.linspace(0, 5, 251)}).to_csv(path, index=False)
    scenario = file_scenario("long", path, f2x_reference=3.6)
    assert scenario.n_years == 251 and scenario.years[-1] == 2250
    assert scenario.scales(np.array([3.6, 7.2])) == pytest.approx([1.0, 2.0])
    unscaled = file_scenario("long", path, f2x_reference=None)
    assert unscaled.scales(np.array([3.0, 5.0])) == pytest.approx([1.0, 1.0])


def test_forcing_file_in_other_units_is_refused(tmp_path):
    import xarray as xr
    path = tmp_path / "forcing.nc"
    xr.Dataset({"erf": ("year", np.ones(5), {"units": "K"})}, coords={"year": np.arange(5)}).to_netcdf(path)
    with pytest.raises(EmulatorInputError, match="units"):
        file_scenario("x", path, 3.7)


def test_diagnosed_forcing_spread_beyond_f2x():
    # Forster et al. (2013, JGR): F = N + λT per model. Invented runs whose forcing is the reference scaled by
    # F2x/F2x_ref times a known extra factor: the spread of ln(extra factor) is recovered (sample sd, ddof 1).
    rng = np.random.default_rng(0)
    years = np.arange(1, 101)
    reference = 4.0 * years / (years + 50.0)
    f2x = rng.uniform(3.3, 4.1, 12)
    extra = np.exp(0.08 * rng.standard_normal(12))
    lam = rng.uniform(0.8, 1.5, 12)
    tas = rng.uniform(0.5, 2.0, (12, 1)) * years / 100.0
    forcing = (f2x / f2x.mean() * extra)[:, None] * reference
    rtnt = forcing - lam[:, None] * tas
    scenario = diagnosed_scenario("scen", tas, rtnt, lam, f2x)
    k = extra / np.mean(extra)  # the mean diagnosis absorbs the mean extra factor
    assert scenario.scale_sd == pytest.approx(np.std(np.log(k), ddof=1), rel=1e-6)
    np.testing.assert_allclose(scenario.reference, forcing.mean(axis=0), rtol=1e-12)
    assert scenario.kind == "archive" and scenario.f2x_reference == pytest.approx(f2x.mean())

"""Scenario forcing: CO2 formula, user files, diagnosis from the ensemble."""
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.forcing import align_forcing, co2_forcing, diagnose_forcing, read_forcing_file
from sensemble.emulator.training import load_training_set

from .synthetic import scenario_forcing


def test_myhre_values():
    # Myhre et al. (1998, GRL): 5.35 ln 2 = 3.71 W m-2 at doubling, 7.42 at quadrupling.
    assert co2_forcing(2 * 278.0) == pytest.approx(3.71, abs=0.005)
    assert co2_forcing(4 * 278.0) == pytest.approx(7.42, abs=0.01)
    assert co2_forcing(278.0) == 0.0


def test_rescaled_to_model_f2x():
    # Doubling gives the model's own F2x after rescaling (common practice, no source).
    assert co2_forcing(560.0, c0=280.0, f2x=4.1) == pytest.approx(4.1, rel=1e-12)
    da = xr.DataArray([280.0, 560.0], coords={"year": [1, 2]}, dims="year")
    out = co2_forcing(da, c0=280.0)
    assert out.attrs["units"] == "W m-2" and list(out["year"].values) == [1, 2]


def test_read_csv_and_netcdf(tmp_path):
    pd.DataFrame({"year": [2001, 2002, 2003], "erf": [0.1, 0.2, 0.3]}).to_csv(tmp_path / "f.csv", index=False)
    a = read_forcing_file(tmp_path / "f.csv")
    xr.Dataset({"erf": ("year", [0.1, 0.2, 0.3], {"units": "W m-2"})}, coords={"year": [2001, 2002, 2003]}
               ).to_netcdf(tmp_path / "f.nc")
    b = read_forcing_file(tmp_path / "f.nc")
    np.testing.assert_array_equal(a.values, b.values)
    assert b.attrs["units"] == "W m-2"
    values, how = align_forcing(a, years=[1, 2], calendar_years=[2002, 2003])
    assert how == "calendar_year" and list(values) == [0.2, 0.3]
    with pytest.raises(EmulatorInputError, match="forcing covers years 2001–2003"):
        align_forcing(a, years=[1, 2, 3, 4], calendar_years=[2001, 2002, 2003, 2004])


def test_bad_file_is_named(tmp_path):
    pd.DataFrame({"yr": [1], "erf": [0.1]}).to_csv(tmp_path / "g.csv", index=False)
    with pytest.raises(EmulatorInputError, match="g.csv.*no 'year' column"):
        read_forcing_file(tmp_path / "g.csv")


def test_diagnosis_recovers_known_scenario_forcing(extract_dir):
    # Forster et al. (2013, JGR): F = ΔN + λΔT with λ from each model's abrupt Gregory fit (here λ = −feedback).
    # The synthetic scenario's forcing is known; with ε = 1 the identity is exact up to internal variability
    # and the Gregory λ error, averaged over 10 models.
    path, truth = extract_dir
    ts = load_training_set(path)
    lam = -ts.table["feedback"].to_numpy()
    f = diagnose_forcing(ts.Y, ts.scenario_rtnt, lam, groups=ts.models)
    known = scenario_forcing(100)
    assert f.attrs["n_models"] == 10
    assert np.sqrt(np.mean((f.values - known) ** 2)) < 0.15
    # decadal means within 0.1 W m-2
    np.testing.assert_allclose(f.values.reshape(10, 10).mean(1), known.reshape(10, 10).mean(1), atol=0.1)


def test_diagnosis_exact_without_noise():
    # Same identity, noise-free single run: exact (Geoffroy et al. 2013a: N = F − λT for ε = 1).
    from sensemble.emulator.ebm import TwoLayerParameters, integrate, toa_imbalance
    p = TwoLayerParameters(1.2, 8.0, 100.0, 0.7)
    forcing = np.linspace(0, 5, 80)
    t, d = integrate(forcing, p)
    n = toa_imbalance(forcing, t, d, p)
    np.testing.assert_allclose(diagnose_forcing(t, n, [1.2]).values, forcing, atol=1e-12)

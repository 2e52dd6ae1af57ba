"""Tests of extractor/transient.py: transient climate response."""
import numpy as np
import pytest
import xarray as xr

from sensemble.extractor.gregory import FitWindowError
from sensemble.extractor.transient import tcr


def test_tcr_of_linear_warming_is_the_value_at_year_seventy_point_five():
    # TCR = mean ΔT over years 61–80 of the 1 % run (IPCC AR5 WG1 glossary, from memory); for
    # ΔT = r·k the mean of k = 61..80 is 70.5, so TCR = 70.5 r exactly
    rate = 0.027
    years = np.arange(1, 141)
    anomaly = xr.DataArray(rate * years, dims="year", coords={"year": years}, attrs={"units": "K"})
    assert tcr(anomaly) == pytest.approx(70.5 * rate, abs=1e-12)
    assert tcr(anomaly.values, years=(1, 20)) == pytest.approx(10.5 * rate, abs=1e-12)


def test_co2_doubles_at_year_seventy():
    # 1 %/yr compounding: 1.01**70 ≈ 2.007 (arithmetic), hence the window 61–80 centred on year 70
    assert 1.01**70 == pytest.approx(2.0, abs=0.01)


def test_tcr_of_a_short_run_names_needed_and_available_years():
    anomaly = xr.DataArray(np.linspace(0, 1, 75), dims="year", coords={"year": np.arange(1, 76)})
    with pytest.raises(FitWindowError, match=r"61-80 \(20 years\).*1-75, 75 years"):
        tcr(anomaly)


def test_tcr_with_missing_values_is_an_error():
    anomaly = xr.DataArray(np.linspace(0, 2, 140), dims="year", coords={"year": np.arange(1, 141)})
    anomaly[65] = np.nan
    with pytest.raises(FitWindowError, match="missing"):
        tcr(anomaly)

"""Tests of extractor/budget.py: the TOA energy budget terms."""
import numpy as np
import pytest
import xarray as xr

from sensemble.extractor.budget import toa_budget


def _fluxes(clear_sky=True, seed=0):
    rng = np.random.default_rng(seed)
    years = np.arange(1850, 1860)
    values = {
        "rsdt": 340.0 + rng.normal(0, 0.1, years.size),
        "rsut": 100.0 + rng.normal(0, 1, years.size),
        "rlut": 239.0 + rng.normal(0, 1, years.size),
    }
    if clear_sky:
        values["rsutcs"] = 53.0 + rng.normal(0, 0.5, years.size)
        values["rlutcs"] = 265.0 + rng.normal(0, 0.5, years.size)
    return xr.Dataset(
        {k: ("year", v, {"units": "W m-2", "standard_name": f"flux_{k}"}) for k, v in values.items()},
        coords={"year": years},
        attrs={"model": "ALPHA-1", "flags": ""},
    )


def test_net_flux_is_incoming_minus_outgoing():
    # N = rsdt - rsut - rlut: definition of the net downward TOA flux (common practice, no source)
    ds = _fluxes(clear_sky=False)
    out = toa_budget(ds)
    np.testing.assert_allclose(out["rtnt"], ds["rsdt"] - ds["rsut"] - ds["rlut"], rtol=0, atol=1e-12)
    assert out["rtnt"].attrs["units"] == "W m-2"
    assert "standard_name" not in out["rtnt"].attrs  # rsdt's name must not travel to N
    assert "long_name" in out["rtnt"].attrs
    assert not {"rtnt_cs", "lw_cs", "sw_cs", "cre"} & set(out.data_vars)
    assert out.attrs == ds.attrs


def test_clear_sky_split_sums_to_net_flux():
    # N = LW_cs + SW_cs + CRE, CRE = N - N_cs (cloud radiative effect; common practice, no source)
    ds = _fluxes()
    out = toa_budget(ds)
    np.testing.assert_allclose(out["rtnt_cs"], ds["rsdt"] - ds["rsutcs"] - ds["rlutcs"], atol=1e-12)
    np.testing.assert_allclose(out["lw_cs"], -ds["rlutcs"], atol=1e-12)
    np.testing.assert_allclose(out["sw_cs"], ds["rsdt"] - ds["rsutcs"], atol=1e-12)
    np.testing.assert_allclose(out["cre"], out["rtnt"] - out["rtnt_cs"], atol=1e-12)
    np.testing.assert_allclose(out["lw_cs"] + out["sw_cs"] + out["cre"], out["rtnt"], atol=1e-10)
    for name in ("rtnt_cs", "lw_cs", "sw_cs", "cre"):
        assert out[name].attrs["units"] == "W m-2"
        assert out[name].attrs["long_name"]


def test_only_one_clear_sky_flux_gives_no_split():
    ds = _fluxes().drop_vars("rlutcs")
    assert "cre" not in toa_budget(ds)


def test_lazy_input_stays_lazy():
    ds = _fluxes().chunk({"year": 5})
    out = toa_budget(ds)
    assert out["cre"].chunks is not None
    np.testing.assert_allclose(out["cre"].compute(), toa_budget(_fluxes())["cre"], atol=1e-12)


def test_missing_flux_names_model_and_variable():
    with pytest.raises(KeyError, match="ALPHA-1.*rlut"):
        toa_budget(_fluxes().drop_vars("rlut"))

"""Top-of-atmosphere energy budget of an annual series: net flux N and its clear-sky / cloud split."""
from __future__ import annotations

import xarray as xr

FLUX_UNITS = "W m-2"

# name → long_name; all fluxes positive downward, as N is.
_BUDGET_TERMS = {
    "rtnt": "TOA net downward radiative flux (N = rsdt - rsut - rlut)",
    "rtnt_cs": "TOA net downward clear-sky radiative flux (rsdt - rsutcs - rlutcs)",
    "lw_cs": "TOA net downward clear-sky longwave flux (-rlutcs)",
    "sw_cs": "TOA net downward clear-sky shortwave flux (rsdt - rsutcs)",
    "cre": "TOA cloud radiative effect (N - N_cs)",
}


def _flux(da: xr.DataArray, name: str) -> xr.DataArray:
    # Arithmetic keeps the first operand's attributes (e.g. rsdt's standard_name), which would
    # mislabel the result: start from none.
    flux = da.rename(name)
    flux.attrs = {"units": FLUX_UNITS, "long_name": _BUDGET_TERMS[name]}
    return flux


def toa_budget(ds: xr.Dataset) -> xr.Dataset:
    """Add the TOA budget terms to an annual (or any) series of fluxes.

    ``rtnt`` = rsdt − rsut − rlut always; when both clear-sky fluxes ``rsutcs`` and ``rlutcs``
    exist also ``rtnt_cs``, ``lw_cs``, ``sw_cs`` and ``cre`` = rtnt − rtnt_cs. The split is exact,
    ``rtnt = lw_cs + sw_cs + cre``, so regressions of the parts sum to the regression of N.
    Works lazily on dask-backed data; the input's attributes are kept.

    Parameters
    ----------
    ds : xarray.Dataset
        With ``rsdt``, ``rsut``, ``rlut`` (W m-2) and optionally ``rsutcs``, ``rlutcs``.

    Returns
    -------
    xarray.Dataset
        ``ds`` with the budget variables added (units ``W m-2``, a ``long_name`` each).

    Examples
    --------
    >>> import xarray as xr
    >>> ds = xr.Dataset({v: ("year", [x]) for v, x in
    ...                  [("rsdt", 340.0), ("rsut", 100.0), ("rlut", 239.0)]})
    >>> float(toa_budget(ds)["rtnt"][0])
    1.0
    """
    missing = [v for v in ("rsdt", "rsut", "rlut") if v not in ds.data_vars]
    if missing:
        raise KeyError(
            f"TOA budget of {ds.attrs.get('model', 'a run')} needs {', '.join(missing)}, "
            f"which the series lacks (it has {', '.join(map(str, ds.data_vars)) or 'nothing'})"
        )
    terms = {"rtnt": _flux(ds["rsdt"] - ds["rsut"] - ds["rlut"], "rtnt")}
    if "rsutcs" in ds.data_vars and "rlutcs" in ds.data_vars:
        terms["rtnt_cs"] = _flux(ds["rsdt"] - ds["rsutcs"] - ds["rlutcs"], "rtnt_cs")
        terms["lw_cs"] = _flux(-ds["rlutcs"], "lw_cs")
        terms["sw_cs"] = _flux(ds["rsdt"] - ds["rsutcs"], "sw_cs")
        terms["cre"] = _flux(terms["rtnt"] - terms["rtnt_cs"], "cre")
    return ds.assign(terms)

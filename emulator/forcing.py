"""Effective radiative forcing of a scenario: from CO2 concentrations, from a user's file, or diagnosed
from the ensemble's own scenario runs. All return a DataArray on dimension `year`, units W m-2.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from .errors import EmulatorInputError

__all__ = ["MYHRE_COEFFICIENT", "co2_forcing", "read_forcing_file", "diagnose_forcing", "align_forcing"]

#: Myhre et al. (1998, GRL): ΔF = 5.35 ln(C/C0) W m-2
MYHRE_COEFFICIENT = 5.35
PREINDUSTRIAL_CO2 = 278.0  # ppm


def co2_forcing(conc, c0: float = PREINDUSTRIAL_CO2, f2x: float | None = None):
    """CO2 forcing ΔF = 5.35 ln(C/C0) (Myhre et al. 1998), optionally rescaled to a model's F2x.

    With `f2x` the result is multiplied by f2x / (5.35 ln 2), so a doubling gives exactly `f2x`.
    A DataArray keeps its coordinates; anything else gives an ndarray.
    """
    conc_values = np.asarray(conc, dtype=float)
    if np.any(conc_values <= 0) or c0 <= 0:
        raise EmulatorInputError("CO2 concentrations must be positive (ppm)")
    forcing = MYHRE_COEFFICIENT * np.log(conc_values / c0)
    if f2x is not None:
        forcing = forcing * (f2x / (MYHRE_COEFFICIENT * np.log(2.0)))
    if isinstance(conc, xr.DataArray):
        return conc.copy(data=forcing).assign_attrs(units="W m-2", long_name="CO2 effective radiative forcing")
    return forcing


def _year_series(frame_years, values, path, name) -> xr.DataArray:
    years = np.asarray(frame_years)
    if not np.all(np.isfinite(values)):
        raise EmulatorInputError(f"column {name!r} has missing values", path=path)
    if len(np.unique(years)) != len(years) or np.any(np.diff(years) <= 0):
        raise EmulatorInputError("years must be increasing without repeats", path=path)
    return xr.DataArray(np.asarray(values, float), coords={"year": years.astype(int)}, dims="year", name=name,
                        attrs={"source_file": str(path)})


def read_forcing_file(path, variable: str | None = None) -> xr.DataArray:
    """A forcing (or concentration) series by year from a CSV or NetCDF file.

    CSV: a `year` column and one value column (or `variable`). NetCDF: a `year` coordinate or variable
    and one data variable (or `variable`). Units are taken from the NetCDF attribute when present.
    """
    path = Path(path)
    if not path.exists():
        raise EmulatorInputError("no such forcing file", path=path)
    if path.suffix.lower() in (".nc", ".nc4", ".cdf"):
        with xr.open_dataset(path) as ds:
            ds = ds.load()
        if "year" not in ds.dims:
            if "year" in ds:
                ds = ds.swap_dims({ds["year"].dims[0]: "year"})
            else:
                raise EmulatorInputError("no 'year' coordinate", path=path)
        names = [v for v in ds.data_vars if v != "year" and ds[v].dims == ("year",)]
        if variable is None:
            if len(names) != 1:
                raise EmulatorInputError(f"expected one variable by year, found {names}", path=path,
                                         hint="name the variable to use")
            variable = names[0]
        if variable not in ds:
            raise EmulatorInputError(f"no variable {variable!r}", path=path)
        out = _year_series(ds["year"].values, ds[variable].values, path, variable)
        if "units" in ds[variable].attrs:
            out.attrs["units"] = ds[variable].attrs["units"]
        return out
    frame = pd.read_csv(path)
    frame.columns = [str(c).strip() for c in frame.columns]
    if "year" not in frame.columns:
        raise EmulatorInputError(f"no 'year' column (columns: {', '.join(frame.columns)})", path=path)
    names = [c for c in frame.columns if c != "year"]
    if variable is None:
        if len(names) != 1:
            raise EmulatorInputError(f"expected one value column beside 'year', found {names}", path=path,
                                     hint="name the column to use")
        variable = names[0]
    if variable not in frame.columns:
        raise EmulatorInputError(f"no column {variable!r}", path=path)
    return _year_series(frame["year"].to_numpy(), frame[variable].to_numpy(float), path, variable)


def diagnose_forcing(tas, rtnt, lambda_, groups=None, uptake=None) -> xr.DataArray:
    """Forcing diagnosed from scenario runs: F = N + λT per run (Forster et al. 2013, JGR), then averaged.

    With efficacy, `uptake` (n_runs, n_years) = (ε − 1)γ(T − T_d) per run is added: the two-layer model's
    N = F − λT − (ε − 1)γ(T − T_d) (Geoffroy et al. 2013b), with λ the calibrated one, not the Gregory slope.

    Sign: λ > 0 here (the Gregory table's `feedback` is −λ), so F = N + λT.

    Parameters
    ----------
    tas, rtnt : (n_runs, n_years) anomalies (K, W m-2); DataArrays with dims (run, year) or arrays
    lambda_ : (n_runs,) feedback parameters λ > 0 from each run's abrupt Gregory fit
    groups : (n_runs,) model labels; runs of a model are averaged first so each model counts once
    """
    years = tas["year"].values if isinstance(tas, xr.DataArray) and "year" in tas.coords else None
    tas_v, rtnt_v = np.atleast_2d(np.asarray(tas, float)), np.atleast_2d(np.asarray(rtnt, float))
    lam = np.asarray(lambda_, float).reshape(-1)
    if tas_v.shape != rtnt_v.shape or lam.shape[0] != tas_v.shape[0]:
        raise EmulatorInputError(f"shapes disagree: tas {tas_v.shape}, rtnt {rtnt_v.shape}, lambda {lam.shape}")
    if np.any(lam <= 0):
        raise EmulatorInputError("λ must be > 0 (use −feedback from the sensitivity table)")
    per_run = rtnt_v + lam[:, None] * tas_v
    if uptake is not None:
        per_run = per_run + np.asarray(uptake, float)
    if groups is None:
        per_model = per_run
    else:
        groups = np.asarray(groups)
        per_model = np.array([per_run[groups == g].mean(axis=0) for g in dict.fromkeys(groups)])
    if years is None:
        years = np.arange(1, tas_v.shape[1] + 1)
    return xr.DataArray(per_model.mean(axis=0), coords={"year": years}, dims="year", name="forcing",
                        attrs={"units": "W m-2", "long_name": "effective radiative forcing diagnosed as N + lambda T",
                               "n_models": per_model.shape[0]})


def align_forcing(forcing: xr.DataArray, years, calendar_years=None, allow_longer: bool = False) -> tuple[np.ndarray, str]:
    """The forcing on the training years: matched on calendar years when they cover, else on run years.
    A forcing that goes on past the runs' last year is refused unless `allow_longer` (never silently cut).

    Returns (values, how) with `how` ∈ {"calendar_year", "year"}; an error says which years are missing.
    """
    have = set(int(y) for y in forcing["year"].values)
    for label, wanted in (("calendar_year", calendar_years), ("year", years)):
        if wanted is not None and set(int(y) for y in wanted) <= have:
            last = int(forcing["year"].max())
            if last > int(np.max(wanted)) and not allow_longer:
                # the pathway would be cut to the runs' years without a word (issue 13): refuse instead
                raise EmulatorInputError(
                    f"the forcing runs to {label.replace('_', ' ')} {last}, the scenario's runs end at "
                    f"{int(np.max(wanted))}; this route predicts only the runs' years",
                    path=forcing.attrs.get("source_file"),
                    hint='use the parameter route (route = "parameters") for the whole pathway')
            return forcing.sel(year=np.asarray(wanted, int)).values.astype(float), label
    span = f"{int(forcing['year'].min())}–{int(forcing['year'].max())}"
    want = f"{int(years[0])}–{int(years[-1])}"
    if calendar_years is not None:
        want += f" (calendar {int(calendar_years[0])}–{int(calendar_years[-1])})"
    raise EmulatorInputError(f"forcing covers years {span}, the scenario needs {want}",
                             path=forcing.attrs.get("source_file"))

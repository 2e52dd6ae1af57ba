"""A scenario's forcing pathway with its uncertainty: from the archive's runs, a forcing file, or a CO2 file.

Every scenario is a reference forcing series R(t) (W m-2, by year) that belongs to a reference F2x, and a
sampled model's forcing is F(t) = s R(t) with the scale s = (F2x / F2x_ref) · e^(σ ξ), ξ ~ N(0, 1):
- the model-to-model spread of F2x: a model whose CO2 doubling forces more forces every pathway more
  (Myhre et al. 1998 rescaled to each model's F2x for CO2; the same proportionality assumed for a forcing
  file, whose values are read as the ensemble-typical forcing, F2x_ref = the ensemble's median F2x);
- for a forcing diagnosed from the archive's runs (F = N + λT per model, Forster et al. 2013), σ is the
  spread of the per-model diagnoses beyond their F2x: the sd of ln(k_m / (F2x_m / F2x_ref)), k_m the
  least-squares scale of model m's diagnosis onto the ensemble's mean diagnosis.
Because the two-layer model is linear in F, a scaled forcing gives a scaled response: one integration of
R per parameter vector, then a multiplication (emulator.parameter_pathways).
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import xarray as xr

from .errors import EmulatorInputError
from .forcing import MYHRE_COEFFICIENT, PREINDUSTRIAL_CO2, co2_forcing, diagnose_forcing, read_forcing_file

__all__ = ["ScenarioForcing", "SCENARIO_KINDS", "co2_scenario", "file_scenario", "diagnosed_scenario",
           "CO2_DOUBLING_FORCING"]

SCENARIO_KINDS = ("archive", "file", "co2")
#: 5.35 ln 2 = 3.708 W m-2: what the CO2 formula gives for a doubling before rescaling (Myhre et al. 1998)
CO2_DOUBLING_FORCING = MYHRE_COEFFICIENT * float(np.log(2.0))


@dataclass(frozen=True)
class ScenarioForcing:
    """The forcing of one scenario, as the parameter route runs it.

    name : the scenario's name (an experiment id for `archive`)
    kind : "archive" (diagnosed from the ensemble's runs), "file" (W m-2 by year) or "co2" (ppm by year)
    years : (n_years,) the years of the pathway (the file's own years, or the runs' years)
    reference : (n_years,) reference forcing R(t), W m-2
    f2x_reference : F2x (W m-2) the reference belongs to; None: not rescaled to the sampled F2x
    scale_sd : σ of the log scale beyond F2x (0 when unknown)
    source : one line saying where the forcing came from
    calendar_years : the runs' calendar years for an `archive` scenario when they agree, else None
    """

    name: str
    kind: str
    years: np.ndarray
    reference: np.ndarray
    f2x_reference: float | None = None
    scale_sd: float = 0.0
    source: str = ""
    calendar_years: np.ndarray | None = field(default=None)

    def __post_init__(self):
        if self.kind not in SCENARIO_KINDS:
            raise EmulatorInputError(f"scenario {self.name!r}: unknown kind {self.kind!r}",
                                     hint=f"use one of {', '.join(SCENARIO_KINDS)}")
        if np.shape(self.years) != np.shape(self.reference) or np.ndim(self.reference) != 1:
            raise EmulatorInputError(f"scenario {self.name!r}: {np.size(self.years)} years for "
                                     f"{np.size(self.reference)} forcing values")
        if not np.all(np.isfinite(self.reference)):
            raise EmulatorInputError(f"scenario {self.name!r}: the forcing has missing values")

    @property
    def n_years(self) -> int:
        return len(self.reference)

    def scales(self, f2x, rng=None) -> np.ndarray:
        """Forcing scale s per sampled F2x (same shape): (F2x / F2x_ref) e^(σ ξ)."""
        f2x = np.asarray(f2x, float)
        scale = np.ones_like(f2x) if self.f2x_reference is None else f2x / self.f2x_reference
        if self.scale_sd > 0:
            rng = np.random.default_rng(rng)
            scale = scale * np.exp(self.scale_sd * rng.standard_normal(f2x.shape))
        return scale

    def without_uncertainty(self) -> "ScenarioForcing":
        return replace(self, scale_sd=0.0)


def co2_scenario(name: str, path, c0: float = PREINDUSTRIAL_CO2, variable: str | None = None) -> ScenarioForcing:
    """A CO2 concentration file (ppm by year): R = 5.35 ln(C/C0) (Myhre et al. 1998), F2x_ref = 5.35 ln 2,
    so each sampled model's forcing is its F2x times the number of doublings."""
    conc = read_forcing_file(path, variable)
    return ScenarioForcing(name, "co2", conc["year"].values.astype(int), np.asarray(co2_forcing(conc.values, c0)),
                           CO2_DOUBLING_FORCING, 0.0,
                           f"CO2 file {path} (5.35 ln C/C0, C0 = {c0:g} ppm, rescaled to each model's F2x)")


def file_scenario(name: str, path, f2x_reference: float | None, variable: str | None = None) -> ScenarioForcing:
    """A forcing file (W m-2 by year), read as the forcing of a model with F2x = `f2x_reference` (the
    ensemble's median F2x); None keeps the file's values for every sampled model."""
    forcing = read_forcing_file(path, variable)
    units = forcing.attrs.get("units")
    if units is not None and str(units).replace(" ", "").replace("^", "").replace("**", "") not in ("Wm-2", "W/m2"):
        raise EmulatorInputError(f"forcing units are {units!r}", path=path, hint="give the forcing in W m-2")
    how = "" if f2x_reference is None else f", scaled by each model's F2x / {f2x_reference:.3f}"
    return ScenarioForcing(name, "file", forcing["year"].values.astype(int), forcing.values.astype(float),
                           f2x_reference, 0.0, f"forcing file {path}{how}")


def diagnosed_scenario(name: str, tas, rtnt, lambda_, f2x, groups=None, years=None,
                       calendar_years=None) -> ScenarioForcing:
    """Forcing diagnosed from the archive's runs of a scenario (F = N + λT, Forster et al. 2013), with the
    spread of the per-model diagnoses.

    tas, rtnt : (n_runs, n_years) anomalies; lambda_ : (n_runs,) λ > 0; f2x : (n_runs,) each run's F2x;
    groups : model labels (members averaged first, one model one vote).
    """
    tas, rtnt = np.atleast_2d(np.asarray(tas, float)), np.atleast_2d(np.asarray(rtnt, float))
    lam, f2x = np.asarray(lambda_, float).reshape(-1), np.asarray(f2x, float).reshape(-1)
    groups = np.asarray(groups) if groups is not None else np.arange(len(lam))
    labels = list(dict.fromkeys(groups))
    per_model = np.array([diagnose_forcing(tas[groups == g], rtnt[groups == g], lam[groups == g]).values
                          for g in labels])
    f2x_model = np.array([f2x[groups == g].mean() for g in labels])
    mean = per_model.mean(axis=0)
    f2x_ref = float(f2x_model.mean())
    scale_sd = 0.0
    if len(labels) >= 3 and float(mean @ mean) > 0:
        k = per_model @ mean / float(mean @ mean)
        ratio = k / (f2x_model / f2x_ref)
        if np.all(ratio > 0):
            scale_sd = float(np.std(np.log(ratio), ddof=1))
    years = np.arange(1, tas.shape[1] + 1) if years is None else np.asarray(years, int)
    return ScenarioForcing(name, "archive", years, mean, f2x_ref, scale_sd,
                           f"diagnosed from {len(labels)} models' {name} runs (F = N + λT), spread of the "
                           f"per-model diagnoses beyond F2x {100 * scale_sd:.1f} %",
                           None if calendar_years is None else np.asarray(calendar_years, int))


def as_dataarray(scenario: ScenarioForcing) -> xr.DataArray:
    """The reference forcing as a DataArray on `year` (for writing beside the outputs)."""
    return xr.DataArray(scenario.reference, coords={"year": scenario.years}, dims="year", name="forcing",
                        attrs={"units": "W m-2", "long_name": f"reference effective radiative forcing of {scenario.name}",
                               "source": scenario.source})

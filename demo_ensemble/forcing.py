"""True effective radiative forcing of each demo experiment, monthly (constant within a month).

Time t counts years from a run's start at month midpoints, t = (k + 0.5)/12.
- abrupt-4xCO2: F4x = 2 F2x, constant.
- 1pctCO2: F2x log2(1.01^t) (CO2 grows 1 %/yr; forcing logarithmic in CO2, Myhre et al. 1998).
- hist-demo then demo-rise (invented): a smooth reference curve rising to 2.5 W m-2 after 100 years,
  2.5 (e^(t/100) − 1)/(e − 1), then a linear rise of 0.04 W m-2/yr (the curve's slope at year 100 is
  0.0396, so the join is smooth). Each model's forcing is the reference scaled by F2x/3.71.
- hist-demo then demo-steady (invented, lower and stabilising): from the same join the forcing levels off,
  F_join + 1.0 (1 − e^(−s/25)) at s years after the join (slope 0.04 W m-2/yr at the join, again smooth),
  so it approaches F_join + 1.0 = 3.5 W m-2 (reference F2x) and warming approaches equilibrium slowly.
"""
from __future__ import annotations

import math

import numpy as np

from .models import ABRUPT, CONTROL, HISTORICAL, ONEPCT, SCENARIO, SCENARIO_LOW, SCENARIOS, ModelSpec

__all__ = ["REFERENCE_F2X", "month_times", "reference_chain", "run_forcing", "chain_forcing", "user_pathway",
           "USER_PATHWAY_YEARS"]

REFERENCE_F2X = 3.71  # W m-2, the scaling reference for the invented historical-type + scenario forcing
_HIST_END_FORCING = 2.5  # W m-2 after 100 years of the historical-type run
_SCENARIO_TREND = 0.04  # W m-2 per year
_STEADY_RISE, _STEADY_TIME = 1.0, 25.0  # W m-2 and years of demo-steady's levelling off


def month_times(n_years: int) -> np.ndarray:
    return (np.arange(12 * n_years) + 0.5) / 12.0


def reference_chain(t: np.ndarray, n_historical: int, scenario: str = SCENARIO) -> np.ndarray:
    """Reference forcing (W m-2) at years t since the historical-type run's start, continued by `scenario`."""
    if scenario not in SCENARIOS:
        raise ValueError(f"unknown demo scenario {scenario!r}; expected one of {SCENARIOS}")
    t = np.asarray(t, dtype=float)
    hist = _HIST_END_FORCING * np.expm1(t / 100.0) / (math.e - 1.0)
    at_join = _HIST_END_FORCING * math.expm1(n_historical / 100.0) / (math.e - 1.0)
    since = np.maximum(t - n_historical, 0.0)
    if scenario == SCENARIO_LOW:
        after = at_join - _STEADY_RISE * np.expm1(-since / _STEADY_TIME)
    else:
        after = at_join + _SCENARIO_TREND * since
    return np.where(t < n_historical, hist, after)


def chain_forcing(model: ModelSpec, n_historical: int, n_scenario: int, scenario: str = SCENARIO) -> np.ndarray:
    """Monthly forcing of the model over the historical-type run followed by the scenario."""
    t = month_times(n_historical + n_scenario)
    return model.f2x / REFERENCE_F2X * reference_chain(t, n_historical, scenario)


#: years of the demo's user forcing file (from the historical-type run's start; longer than any demo run)
USER_PATHWAY_YEARS = 251


def user_pathway(n_historical: int) -> np.ndarray:
    """The demo's invented user pathway (W m-2, annual, reference F2x): the historical-type curve, then an
    overshoot — e/40 · s · e^(−s/40) W m-2 on top of the join value s years after it, peaking 1.0 W m-2 higher
    40 years after the join and falling back — over `USER_PATHWAY_YEARS` years, longer than any demo run."""
    t = np.arange(USER_PATHWAY_YEARS) + 0.5
    hist = reference_chain(np.minimum(t, n_historical - 0.5), n_historical)
    since = np.maximum(t - n_historical, 0.0)
    return hist + math.e / 40.0 * since * np.exp(-since / 40.0)


def run_forcing(model: ModelSpec, experiment_id: str, n_years: int) -> np.ndarray:
    """Monthly forcing of a single (non-chained) run."""
    t = month_times(n_years)
    if experiment_id == CONTROL:
        return np.zeros_like(t)
    if experiment_id == ABRUPT:
        return np.full_like(t, model.f4x)
    if experiment_id == ONEPCT:
        return model.f2x * t * math.log2(1.01)
    if experiment_id in (HISTORICAL,) + SCENARIOS:
        raise ValueError("the historical-type run and its scenario form one chain: use chain_forcing")
    raise ValueError(f"unknown demo experiment {experiment_id!r}")

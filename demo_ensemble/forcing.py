"""True effective radiative forcing of each demo experiment, monthly (constant within a month).

Time t counts years from a run's start at month midpoints, t = (k + 0.5)/12.
- abrupt-4xCO2: F4x = 2 F2x, constant.
- 1pctCO2: F2x log2(1.01^t) (CO2 grows 1 %/yr; forcing logarithmic in CO2, Myhre et al. 1998).
- hist-demo then demo-rise (invented): a smooth reference curve rising to 2.5 W m-2 after 100 years,
  2.5 (e^(t/100) − 1)/(e − 1), then a linear rise of 0.04 W m-2/yr (the curve's slope at year 100 is
  0.0396, so the join is smooth). Each model's forcing is the reference scaled by F2x/3.71.
"""
from __future__ import annotations

import math

import numpy as np

from .models import ABRUPT, CONTROL, HISTORICAL, ONEPCT, SCENARIO, ModelSpec

__all__ = ["REFERENCE_F2X", "month_times", "reference_chain", "run_forcing", "chain_forcing"]

REFERENCE_F2X = 3.71  # W m-2, the scaling reference for the invented historical-type + scenario forcing
_HIST_END_FORCING = 2.5  # W m-2 after 100 years of the historical-type run
_SCENARIO_TREND = 0.04  # W m-2 per year


def month_times(n_years: int) -> np.ndarray:
    return (np.arange(12 * n_years) + 0.5) / 12.0


def reference_chain(t: np.ndarray, n_historical: int) -> np.ndarray:
    """Reference forcing (W m-2) at years t since the historical-type run's start."""
    t = np.asarray(t, dtype=float)
    hist = _HIST_END_FORCING * np.expm1(t / 100.0) / (math.e - 1.0)
    at_join = _HIST_END_FORCING * math.expm1(n_historical / 100.0) / (math.e - 1.0)
    return np.where(t < n_historical, hist, at_join + _SCENARIO_TREND * (t - n_historical))


def chain_forcing(model: ModelSpec, n_historical: int, n_scenario: int) -> np.ndarray:
    """Monthly forcing of the model over the historical-type run followed by the scenario."""
    t = month_times(n_historical + n_scenario)
    return model.f2x / REFERENCE_F2X * reference_chain(t, n_historical)


def run_forcing(model: ModelSpec, experiment_id: str, n_years: int) -> np.ndarray:
    """Monthly forcing of a single (non-chained) run."""
    t = month_times(n_years)
    if experiment_id == CONTROL:
        return np.zeros_like(t)
    if experiment_id == ABRUPT:
        return np.full_like(t, model.f4x)
    if experiment_id == ONEPCT:
        return model.f2x * t * math.log2(1.01)
    if experiment_id in (HISTORICAL, SCENARIO):
        raise ValueError("the historical-type run and its scenario form one chain: use chain_forcing")
    raise ValueError(f"unknown demo experiment {experiment_id!r}")

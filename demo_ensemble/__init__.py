"""Synthetic CMIP-style archive of invented models with known truth (`generate`).

All model names, institutions, the historical-type experiment and the scenario are invented.
"""
from .generate import DEFAULT_GRID, generate
from .forcing import REFERENCE_F2X
from .models import ABRUPT, CONTROL, DEFAULT_YEARS, HISTORICAL, ONEPCT, SCENARIO, SCENARIO_LOW, SCENARIOS

__all__ = ["generate", "DEFAULT_GRID", "DEFAULT_YEARS", "CONTROL", "ABRUPT", "ONEPCT", "HISTORICAL", "SCENARIO",
           "SCENARIO_LOW", "SCENARIOS", "REFERENCE_F2X"]

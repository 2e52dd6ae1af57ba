"""Transient climate response from the 1 %-per-year CO2 run."""
from __future__ import annotations

import numpy as np

from sensemble.extractor.gregory import window
from sensemble.extractor.settings import ExtractionSettings

_DEFAULTS = ExtractionSettings()


def tcr(tas_anomaly_onepct, years: tuple[int, int] = _DEFAULTS.tcr_years) -> float:
    """Mean warming over ``years`` (default 61–80) of the 1 %-per-year run (K).

    CO2 compounds by 1 % a year and doubles at year 70 (1.01^70 ≈ 2.0), so the 20-year mean
    centred there is the transient climate response (IPCC AR5 WG1 glossary; from memory).

    Parameters
    ----------
    tas_anomaly_onepct : xarray.DataArray or array-like
        Drift-corrected annual ``tas`` anomaly along ``year`` (1 = first year after the branch).
    years : (int, int)
        Averaging window, both ends included.

    Raises
    ------
    extractor.gregory.FitWindowError
        The run is shorter than the window, or values are missing in it.
    """
    return float(np.mean(window(tas_anomaly_onepct, years, "TCR", "tas anomaly of the 1 % run")))

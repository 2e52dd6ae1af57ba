"""Monthly time axes in a model's calendar (cftime) and month-length-weighted annual means."""
from __future__ import annotations

import cftime
import numpy as np

__all__ = ["month_starts", "month_bounds", "month_days", "annual_mean", "date_number"]


def month_starts(start_year: int, n_months: int, calendar: str) -> list:
    """First instants of n_months + 1 consecutive months from January of start_year (cftime dates)."""
    out = []
    for k in range(n_months + 1):
        year, month = start_year + k // 12, k % 12 + 1
        out.append(cftime.datetime(year, month, 1, calendar=calendar))
    return out


def date_number(date, units: str, calendar: str) -> float:
    return float(cftime.date2num(date, units, calendar=calendar))


def month_bounds(start_year: int, n_months: int, units: str, calendar: str) -> np.ndarray:
    """Bounds (n_months, 2) of each month in `units` of `calendar`."""
    edges = np.asarray(cftime.date2num(month_starts(start_year, n_months, calendar), units, calendar=calendar),
                       dtype=float)
    return np.stack([edges[:-1], edges[1:]], axis=1)


def month_days(start_year: int, n_months: int, calendar: str) -> np.ndarray:
    """Length in days of each month, from the calendar itself (cftime)."""
    bounds = month_bounds(start_year, n_months, "days since 0001-01-01", calendar)
    return bounds[:, 1] - bounds[:, 0]


def annual_mean(monthly: np.ndarray, days: np.ndarray) -> np.ndarray:
    """Month-length-weighted means over complete years (trailing axis = months, 12 per year)."""
    monthly = np.asarray(monthly, dtype=float)
    n_years = monthly.shape[-1] // 12
    m = monthly[..., : 12 * n_years].reshape(monthly.shape[:-1] + (n_years, 12))
    w = np.asarray(days[: 12 * n_years], dtype=float).reshape(n_years, 12)
    return (m * w).sum(axis=-1) / w.sum(axis=-1)

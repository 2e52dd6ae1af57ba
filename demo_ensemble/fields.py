"""Spatial fields on a regular latitude–longitude grid whose area-weighted means are the model's series.

A field is
    x(t, lat, lon) = X0 + climatology(lat, lon) + seasonal(month, lat) + (x̄(t) − X0) · pattern(lat, lon)
with, under the cell-area weights written to `areacella` (float32, so a reader's weights are these exactly):
climatology and each month's seasonal term of weighted mean 0, the response pattern of weighted mean 1.
The weighted mean of x is then x̄(t) to float64 rounding; storing float32 adds at most half a unit in the
last place. Latitude structure (warm tropics, cold poles) makes an unweighted mean wrong by several K.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["EARTH_RADIUS", "Grid", "make_grid", "FieldRecipe", "recipes"]

EARTH_RADIUS = 6_371_000.0  # m


@dataclass(frozen=True)
class Grid:
    lat: np.ndarray
    lon: np.ndarray
    lat_bnds: np.ndarray
    lon_bnds: np.ndarray
    area: np.ndarray  # float32 (lat, lon), m2 — what areacella holds

    @property
    def weights(self) -> np.ndarray:
        return self.area.astype(np.float64)

    @property
    def shape(self) -> tuple[int, int]:
        return self.area.shape

    def mean(self, field: np.ndarray) -> np.ndarray:
        """Area-weighted mean over the trailing (lat, lon) axes."""
        w = self.weights
        return (np.asarray(field, dtype=np.float64) * w).sum(axis=(-2, -1)) / w.sum()

    def centred(self, shape: np.ndarray) -> np.ndarray:
        return shape - self.mean(shape)

    def normalised(self, shape: np.ndarray) -> np.ndarray:
        return shape / self.mean(shape)


def make_grid(nlat: int, nlon: int) -> Grid:
    """Regular grid: nlat bands from pole to pole, nlon columns from 0° E; cell area R² Δλ Δ(sin φ)."""
    if nlat < 2 or nlon < 1:
        raise ValueError(f"grid must have at least 2 latitudes and 1 longitude, got {nlat}x{nlon}")
    lat_edges = np.linspace(-90.0, 90.0, nlat + 1)
    lon_edges = np.linspace(0.0, 360.0, nlon + 1)
    lat_bnds = np.stack([lat_edges[:-1], lat_edges[1:]], axis=1)
    lon_bnds = np.stack([lon_edges[:-1], lon_edges[1:]], axis=1)
    band = np.diff(np.sin(np.deg2rad(lat_edges)))
    area = EARTH_RADIUS ** 2 * np.outer(band, np.deg2rad(np.diff(lon_edges)))
    return Grid(lat_bnds.mean(axis=1), lon_bnds.mean(axis=1), lat_bnds, lon_bnds, area.astype(np.float32))


@dataclass(frozen=True)
class FieldRecipe:
    """What a variable's field is made of; `build` turns monthly global means into fields."""

    mean: float  # X0, the control mean
    climatology: np.ndarray  # (lat, lon), weighted mean 0
    seasonal: np.ndarray  # (12, lat, lon), weighted mean 0 each month
    pattern: np.ndarray  # (lat, lon), weighted mean 1

    def build(self, series: np.ndarray, months: np.ndarray) -> np.ndarray:
        """Fields (time, lat, lon) float64 for monthly global means `series` at calendar months 0–11."""
        anomaly = np.asarray(series, dtype=np.float64) - self.mean
        return (self.mean + self.climatology)[None] + self.seasonal[months] + anomaly[:, None, None] * self.pattern


def recipes(grid: Grid, control_means: dict, polar_amplification: float) -> dict:
    """Field recipes for tas and the TOA fluxes of one model."""
    phi = np.deg2rad(grid.lat)[:, None]
    lam = np.deg2rad(grid.lon)[None, :]
    s, c = np.sin(phi), np.cos(phi)
    ones = np.ones(grid.shape)
    # seasonal phase: northern summer peaks in July (month index 6)
    season = -np.cos(2.0 * np.pi * (np.arange(12) + 0.5) / 12.0)[:, None, None]
    hemispheric = season * (s * ones)[None]  # ∝ sin φ · cos(2π month/12)
    seasonal_zero = lambda amp: amp * (hemispheric - grid.mean(hemispheric)[:, None, None])  # noqa: E731
    p2 = 0.5 * (3.0 * s * s - 1.0)  # Legendre P2: annual insolation ≈ S (1 − 0.48 P2(sin φ))
    zonal = c * np.cos(lam)  # a land–sea-like wave along longitude
    shapes = {
        # variable: (climatology, seasonal amplitude, response pattern)
        "tas": (-45.0 * s * s + 3.0 * zonal, 12.0, 1.0 + (polar_amplification - 1.0) * s * s),
        "rsdt": (-0.48 * control_means["rsdt"] * p2 * ones, 150.0, ones),
        "rsutcs": (30.0 * s * s + 4.0 * zonal, 15.0, 1.0 + 0.8 * s * s),
        "rsut": (20.0 * s * s + 6.0 * zonal, 45.0, 1.0 + 0.5 * c * c),
        "rlutcs": (-60.0 * s * s + 4.0 * zonal, 10.0, 1.0 + 0.3 * c * c),
        "rlut": (-50.0 * s * s - 5.0 * zonal, 8.0, 1.0 + 0.4 * c * c),
    }
    out = {}
    for var, (clim, amp, pattern) in shapes.items():
        out[var] = FieldRecipe(
            mean=float(control_means[var]),
            climatology=grid.centred(clim * ones),
            seasonal=seasonal_zero(amp),
            pattern=grid.normalised(pattern * ones),
        )
    return out

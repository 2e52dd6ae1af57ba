"""Internal variability: an AR(1) process estimated from the control runs, and noise drawn from it."""
from __future__ import annotations

import numpy as np

from .errors import EmulatorInputError

__all__ = ["internal_variability_from_control", "internal_variability_if", "ar1_noise"]


def internal_variability_from_control(series) -> tuple[float, float]:
    """(sd, lag-1 autocorrelation) of annual control residuals, pooled over runs (AR(1); common practice).

    The variance is the mean of the runs' variances; the autocorrelation the mean of theirs, kept in [0, 0.95].
    """
    variances, lags = [], []
    for s in series:
        if s is None:
            continue
        s = np.asarray(s, float)
        s = s[np.isfinite(s)] - np.nanmean(s)
        if len(s) < 10:
            continue
        variances.append(s.var(ddof=1))
        lags.append(np.sum(s[1:] * s[:-1]) / np.sum(s * s))
    if not variances:
        raise EmulatorInputError("no control series of at least 10 years for the internal variability")
    return float(np.sqrt(np.mean(variances))), float(np.clip(np.mean(lags), 0.0, 0.95))


def internal_variability_if(wanted: bool, series, notes: list) -> tuple[float, float] | None:
    """The control runs' (sd, lag-1) when `wanted`; when they cannot give it, a note is added and None returned
    (the prediction is then of the forced response only)."""
    if not wanted:
        return None
    try:
        return internal_variability_from_control(series)
    except EmulatorInputError as exc:
        notes.append(str(exc))
        return None


def ar1_noise(rng, shape, sd, phi, dtype=np.float32):
    """Stationary AR(1) noise along the last axis with marginal sd `sd` and lag-1 autocorrelation `phi`.

    x_0 ~ N(0, sd²), x_t = φ x_{t−1} + e_t with var e_t = sd²(1 − φ²). Drawn year-major in single precision
    (seven significant digits are far finer than the noise itself) and returned as a view with years last:
    drawing normals dominates the cost of sampling 10⁵ pathways.
    """
    shape = tuple(shape)
    noise = rng.standard_normal((shape[-1],) + shape[:-1], dtype=dtype)
    noise[0] *= dtype(sd)
    noise[1:] *= dtype(sd * np.sqrt(1.0 - phi * phi))
    phi = dtype(phi)
    for k in range(1, shape[-1]):
        noise[k] += phi * noise[k - 1]
    return np.moveaxis(noise, 0, -1)

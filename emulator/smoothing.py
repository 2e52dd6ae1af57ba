"""The forced part of single noisy realisations, for the emulator's training residuals.

A training pathway is one realisation: forced response + internal variability. The emulator learns the
model-to-model (structural) part from the forced part of the residuals and adds internal variability back
as a separate, known noise term (AR(1) from the control runs), so the noise is neither interpolated into
the mean pathways nor counted twice.

Two smoothers, both linear operators along years:
- "response" (needs the scenario's forcing): least-squares projection on the responses of one-box models
  dx/dt = (F − x)/τ to the forcing, for time scales τ = 1, 2, 4, … years up to twice the series, plus a
  constant. The forced response of any linear energy-balance model (the two-layer model included) is the
  forcing convolved with a sum of decaying exponentials (Geoffroy et al. 2013a; the step-response models of
  Good et al. 2011, GRL; from memory), so differences between models' forced responses lie (nearly) in this
  span, fast transients after a step included, while year-to-year internal variability mostly does not.
- "gaussian" (no forcing needed): local-linear Gaussian-kernel regression (Fan & Gijbels 1996, from memory)
  with a kernel sd of `GAUSSIAN_YEARS`, ≈ a 20-year window; no bias for a linear trend at the series' ends,
  but it blurs transients faster than a few years (use "none" for abrupt scenarios without the physics mean).
Separating a smooth forced signal from a single run is common practice (e.g. the polynomial fits of
Hawkins & Sutton 2009, BAMS, from memory).
"""
from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

from .settings import SMOOTHERS  # the smoothing choices, declared with the estimator's constraints

__all__ = ["SMOOTHERS", "GAUSSIAN_YEARS", "gaussian_smoother", "response_smoother", "response_span", "smoother_kind",
           "forced_part"]

GAUSSIAN_YEARS = 5.0


def gaussian_smoother(n_years: int, bandwidth: float = GAUSSIAN_YEARS) -> np.ndarray:
    """(n_years, n_years) local-linear smoother L (smoothed = series @ L.T); rows sum to 1, lines kept exactly."""
    n_years = int(n_years)
    if n_years < 3:
        return np.eye(n_years)
    t = np.arange(n_years, dtype=float)
    d = t[None, :] - t[:, None]  # d[i, j] = t_j − t_i
    w = np.exp(-0.5 * (d / float(bandwidth)) ** 2)
    s0, s1, s2 = w.sum(axis=1), (w * d).sum(axis=1), (w * d * d).sum(axis=1)
    # weighted least-squares line at t_i, evaluated at t_i: l_ij = w_ij (s2_i − d_ij s1_i) / (s0_i s2_i − s1_i²)
    return w * (s2[:, None] - d * s1[:, None]) / (s0 * s2 - s1 * s1)[:, None]


def response_basis(forcing) -> np.ndarray:
    """(n_years, n_basis): a constant and the one-box responses to `forcing` for τ = 1, 2, 4, … ≤ 2·n_years."""
    forcing = np.asarray(forcing, float)
    n_years = len(forcing)
    columns = [np.ones(n_years)]
    tau = 1.0
    while tau <= 2.0 * n_years:
        decay = np.exp(-1.0 / tau)
        columns.append(lfilter([1.0 - decay], [1.0, -decay], forcing))  # x_k = e^(−1/τ) x_{k−1} + (1 − e^(−1/τ)) F_k
        tau *= 2.0
    return np.column_stack(columns)


def response_span(forcing) -> np.ndarray:
    """(n_years, r) orthonormal columns spanning `response_basis(forcing)` (collinear directions dropped)."""
    basis = response_basis(forcing)
    basis = basis / np.maximum(np.linalg.norm(basis, axis=0), 1e-300)
    u, s, _ = np.linalg.svd(basis, full_matrices=False)
    return u[:, s > 1e-10 * s[0]]


def response_smoother(forcing) -> np.ndarray:
    """(n_years, n_years) orthogonal projection on `response_basis(forcing)` (collinear directions dropped)."""
    u = response_span(forcing)
    return u @ u.T


def smoother_kind(smoother: str, forcing=None) -> str:
    """The smoother "auto" stands for: "response" with a forcing, else "gaussian"."""
    if smoother == "auto":
        return "response" if forcing is not None else "gaussian"
    return smoother


def forced_part(series, smoother: str = "auto", forcing=None) -> np.ndarray:
    """The series (runs × years) with internal variability smoothed out along years.

    smoother : "response" (needs `forcing`), "gaussian", "auto" (response if a forcing is given, else
    gaussian) or "none" (unchanged).
    """
    series = np.asarray(series, float)
    smoother = smoother_kind(smoother, forcing)
    if smoother == "none" or series.shape[-1] < 3:
        return series.copy()
    if smoother == "response":
        if forcing is None:
            raise ValueError("the response smoother needs the forcing")
        return series @ response_smoother(forcing).T
    if smoother == "gaussian":
        return series @ gaussian_smoother(series.shape[-1]).T
    raise ValueError(f"unknown smoother {smoother!r}")

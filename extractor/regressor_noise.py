"""The noise in a Gregory fit's regressor: ΔT carries internal variability too (errors in variables).

OLS of ΔN on ΔT treats ΔT as exact. It is not: the run's internal variability and the error of the control drift
line subtracted from it move ΔT, and the same noise moves ΔN (their annual anomalies are anti-correlated). With
e_T, e_N the noise in ΔT and ΔN over a window and S the sums of squares and cross-products about the window's
mean, E[S_xy] = λ S_xx,true + m_TN and E[S_xx] = S_xx,true + m_TT, with m_TT = E[e_Tᵀ M e_T], m_TN = E[e_Tᵀ M e_N]
(M = I − 11ᵀ/n), so the OLS slope S_xy / S_xx is pulled by (m_TN − λ m_TT) / S_xx. Over a window where ΔT spans
little (the late segment, years 21–150) that pull is a third of the slope's standard error, all on one side, and
the ECS interval built around the OLS slope misses above twice as often as below.

The moment-corrected slope (S_xy − m_TN) / (S_xx − m_TT) removes it (the method-of-moments errors-in-variables
estimator with known error covariance, errors in x and y correlated: Fuller 1987, Measurement Error Models,
§1.2 and §2.2; from memory). m_TT and m_TN are the expectations under the control's internal variability —
AR(1) in each combination, estimated from the control's drift-removed residuals with their small-sample bias
removed (:class:`extractor.gregory.ControlVariability`) — plus the drift line's error, which moves ΔT and ΔN
together over the whole window. The cross moment is had from two univariate ones by polarization,
4 s m_TN = m(N + sT) − m(N − sT) with s = sd(N)/sd(T) (common practice, no source), so every moment is an AR(1)
expectation like those of :mod:`extractor.serial`.

The covariance carries the estimation error of the moments themselves too: in the coverage benchmark (250-year
controls, lag-1 0.5) the standardized slope errors with estimated moments had 3–5 % more variance than with the
true ones when it was left out.

Used for the ``ecs_late`` interval (extractor.science.ecs_intervals), chosen by measured coverage
(tests/benchmarks/coverage_extraction.py, figures in its docstring and the README). Not for ``ecs_eff``: over years
1–150 ΔT spans several kelvin, the pull is a tenth of a standard error, and the correction measured no better there.
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from sensemble.extractor.gregory import ControlVariability, GregoryFit, _ecs, _pairs
from sensemble.extractor.serial import AR1Noise, ols_sandwich


def demeaned_moment(since_branch: np.ndarray, noise: AR1Noise, drift_years: int, drift_order: int) -> float:
    """E[Σ (e_t − ē)²] over the years ``since_branch`` (0 at the branch) of noise ``noise`` in an anomaly.

    The anomaly's noise is the run's internal variability (``noise``, AR(1)) plus the error of the drift
    polynomial of ``drift_order`` fitted to ``drift_years`` control years with the same variability.
    """
    at = np.asarray(since_branch, dtype=float)
    n = at.size
    lags = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    internal = noise.sd**2 * (n - float((float(noise.lag1) ** lags).sum()) / n)  # σ² tr(M R(ρ))
    segment = np.vander(np.arange(drift_years, dtype=float), drift_order + 1, increasing=True)
    line = np.vander(at, drift_order + 1, increasing=True)
    line -= line.mean(axis=0)  # M applied to the drift polynomial's columns
    drift = float(np.trace(line @ ols_sandwich(segment, noise) @ line.T))
    return internal + drift


def regressor_moments(control: ControlVariability, years, regressand: str = "rtnt",
                      regressor: str = "tas") -> tuple[float, float]:
    """(m_TT, m_TN): the expected sums of squares of the regressor's noise and of its products with the
    regressand's, about the window's mean, over ``years`` of drift-corrected anomalies (see the module)."""
    since_branch = np.arange(int(years[0]), int(years[1]) + 1) - 1

    def moment(slope: float, of: str) -> float:
        return demeaned_moment(since_branch, control.noise(of, slope, regressor), control.drift_years,
                               control.drift_order)

    m_tt = moment(0.0, regressor)
    m_nn = moment(0.0, regressand)
    if not (m_tt > 0 and m_nn > 0):
        return max(m_tt, 0.0), 0.0
    scale = math.sqrt(m_nn / m_tt)
    # regressand − slope·regressor with slope −s and +s: N + sT and N − sT
    m_tn = (moment(-scale, regressand) - moment(scale, regressand)) / (4.0 * scale)
    return m_tt, m_tn


def correction_variance(control: ControlVariability, years, slope: float, regressand: str = "rtnt",
                        regressor: str = "tas") -> float:
    """Variance of the estimate of m_Tu = m_TN − slope·m_TT from the control: the error it puts in the correction.

    By polarization m_Tu = (m(u + tT) − m(u − tT)) / 4t with u = N − slope·T and t = sd(u)/sd(T), which makes the
    two combinations uncorrelated, so their errors add. Each moment is its combination's variance times a known
    factor, and the variance of an AR(1) series' sample variance is 2σ⁴(1 + ρ²)/((1 − ρ²) n) over n years
    (Bartlett 1946; from memory). The error of the estimated lag-1 is left out.
    """
    since_branch = np.arange(int(years[0]), int(years[1]) + 1) - 1
    n_control = int(control.residuals.sizes["year"])
    sd_u = control.noise(regressand, slope, regressor).sd
    sd_t = control.noise(regressor, 0.0, regressor).sd
    if not (sd_u > 0 and sd_t > 0):
        return 0.0
    scale = sd_u / sd_t
    total = 0.0
    for shift in (-scale, scale):  # N − (slope − t)T = u + tT, then u − tT
        noise = control.noise(regressand, slope + shift, regressor)
        moment = demeaned_moment(since_branch, noise, control.drift_years, control.drift_order)
        rho2 = float(noise.lag1) ** 2
        total += moment**2 * 2.0 * (1.0 + rho2) / ((1.0 - rho2) * n_control)
    return total / (16.0 * scale**2)


def corrected_fit(fit: GregoryFit, dT, dN, years, control: ControlVariability,
                  forcing_ratio: float, regressand: str = "rtnt") -> GregoryFit:
    """``fit`` (OLS over ``years``) with the slope and intercept corrected for the noise in ΔT (see the module).

    The covariance is the OLS fit's carried through the correction — to first order the slope's error is the
    OLS slope's times k = S_xx / (S_xx − m_TT), and the intercept ȳ − λx̄ follows it (the delta method) — plus
    the error of the correction itself (:func:`correction_variance`), independent of it (another run). When
    the noise would account for all of ΔT's spread over the window (S_xx ≤ m_TT) the data hold no slope to
    correct: intercept, slope and their covariance are then NaN, and so is any interval made from them.
    """
    x, y = _pairs(dT, dN, years, "errors-in-variables Gregory fit")
    m_tt, m_tn = regressor_moments(control, years, regressand)
    dx, dy = x - x.mean(), y - y.mean()
    s_xx = float(dx @ dx)
    if not s_xx > m_tt:
        nan = float("nan")
        return replace(fit, erf=nan, feedback=nan, ecs_eff=nan, erf_se=nan, feedback_se=nan, erf_feedback_cov=nan)
    feedback = (float(dx @ dy) - m_tn) / (s_xx - m_tt)
    erf = float(y.mean()) - feedback * float(x.mean())
    k = s_xx / (s_xx - m_tt)
    carry = np.array([[1.0, float(x.mean()) * (1.0 - k)], [0.0, k]])
    # the run's noise carried through the correction, plus the correction's own error: −δm_Tu / (S_xx − m_TT)
    # in the slope, and x̄ times its opposite in the intercept ȳ − λx̄
    along = np.array([-float(x.mean()), 1.0]) / (s_xx - m_tt)
    cov = (carry @ fit.covariance @ carry.T
           + correction_variance(control, years, feedback, regressand) * np.outer(along, along))
    return replace(fit, erf=erf, feedback=feedback, ecs_eff=_ecs(erf, feedback, forcing_ratio),
                   erf_se=float(np.sqrt(cov[0, 0])), feedback_se=float(np.sqrt(cov[1, 1])),
                   erf_feedback_cov=float(cov[0, 1]))

"""Covariance of least-squares fits whose errors are autocorrelated internal variability.

Annual means of a climate run are not independent: internal variability persists from year to year
(lag-1 autocorrelation 0.5–0.8 in annual global means), so ordinary least squares, which assumes
independent years, understates the spread of a fitted slope by a factor of about √((1 + ρ)/(1 − ρ)) —
the effective sample size n_eff = n (1 − ρ)/(1 + ρ) of Bretherton et al. (1999, J. Climate; from memory)
for a slowly varying regressor.

Method (chosen by measured coverage, tests/benchmarks/coverage_extraction.py): the errors are taken as a
stationary AR(1) process with standard deviation σ and lag-1 autocorrelation ρ, and the covariance of the
OLS coefficients is the exact sandwich (XᵀX)⁻¹ XᵀΣX (XᵀX)⁻¹ with Σ_ij = σ² ρ^|i−j| — the effective-sample-size
correction done exactly for any design (it reduces to Bretherton's n_eff for a smooth regressor, and stays
right for the short early segment and the quadratic term, where the regressor is not smooth). σ and ρ are
estimated from residuals with their small-sample bias removed for the design they came from (the
expectations of the quadratic forms eᵀe and Σ e_t e_{t−1} under AR(1) matched to their observed values;
common practice, no source): a residual series is shorter of variance and of memory than the noise itself.

Newey–West (Bartlett-kernel HAC) errors were measured too and rejected: with the usual bandwidths for 150
years they recover only part of the long-run variance at ρ = 0.8 (see the benchmark's rows).
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

#: lag-1 autocorrelations are kept in [0, MAX_LAG1]: negative persistence of annual means is sampling
#: noise in a climate run (common practice, no source), and ρ → 1 makes every variance infinite
MAX_LAG1 = 0.95
#: residual series longer than this (long controls) take the O(1/n) bias correction instead of the exact one
EXACT_UP_TO = 600


@dataclass(frozen=True)
class AR1Noise:
    """A stationary AR(1) error process: standard deviation ``sd`` and lag-1 autocorrelation ``lag1``."""

    sd: float
    lag1: float

    def correlation(self, n: int) -> np.ndarray:
        """The n×n correlation matrix ρ^|i−j|."""
        lags = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
        return float(self.lag1) ** lags


def _lag_sums(matrix: np.ndarray) -> np.ndarray:
    """Sums of a square matrix over each pair of diagonals |i − j| = k, k = 0 … n−1.

    With them tr(matrix · R(ρ)) = Σ_k ρ^k · sum_k for the AR(1) correlation R, in O(n) per ρ.
    """
    n = matrix.shape[0]
    lags = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    return np.bincount(lags.ravel(), weights=matrix.ravel(), minlength=n)


@functools.lru_cache(maxsize=32)
def _design_sums(design_bytes: bytes, n: int, p: int) -> tuple[np.ndarray, np.ndarray]:
    """Lag sums of M and MAM for a design (cached: every fit against one control shares its design)."""
    design = np.frombuffer(design_bytes, dtype=np.float64).reshape(n, p)
    q, _ = np.linalg.qr(design)
    # M = I − QQᵀ and MAM expanded so that nothing costs more than O(n² p)
    qa = np.zeros_like(q)  # A Q: each row the sum of its neighbours' rows
    qa[1:] += q[:-1]
    qa[:-1] += q[1:]
    m_sums = _lag_sums(np.eye(n) - q @ q.T)
    shift = np.eye(n, k=1)
    mam = shift + shift.T - q @ qa.T - qa @ q.T + q @ (q.T @ qa) @ q.T
    return m_sums, _lag_sums(mam)


def estimate_ar1(residuals, design: np.ndarray) -> AR1Noise:
    """AR(1) parameters of the errors behind ``residuals`` of a least-squares fit on ``design``.

    The observed lag-1 ratio r = Σ e_t e_{t−1} / Σ e_t² is matched to its expectation under AR(1) errors
    for this design, ½ tr(MAMR(ρ)) / tr(MR(ρ)) with M = I − X(XᵀX)⁻¹Xᵀ the residual maker and A the
    symmetric lag-1 matrix; σ² = Σ e_t² / tr(MR(ρ)) is then unbiased (E[eᵀMe] = σ² tr(MR); common
    practice, no source).
    """
    e = np.asarray(residuals, dtype=np.float64)
    design = np.asarray(design, dtype=np.float64)
    n, p = design.shape
    ssr = float(e @ e)
    if n < p + 3 or not ssr > 0:
        return AR1Noise(sd=float(np.sqrt(ssr / max(n - p, 1))), lag1=0.0)
    observed = float(e[1:] @ e[:-1]) / ssr
    if n > EXACT_UP_TO:
        # the bias is O(1/n) and the n×n matrices below grow as n²: E[r] ≈ ρ − (1 + 3ρ)/n for a series
        # with its mean removed (Kendall 1954, from memory)
        rho = float(np.clip((n * observed + 1.0) / (n - 3.0), 0.0, MAX_LAG1))
        return AR1Noise(sd=float(np.sqrt(ssr / (n - p))), lag1=rho)
    m_sums, b_sums = _design_sums(design.tobytes(), n, p)
    powers_of = lambda rho: rho ** np.arange(n)  # noqa: E731

    def expected_ratio(rho: float) -> float:
        powers = powers_of(rho)
        return 0.5 * float(b_sums @ powers) / float(m_sums @ powers)

    low, high = expected_ratio(0.0), expected_ratio(MAX_LAG1)
    if observed <= low:
        rho = 0.0
    elif observed >= high:
        rho = MAX_LAG1
    else:
        rho = brentq(lambda r: expected_ratio(r) - observed, 0.0, MAX_LAG1, xtol=1e-6)
    variance = ssr / float(m_sums @ powers_of(rho))
    return AR1Noise(sd=float(np.sqrt(variance)), lag1=float(rho))


def ols_sandwich(design: np.ndarray, noise: AR1Noise) -> np.ndarray:
    """Covariance of OLS coefficients on ``design`` when the errors are ``noise``: (XᵀX)⁻¹ XᵀΣX (XᵀX)⁻¹."""
    design = np.asarray(design, dtype=np.float64)
    bread = np.linalg.inv(design.T @ design)
    meat = design.T @ (noise.sd**2 * noise.correlation(design.shape[0])) @ design
    return bread @ meat @ bread


def drift_covariance(design: np.ndarray, at_years: np.ndarray, segment_years: int, order: int,
                     noise: AR1Noise) -> np.ndarray:
    """Covariance that an error in the control's drift line adds to OLS coefficients on ``design``.

    The drift — a polynomial of ``order`` fitted to ``segment_years`` control years starting at the branch
    (extractor.control.drift_corrected) — is subtracted from the experiment, so its error e_d(t) enters every
    fitted year; for the combination of variables the regression's error is made of (ΔN − λΔT for a
    Gregory fit), the coefficients move by (XᵀX)⁻¹ Xᵀ e_d(t) to first order. ``at_years`` are the fitted
    years counted from 0 at the branch; ``noise`` is the control's internal variability of that combination.
    """
    return drift_cross_covariance(design, at_years, design, at_years, segment_years, order, noise.sd**2,
                                  noise.lag1)


def cross_covariance(design_a: np.ndarray, years_a: np.ndarray, design_b: np.ndarray, years_b: np.ndarray,
                     covariance: float, lag1: float) -> np.ndarray:
    """Covariance between the OLS coefficients of two fits over (possibly different) years of one run.

    Fit a's error and fit b's error are taken as jointly stationary with cross-covariance c·ρ^|t − s| at
    years t and s (c = ``covariance`` at lag 0, ρ = ``lag1``): Cov(β_a, β_b) = A_a Σ_ab A_bᵀ with
    A = (XᵀX)⁻¹Xᵀ, the cross term of the sandwich of :func:`ols_sandwich` (common practice, no source).
    """
    a = np.linalg.solve(design_a.T @ design_a, design_a.T)
    b = np.linalg.solve(design_b.T @ design_b, design_b.T)
    lags = np.abs(np.subtract.outer(np.asarray(years_a, dtype=float), np.asarray(years_b, dtype=float)))
    return a @ (covariance * float(lag1) ** lags) @ b.T


def drift_cross_covariance(design_a: np.ndarray, at_a: np.ndarray, design_b: np.ndarray, at_b: np.ndarray,
                           segment_years: int, order: int, covariance: float, lag1: float) -> np.ndarray:
    """The drift line's share of :func:`cross_covariance`: one control segment's error enters both fits.

    As :func:`drift_covariance`, for two fits whose error combinations (ΔN − λ_a ΔT and ΔN − λ_b ΔT) have
    cross-covariance c·ρ^|k| in the control.
    """
    segment = np.vander(np.arange(segment_years, dtype=float), order + 1, increasing=True)
    years = np.arange(segment_years, dtype=float)
    drift_cross = cross_covariance(segment, years, segment, years, covariance, lag1)  # the drift polynomial's
    carry = [np.linalg.solve(d.T @ d, d.T @ np.vander(np.asarray(at, dtype=float), order + 1, increasing=True))
             for d, at in ((np.asarray(design_a, dtype=np.float64), at_a),
                           (np.asarray(design_b, dtype=np.float64), at_b))]
    return carry[0] @ drift_cross @ carry[1].T


def variance_dof(lag1: float, n_control: int, dlogvar_dlag1: float) -> float:
    """Degrees of freedom of a variance σ̂²·g(ρ̂) whose σ and ρ were estimated from ``n_control`` AR(1) years.

    A standard error from the control's σ̂ and ρ̂ is itself an estimate; the standardized error of a fitted
    coefficient is then nearer a Student-t than a normal. Satterthwaite (1946, from memory): a variance
    estimate V̂ is taken as V·χ²_ν/ν with ν = 2V²/Var(V̂) = 2 / Var(log V̂). For V = σ²·g(ρ) with σ² the
    marginal variance, Var(log V̂) = [2(1 + ρ²)/(1 − ρ²) + D²(1 − ρ²) + 4ρD] / n, D = d log g / dρ, from
    Var(ρ̂) = (1 − ρ²)/n (Bartlett 1946; Box & Jenkins, from memory), Var(σ̂²)/σ⁴ = 2(1 + ρ²)/(n(1 − ρ²))
    (Bartlett 1946, the variance of an AR(1) sample variance) and Cov(log σ̂², ρ̂) = 2ρ/n (the innovation
    variance's estimate is asymptotically independent of ρ̂ and σ² = σ_ε²/(1 − ρ²); from memory).
    """
    rho = float(np.clip(lag1, 0.0, MAX_LAG1))
    d = float(dlogvar_dlag1)
    var_log = (2.0 * (1.0 + rho**2) / (1.0 - rho**2) + d * d * (1.0 - rho**2) + 4.0 * rho * d) / float(n_control)
    return 2.0 / var_log if var_log > 0 else float("inf")


def contrast_dofs(covariance_at, lag1: float, n_control: int, contrasts) -> list[float]:
    """:func:`variance_dof` of each contrast vector c's variance cᵀ·covariance_at(ρ)·c at ρ = ``lag1``.

    ``covariance_at(ρ)`` gives the fit's covariance with the estimated σ and lag-1 ρ; d log V / dρ is taken
    by a central difference.
    """
    step = 1e-4
    low, high = max(lag1 - step, 0.0), min(lag1 + step, MAX_LAG1)
    below, above = covariance_at(low), covariance_at(high)
    dofs = []
    for c in contrasts:
        c = np.asarray(c, dtype=np.float64)
        slope = (np.log(c @ above @ c) - np.log(c @ below @ c)) / (high - low)
        dofs.append(variance_dof(lag1, n_control, float(slope)))
    return dofs


def summed_dof(*parts: tuple[float, float]) -> float:
    """Degrees of freedom of V₁ + V₂ + … from (Vᵢ, νᵢ) when the Vᵢ were estimated from one control series.

    Fully correlated estimates: their standard deviations Vᵢ √(2/νᵢ) add, where Satterthwaite (1946, from
    memory) adds the variances of independent ones; ν = (ΣVᵢ)² / (ΣVᵢ/√νᵢ)².
    """
    total = sum(v for v, _ in parts)
    spread = sum(v / np.sqrt(nu) for v, nu in parts)
    return float(total**2 / spread**2) if spread > 0 else float("inf")

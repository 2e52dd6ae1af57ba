"""Two-layer parameters of one run from its abrupt-forcing series (Geoffroy et al. 2013a,b, J. Climate).

ε = 1 (Geoffroy et al. 2013a, section 4, from memory):
1. Gregory fit N = F − λT over all years → forcing F and λ > 0; equilibrium T_eq = F/λ.
2. Slow mode from years 30–150: ln(1 − T/T_eq) is linear in time → amplitude a_s and time scale τ_s.
3. Fast mode: a_f = 1 − a_s; τ_f from the first decade, where 1 − T/T_eq − slow part = fast part.
4. C = λ / (a_f/τ_f + a_s/τ_s);  C_d = λ(τ_f a_f + τ_s a_s) − C;  γ = C_d / (τ_f a_s + τ_s a_f).

With efficacy ε (Geoffroy et al. 2013b, iterative): the deep-layer temperature follows from T and the
current (C_d, γ); the heat-uptake term H = γ(T − T_d) enters N = F − λT − (ε − 1)H, a two-predictor
regression giving F, λ, ε; steps 2–4 are repeated with T_eq = F/λ. The T-equation of the ε-system equals
that of an ε = 1 system with (C, εC_d, εγ), so steps 2–4 return C, εC_d and εγ. Repeat to convergence.

Annual means: the series are means over each year, so the exponentials are fitted as their yearly means,
∫_{k−1}^{k} e^{−t/τ} dt = τ(e^{1/τ} − 1) e^{−k/τ}; noise-free two-layer output is then recovered exactly.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from .ebm import TwoLayerParameters
from .errors import EmulatorInputError

__all__ = ["calibrate_two_layer", "deep_temperature", "CalibrationDiagnostics", "SLOW_YEARS", "FAST_YEARS"]

SLOW_YEARS = (30, 150)  # Geoffroy et al. (2013a): the slow mode dominates after ~30 years
FAST_YEARS = (1, 10)  # ... and the fast mode is read from the first decade


@dataclass(frozen=True)
class CalibrationDiagnostics:
    forcing_4x: float
    tau_fast: float
    tau_slow: float
    amp_fast: float
    amp_slow: float
    iterations: int
    converged: bool


def _mean_exp_factor(tau):
    """Yearly mean of e^(−t/τ) over [k−1, k] equals this factor times e^(−k/τ)."""
    return tau * np.expm1(1.0 / tau)


def _modes_from_series(tas, t_eq, slow_years, fast_years):
    k = np.arange(1, len(tas) + 1, dtype=float)
    deficit = 1.0 - tas / t_eq
    lo, hi = slow_years
    sel = (k >= lo) & (k <= hi) & (deficit > 0)
    if sel.sum() < 10:
        raise EmulatorInputError(f"abrupt series too short or saturated for the slow mode (years {lo}–{hi})")
    slope, intercept = np.polyfit(k[sel], np.log(deficit[sel]), 1)
    if slope >= 0:
        raise EmulatorInputError("the warming does not approach equilibrium in years "
                                 f"{lo}–{hi}; no slow mode can be fitted")
    tau_s = -1.0 / slope
    amp_s = np.exp(intercept) / _mean_exp_factor(tau_s)
    amp_f = 1.0 - amp_s
    if not 0.0 < amp_f < 1.0:
        raise EmulatorInputError(f"slow-mode amplitude {amp_s:.3f} outside (0, 1)")
    lo, hi = fast_years
    kf = k[(k >= lo) & (k <= hi)]
    fast_part = deficit[(k >= lo) & (k <= hi)] - amp_s * _mean_exp_factor(tau_s) * np.exp(-kf / tau_s)

    def misfit(log_tau):
        tau = np.exp(log_tau)
        return np.sum((fast_part - amp_f * _mean_exp_factor(tau) * np.exp(-kf / tau)) ** 2)

    res = minimize_scalar(misfit, bounds=(np.log(0.05), np.log(min(tau_s, 100.0))), method="bounded",
                          options={"xatol": 1e-10})
    return float(np.exp(res.x)), tau_s, amp_f, amp_s


def _capacities(lam, tau_f, tau_s, amp_f, amp_s):
    # Geoffroy et al. (2013a), inverting the mode expressions
    c = lam / (amp_f / tau_f + amp_s / tau_s)
    cd = lam * (tau_f * amp_f + tau_s * amp_s) - c
    gam = cd / (tau_f * amp_s + tau_s * amp_f)
    return c, cd, gam


def deep_temperature(tas, deep_heat_capacity, exchange):
    """Yearly means of T_d driven by the given upper-layer series (held constant within each year)."""
    tau = deep_heat_capacity / exchange
    decay = np.exp(-1.0 / tau)
    mean_factor = tau * (1.0 - decay)
    out = np.empty_like(tas)
    d = 0.0
    for i, t in enumerate(tas):
        out[i] = t + (d - t) * mean_factor
        d = t + (d - t) * decay
    return out


def calibrate_two_layer(tas, rtnt, efficacy: bool = False, *, slow_years=SLOW_YEARS, fast_years=FAST_YEARS,
                        fit_years=None, max_iter: int = 50, tol: float = 1e-8, return_diagnostics: bool = False):
    """Two-layer parameters from the annual-mean anomalies of an abrupt-forcing run.

    Parameters
    ----------
    tas : warming (K) for years 1, 2, … after the step
    rtnt : top-of-atmosphere imbalance N (W m-2), same years
    efficacy : fit the deep-ocean heat-uptake efficacy ε (Geoffroy et al. 2013b) instead of ε = 1
    fit_years : (first, last) years of the Gregory regressions, as the sensitivity table's fit; None: all years

    Returns
    -------
    (TwoLayerParameters, forcing_4x) — λ > 0 (Geoffroy convention), forcing of the step in W m-2;
    with `return_diagnostics` a third item, `CalibrationDiagnostics`.
    """
    tas = np.asarray(tas, dtype=float)
    rtnt = np.asarray(rtnt, dtype=float)
    if tas.shape != rtnt.shape or tas.ndim != 1:
        raise EmulatorInputError(f"tas and rtnt must be 1-D of the same length, got {tas.shape} and {rtnt.shape}")
    ok = np.isfinite(tas) & np.isfinite(rtnt)
    if not ok.all():
        raise EmulatorInputError("abrupt series has missing years")
    k = np.arange(1, len(tas) + 1)
    window = np.ones(len(tas), bool) if fit_years is None else (k >= fit_years[0]) & (k <= fit_years[1])
    if window.sum() < 10:
        raise EmulatorInputError(f"fewer than 10 abrupt years in the Gregory window {tuple(fit_years)}")
    # Gregory et al. (2004): N = F − λT, over the table's fit window
    slope, forcing = np.polyfit(tas[window], rtnt[window], 1)
    lam = -slope
    if lam <= 0 or forcing <= 0:
        raise EmulatorInputError(f"Gregory fit gives F = {forcing:.2f} W m-2, λ = {lam:.2f} W m-2 K-1; not a stable response")
    tau_f, tau_s, amp_f, amp_s = _modes_from_series(tas, forcing / lam, slow_years, fast_years)
    c, cd_eff, gam_eff = _capacities(lam, tau_f, tau_s, amp_f, amp_s)
    eps, iterations, converged = 1.0, 0, True
    if efficacy:
        converged = False
        for iterations in range(1, max_iter + 1):
            deep = deep_temperature(tas, cd_eff / eps, gam_eff / eps)
            uptake = (gam_eff / eps) * (tas - deep)
            # N = F − λT − (ε − 1) H, least squares in (F, λ, ε − 1)
            design = np.column_stack([np.ones_like(tas), -tas, -uptake])[window]
            (forcing_new, lam_new, eps_m1), *_ = np.linalg.lstsq(design, rtnt[window], rcond=None)
            eps_new = 1.0 + eps_m1
            if lam_new <= 0 or eps_new <= 0:
                raise EmulatorInputError(f"efficacy fit diverged (λ = {lam_new:.3f}, ε = {eps_new:.3f})")
            tau_f, tau_s, amp_f, amp_s = _modes_from_series(tas, forcing_new / lam_new, slow_years, fast_years)
            c, cd_eff, gam_eff = _capacities(lam_new, tau_f, tau_s, amp_f, amp_s)
            change = max(abs(eps_new - eps) / eps, abs(lam_new - lam) / lam, abs(forcing_new - forcing) / forcing)
            forcing, lam, eps = forcing_new, lam_new, eps_new
            if change < tol:
                converged = True
                break
    params = TwoLayerParameters(float(lam), float(c), float(cd_eff / eps), float(gam_eff / eps), float(eps))
    if return_diagnostics:
        return params, float(forcing), CalibrationDiagnostics(float(forcing), tau_f, tau_s, amp_f, amp_s,
                                                              iterations, converged)
    return params, float(forcing)

"""Tests of extractor/regressor_noise.py: the Gregory fit corrected for the noise in ΔT (errors in variables)."""
import math

import numpy as np
import pytest
import xarray as xr

from sensemble.contract.flags import ECS_LATE_UNBOUNDED
from sensemble.extractor.ecs_interval import gregory_ecs_interval
from sensemble.extractor.gregory import ControlVariability, gregory_fit
from sensemble.extractor.regressor_noise import (corrected_fit, correction_variance, demeaned_moment,
                                                  regressor_moments)
from sensemble.extractor.science import ecs_intervals
from sensemble.extractor.serial import AR1Noise
from sensemble.extractor.settings import ExtractionSettings

SD_T, SD_N, LAG1, CORRELATION = 0.1, 0.35, 0.5, -0.4  # annual global means: the benchmark's amplitudes
LATE = (21, 150)
DRIFT_YEARS = 150


def noise_pairs(rng, n_years, size=None):
    """(e_T, e_N): AR(1) with lag-1 LAG1 in both, innovations correlated CORRELATION, sd SD_T and SD_N."""
    shape = (n_years,) if size is None else (size, n_years)
    shocks = rng.multivariate_normal([0.0, 0.0], [[1.0, CORRELATION], [CORRELATION, 1.0]], size=shape)
    out = np.empty_like(shocks)
    out[..., 0, :] = shocks[..., 0, :]
    for k in range(1, n_years):
        out[..., k, :] = LAG1 * out[..., k - 1, :] + math.sqrt(1 - LAG1**2) * shocks[..., k, :]
    return SD_T * out[..., 0], SD_N * out[..., 1]


def drift_line_errors(rng, size, years):
    """The error of a linear drift fitted to DRIFT_YEARS control years, at ``years`` (1 = the branch), for T and N."""
    t_ctl, n_ctl = noise_pairs(rng, DRIFT_YEARS, size)
    segment = np.vander(np.arange(DRIFT_YEARS, dtype=float), 2, increasing=True)
    at = np.vander(np.arange(years[0], years[1] + 1, dtype=float) - 1, 2, increasing=True)
    lines = [at @ np.linalg.lstsq(segment, values.T, rcond=None)[0] for values in (t_ctl, n_ctl)]
    return lines[0].T, lines[1].T


def long_control(seed=0, n_years=20000):
    """The control's variability from a long stationary control (its residuals hold no drift)."""
    tas, rtnt = noise_pairs(np.random.default_rng(seed), n_years)
    residuals = xr.Dataset({"tas": ("year", tas), "rtnt": ("year", rtnt)},
                           coords={"year": np.arange(1, n_years + 1)}, attrs={"drift_order": 1})
    return ControlVariability(residuals, drift_order=1, drift_years=DRIFT_YEARS)


def test_expected_sum_of_squares_matches_monte_carlo_with_the_drift_line_error():
    # E[Σ(e − ē)²] of a drift-corrected anomaly's noise: AR(1) variability plus the error of a line fitted to
    # the control (common practice, no source: checked against the mean of 4000 realisations, sd of the mean
    # ≈ 0.4 %). The drift line's part is small over the late segment (1.5 % at lag-1 0.5).
    rng = np.random.default_rng(1)
    run_t, _ = noise_pairs(rng, 150, 4000)
    line_t, _ = drift_line_errors(rng, 4000, LATE)
    anomaly = run_t[:, LATE[0] - 1:] - line_t
    observed = np.mean(np.sum((anomaly - anomaly.mean(axis=1, keepdims=True)) ** 2, axis=1))
    since_branch = np.arange(LATE[0], LATE[1] + 1) - 1
    predicted = demeaned_moment(since_branch, AR1Noise(SD_T, LAG1), DRIFT_YEARS, 1)
    assert predicted == pytest.approx(observed, rel=0.012)
    # the AR(1) part alone: σ²(n − Σ_ij ρ^|i−j| / n) with
    # Σ_ij ρ^|i−j| = n(1+ρ)/(1−ρ) − 2ρ(1−ρⁿ)/(1−ρ)² (from memory)
    n = since_branch.size
    internal = SD_T**2 * (n - (n * (1 + LAG1) / (1 - LAG1) - 2 * LAG1 * (1 - LAG1**n) / (1 - LAG1) ** 2) / n)
    drift = predicted - internal
    assert 0.005 * predicted < drift < 0.05 * predicted


def test_moments_from_the_control_recover_the_noise_of_t_and_n():
    # With the same lag-1 in both, C_TN = (ρ_TN σ_N / σ_T) C_TT lag by lag, so m_TN / m_TT = −0.4·0.35/0.1 = −1.4
    # exactly (algebra of the AR(1) pair; polarization identity, common practice, no source).
    control = long_control()
    m_tt, m_tn = regressor_moments(control, LATE)
    since_branch = np.arange(LATE[0], LATE[1] + 1) - 1
    assert m_tt == pytest.approx(demeaned_moment(since_branch, AR1Noise(SD_T, LAG1), DRIFT_YEARS, 1), rel=0.05)
    assert m_tn / m_tt == pytest.approx(CORRELATION * SD_N / SD_T, rel=0.05)


def test_corrected_slope_removes_the_pull_of_noise_in_delta_t():
    # Errors in variables with correlated errors (Fuller 1987, Measurement Error Models, §1.2; from memory): the OLS
    # slope over a window where ΔT spans 1.2 K is pulled by (m_TN − λ m_TT)/S_xx ≈ −0.07 W m-2 K-1 here; the
    # moment-corrected slope (S_xy − m_TN)/(S_xx − m_TT) is not. 2000 realisations: sd of a mean slope ≈ 0.005.
    rng = np.random.default_rng(2)
    control = long_control(3, 3000)
    erf, feedback, size = 5.0, -0.6, 2000
    x = np.concatenate([np.linspace(0.5, 3.5, LATE[0] - 1), np.linspace(3.5, 4.7, LATE[1] - LATE[0] + 1)])
    run_t, run_n = noise_pairs(rng, 150, size)
    line_t, line_n = drift_line_errors(rng, size, (1, 150))
    dT = x + run_t - line_t
    dN = erf + feedback * x + run_n - line_n
    late = slice(LATE[0] - 1, LATE[1])
    dx = dT[:, late] - dT[:, late].mean(axis=1, keepdims=True)
    dy = dN[:, late] - dN[:, late].mean(axis=1, keepdims=True)
    s_xx, s_xy = np.sum(dx * dx, axis=1), np.sum(dx * dy, axis=1)
    m_tt, m_tn = regressor_moments(control, LATE)
    ols, corrected = s_xy / s_xx, (s_xy - m_tn) / (s_xx - m_tt)
    assert np.mean(ols) - feedback < -0.04
    assert np.mean(corrected) - feedback == pytest.approx(0.0, abs=0.015)
    # corrected_fit is that slope, and its standard error (the OLS one carried through the correction, first-order
    # delta method) is the spread over realisations
    ses = []
    for i in range(20):
        fit = corrected_fit(gregory_fit(dT[i], dN[i], LATE, control=control), dT[i], dN[i], LATE, control, 2.0)
        assert fit.feedback == pytest.approx(corrected[i], rel=1e-9)
        ses.append(fit.feedback_se)
    assert np.sqrt(np.mean(np.square(ses))) == pytest.approx(np.std(corrected), rel=0.1)


def test_table_interval_of_ecs_late_is_made_around_the_corrected_fit():
    # wiring: with the control's variability the ecs_late interval is Fieller's around the corrected late fit
    # (not the OLS one), and ecs_eff's is unchanged (Fieller around OLS)
    rng = np.random.default_rng(4)
    control = long_control(5)
    settings = ExtractionSettings()
    t = np.arange(1, 151)
    truth_t = 5.0 - 2.5 * np.exp(-t / 4.0) - 2.0 * np.exp(-t / 150.0)
    run_t, run_n = noise_pairs(rng, 150)
    dT, dN = truth_t + run_t, 7.0 - 1.1 * truth_t + run_n
    fit = gregory_fit(dT, dN, settings.fit_years, control=control)
    late = gregory_fit(dT, dN, settings.late_years, control=control)
    values = ecs_intervals(fit, late, dT, dN, settings, [], control)
    expected = gregory_ecs_interval(corrected_fit(late, dT, dN, settings.late_years, control, 2.0))
    assert (values["ecs_late_q05"], values["ecs_late_q95"]) == pytest.approx(expected, rel=1e-12)
    assert (values["ecs_late_q05"], values["ecs_late_q95"]) != pytest.approx(gregory_ecs_interval(late), rel=1e-3)
    assert (values["ecs_eff_q05"], values["ecs_eff_q95"]) == pytest.approx(gregory_ecs_interval(fit), rel=1e-12)


def test_delta_t_flat_within_its_noise_gives_no_late_interval_and_a_flag():
    # ΔT spanning less than its own noise over the late segment holds no slope to correct: no interval, flagged
    # (common practice, no source: an errors-in-variables slope needs S_xx > m_TT)
    rng = np.random.default_rng(6)
    control = long_control(7)
    settings = ExtractionSettings()
    t = np.arange(1, 151)
    dT = np.where(t <= 20, t / 5.0, 4.0) + 0.002 * rng.normal(size=150)
    dN = 7.0 - 1.5 * dT + SD_N * rng.normal(size=150)
    fit = gregory_fit(dT, dN, settings.fit_years, control=control)
    late = gregory_fit(dT, dN, settings.late_years, control=control)
    flags = []
    values = ecs_intervals(fit, late, dT, dN, settings, flags, control)
    assert values["ecs_late_q05"] is None and values["ecs_late_q95"] is None
    assert ECS_LATE_UNBOUNDED in flags
    assert values["ecs_eff_q05"] is not None


def test_correction_variance_is_the_spread_of_the_moments_over_controls():
    # The error of m_Tu = m_TN − λ m_TT estimated from a 250-year control: its predicted variance (Bartlett 1946,
    # from memory: var of an AR(1) sample variance 2σ⁴(1 + ρ²)/((1 − ρ²) n)) against the spread over 300 independent
    # controls (sd of an sd over 300 draws ≈ 4 %), each with its own linear drift removed
    rng = np.random.default_rng(8)
    slope, estimates, predicted = -0.6, [], []
    for _ in range(300):
        tas, rtnt = noise_pairs(rng, 250)
        years = np.arange(250)
        detrended = {name: ("year", v - np.polyval(np.polyfit(years, v, 1), years))
                     for name, v in (("tas", tas), ("rtnt", rtnt))}
        residuals = xr.Dataset(detrended, coords={"year": years + 1}, attrs={"drift_order": 1})
        control = ControlVariability(residuals, drift_order=1, drift_years=DRIFT_YEARS)
        m_tt, m_tn = regressor_moments(control, LATE)
        estimates.append(m_tn - slope * m_tt)
        predicted.append(correction_variance(control, LATE, slope))
    assert np.sqrt(np.mean(predicted)) == pytest.approx(np.std(estimates), rel=0.15)

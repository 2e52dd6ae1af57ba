"""Tests of extractor/gregory.py: Gregory regressions and their uncertainty."""
import warnings

import numpy as np
import pytest
import scipy.stats
import statsmodels.api as sm
import xarray as xr

from sensemble.extractor.budget import toa_budget
from sensemble.extractor.ecs_interval import bootstrap_ecs
from sensemble.extractor.gregory import (
    FitWindowError,
    component_feedbacks,
    gregory_fit,
    quadratic_fit,
    segment_fits,
)
from sensemble.extractor.orthogonal import noise_scale, odr_fit

YEARS = np.arange(1, 151)


def two_layer_step(t, forcing, lam, gamma, c, c_d):
    """Two-layer model (Held et al. 2010, ε = 1) step response T(t), T_d(t).

    Closed form from Geoffroy et al. 2013a, J. Climate, eqs. for the fast/slow modes (from memory;
    the test below checks it satisfies the model's equations): λ > 0 here.
    """
    b = (lam + gamma) / c + gamma / c_d
    b_star = (lam + gamma) / c - gamma / c_d
    delta = b * b - 4 * lam * gamma / (c * c_d)
    tau_f = c * c_d / (2 * lam * gamma) * (b - np.sqrt(delta))
    tau_s = c * c_d / (2 * lam * gamma) * (b + np.sqrt(delta))
    phi_f = c / (2 * gamma) * (b_star - np.sqrt(delta))
    phi_s = c / (2 * gamma) * (b_star + np.sqrt(delta))
    a_f = phi_s * tau_f * lam / (c * (phi_s - phi_f))
    a_s = -phi_f * tau_s * lam / (c * (phi_s - phi_f))
    t_eq = forcing / lam
    temp = t_eq * (1 - a_f * np.exp(-t / tau_f) - a_s * np.exp(-t / tau_s))
    temp_deep = t_eq * (1 - phi_f * a_f * np.exp(-t / tau_f) - phi_s * a_s * np.exp(-t / tau_s))
    dtemp = t_eq * (a_f / tau_f * np.exp(-t / tau_f) + a_s / tau_s * np.exp(-t / tau_s))
    dtemp_deep = t_eq * (phi_f * a_f / tau_f * np.exp(-t / tau_f) + phi_s * a_s / tau_s * np.exp(-t / tau_s))
    return temp, temp_deep, dtemp, dtemp_deep


# Parameters of the order of the multi-model means in Geoffroy et al. 2013a, Table 3 (from memory)
F4X, LAM, GAMMA, C, C_D = 7.3, 1.13, 0.74, 7.3, 106.0


def _synthetic(noise_sd=0.0, seed=0, years=YEARS):
    t = years - 0.5
    temp, *_ = two_layer_step(t, F4X, LAM, GAMMA, C, C_D)
    rng = np.random.default_rng(seed)
    # with ε = 1 the TOA imbalance is N = F - λT at every instant (Held et al. 2010)
    dN = F4X - LAM * temp + rng.normal(0.0, noise_sd, t.size)
    dT = temp + rng.normal(0.0, noise_sd / 5, t.size)
    coords = {"year": years}
    return (
        xr.DataArray(dT, dims="year", coords=coords, attrs={"units": "K"}),
        xr.DataArray(dN, dims="year", coords=coords, attrs={"units": "W m-2"}),
    )


def test_closed_form_two_layer_solves_the_model():
    # checks the from-memory closed form: C dT/dt = F - λT - γ(T - T_d), C_d dT_d/dt = γ(T - T_d), T(0) = 0
    t = np.linspace(0.0, 300.0, 301)
    temp, temp_deep, dtemp, dtemp_deep = two_layer_step(t, F4X, LAM, GAMMA, C, C_D)
    np.testing.assert_allclose(C * dtemp, F4X - LAM * temp - GAMMA * (temp - temp_deep), atol=1e-10)
    np.testing.assert_allclose(C_D * dtemp_deep, GAMMA * (temp - temp_deep), atol=1e-10)
    assert abs(temp[0]) < 1e-12 and abs(temp_deep[0]) < 1e-12


def test_noise_free_two_layer_recovers_forcing_and_feedback():
    # Gregory et al. 2004: ΔN = F + λΔT; for the two-layer model with ε = 1 (Held et al. 2010)
    # the line is exact, so the intercept is F and the slope is -λ (Geoffroy's λ > 0).
    dT, dN = _synthetic()
    fit = gregory_fit(dT, dN, (1, 150), forcing_ratio=2.0)
    assert fit.erf == pytest.approx(F4X, abs=1e-6)
    assert fit.feedback == pytest.approx(-LAM, abs=1e-6)
    assert fit.ecs_eff == pytest.approx(F4X / (2 * LAM), abs=1e-6)
    assert fit.r2 == pytest.approx(1.0, abs=1e-9)
    assert fit.n_years == 150
    assert fit.erf_se < 1e-6 and fit.feedback_se < 1e-6
    assert fit.erf_se_ols < 1e-6 and fit.feedback_se_ols < 1e-6


def test_ols_matches_scipy_linregress_and_statsmodels():
    # reference libraries: scipy.stats.linregress and statsmodels OLS (coefficients, standard errors, r²)
    dT, dN = _synthetic(noise_sd=0.6, seed=3)
    fit = gregory_fit(dT, dN, (11, 140))
    x, y = dT.sel(year=slice(11, 140)).values, dN.sel(year=slice(11, 140)).values
    ref = scipy.stats.linregress(x, y)
    assert fit.feedback == pytest.approx(ref.slope, abs=1e-10)
    assert fit.erf == pytest.approx(ref.intercept, abs=1e-10)
    assert fit.feedback_se_ols == pytest.approx(ref.stderr, abs=1e-10)
    assert fit.erf_se_ols == pytest.approx(ref.intercept_stderr, abs=1e-10)
    assert fit.r2 == pytest.approx(ref.rvalue**2, abs=1e-10)
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    np.testing.assert_allclose([fit.erf, fit.feedback], ols.params, rtol=0, atol=1e-10)
    np.testing.assert_allclose([fit.erf_se_ols, fit.feedback_se_ols], ols.bse, rtol=0, atol=1e-10)
    assert fit.r2 == pytest.approx(ols.rsquared, abs=1e-10)
    assert fit.n_years == 130
    assert fit.ecs_eff == pytest.approx(-fit.erf / (2 * fit.feedback), rel=1e-12)


def test_plain_arrays_count_from_year_one():
    dT, dN = _synthetic(noise_sd=0.6, seed=4)
    assert gregory_fit(dT.values, dN.values, (1, 100)) == gregory_fit(dT, dN, (1, 100))


def test_window_past_the_end_names_needed_and_available_length():
    dT, dN = _synthetic(years=np.arange(1, 141))
    with pytest.raises(FitWindowError, match=r"1-150 \(150 years\).*1-140, 140 years"):
        gregory_fit(dT, dN, (1, 150))


def test_missing_values_in_window_are_an_error():
    dT, dN = _synthetic()
    dN[10] = np.nan
    with pytest.raises(FitWindowError, match="missing"):
        gregory_fit(dT, dN)


def test_odr_matches_scipy_odr_called_directly():
    # reference library: scipy.odr with the same error scales
    dT, dN = _synthetic(noise_sd=0.6, seed=5)
    fit = odr_fit(dT, dN, (1, 150), tas_noise=0.12, rtnt_noise=0.6)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        from scipy import odr
    ref = odr.ODR(
        odr.RealData(dT.values, dN.values, sx=0.12, sy=0.6),
        odr.Model(lambda b, x: b[0] + b[1] * x),
        beta0=[5.0, -0.5],
        sstol=1e-14,
        partol=1e-14,
    ).run()
    np.testing.assert_allclose([fit.erf, fit.feedback], ref.beta, rtol=1e-7)
    np.testing.assert_allclose([fit.erf_se, fit.feedback_se], ref.sd_beta, rtol=1e-6)
    # and the closed-form Deming slope with error-variance ratio δ = σ_N²/σ_T² (Deming 1943; from memory)
    x, y = dT.values - dT.values.mean(), dN.values - dN.values.mean()
    sxx, syy, sxy, ratio = x @ x, y @ y, x @ y, (0.6 / 0.12) ** 2
    slope = (syy - ratio * sxx + np.sqrt((syy - ratio * sxx) ** 2 + 4 * ratio * sxy**2)) / (2 * sxy)
    assert fit.feedback == pytest.approx(slope, rel=1e-7)
    assert fit.erf == pytest.approx(dN.values.mean() - slope * dT.values.mean(), rel=1e-7)
    assert fit.ecs_eff == pytest.approx(-fit.erf / (2 * fit.feedback), rel=1e-12)


def test_odr_fits_in_threads_equal_serial_fits_and_leave_the_warning_filters_alone():
    # common practice, no source: fits run in a batch's threads must give the serial numbers, and the one-time
    # import of scipy.odr (which silences its DeprecationWarning) must not leave the process's filters changed
    from concurrent.futures import ThreadPoolExecutor

    data = [_synthetic(noise_sd=0.6, seed=seed) for seed in range(8)]
    filters = list(warnings.filters)
    with ThreadPoolExecutor(4) as pool:
        threaded = list(pool.map(lambda d: odr_fit(d[0], d[1], (1, 150), tas_noise=0.12, rtnt_noise=0.6), data))
    assert list(warnings.filters) == filters
    serial = [odr_fit(dT, dN, (1, 150), tas_noise=0.12, rtnt_noise=0.6) for dT, dN in data]
    assert threaded == serial


def test_odr_corrects_regression_dilution():
    # Errors in ΔT bias the OLS slope towards zero by var(T)/(var(T)+σ²); orthogonal regression with
    # the right error ratio does not (Deming regression; Fuller 1987, Measurement Error Models, from memory).
    rng = np.random.default_rng(11)
    n = 3000
    true_t = rng.uniform(1.0, 7.0, n)
    dT = true_t + rng.normal(0.0, 1.0, n)
    dN = 7.0 - 1.0 * true_t + rng.normal(0.0, 0.5, n)
    ols = gregory_fit(dT, dN, (1, n))
    odr_result = odr_fit(dT, dN, (1, n), tas_noise=1.0, rtnt_noise=0.5)
    assert ols.feedback == pytest.approx(-3.0 / 4.0, abs=0.05)  # var(T) = 3, σ² = 1
    assert odr_result.feedback == pytest.approx(-1.0, abs=0.05)


def test_noise_scale_of_white_noise_around_a_trend():
    # var(Δx) = 2σ² for independent noise (common practice, no source); MAD × 1.4826 estimates σ for
    # normal data (handbook value), and a few large early steps hardly move it
    rng = np.random.default_rng(2)
    x = np.linspace(0, 5, 20000) + rng.normal(0, 0.3, 20000)
    assert noise_scale(x) == pytest.approx(0.3, rel=0.03)
    x[:5] += np.array([0.0, 2.0, 3.0, 3.5, 3.8])
    assert noise_scale(x) == pytest.approx(0.3, rel=0.03)


def test_bootstrap_is_reproducible_and_brackets_the_estimate():
    dT, dN = _synthetic(noise_sd=0.6, seed=6)
    interval = bootstrap_ecs(dT, dN, (1, 150), block=10, n_samples=300, seed=1)
    assert interval == bootstrap_ecs(dT, dN, (1, 150), block=10, n_samples=300, seed=1)
    assert interval != bootstrap_ecs(dT, dN, (1, 150), block=10, n_samples=300, seed=2)
    estimate = gregory_fit(dT, dN).ecs_eff
    assert interval[0] < estimate < interval[1]


def _ar1(n, phi, sd, rng):
    # stationary AR(1) with marginal standard deviation sd
    shocks = rng.normal(0.0, sd * np.sqrt(1 - phi**2), n)
    out = np.empty(n)
    out[0] = rng.normal(0.0, sd)
    for i in range(1, n):
        out[i] = phi * out[i - 1] + shocks[i]
    return out


def test_bootstrap_interval_covers_true_ecs_about_ninety_percent_of_the_time():
    # Moving-block bootstrap (Künsch 1989, from memory) of a regression with AR(1) errors: the nominal
    # 5–95 % interval should hold the true value ~90 % of the time; 200 cases → binomial sd ≈ 0.02,
    # and block bootstraps are known to under-cover a little (common practice, no source).
    temp, *_ = two_layer_step(YEARS - 0.5, F4X, LAM, GAMMA, C, C_D)
    ecs_true = F4X / (2 * LAM)
    rng = np.random.default_rng(2024)
    cases = 200
    hits = 0
    for case in range(cases):
        dN = F4X - LAM * temp + _ar1(temp.size, 0.5, 0.5, rng)
        low, high = bootstrap_ecs(temp, dN, (1, 150), block=10, n_samples=300, seed=case)
        hits += low <= ecs_true <= high
    assert 0.8 <= hits / cases <= 0.97


def test_bootstrap_block_longer_than_window_is_an_error():
    dT, dN = _synthetic(noise_sd=0.6)
    with pytest.raises(FitWindowError, match="block"):
        bootstrap_ecs(dT, dN, (1, 20), block=30)


def test_segment_fits_recover_piecewise_feedbacks():
    # Early/late Gregory slopes (e.g. Andrews et al. 2015, J. Climate, years 1–20 / 21–150; from memory):
    # data lying exactly on two lines give back each line.
    dT, _ = _synthetic()
    early_line = 7.0 - 1.6 * dT
    late_line = 6.2 - 0.9 * dT
    dN = xr.where(dT["year"] <= 20, early_line, late_line)
    seg = segment_fits(dT, dN, early=(1, 20), late=(21, 150), forcing_ratio=2.0)
    assert seg.feedback_early == pytest.approx(-1.6, abs=1e-9)
    assert seg.feedback_late == pytest.approx(-0.9, abs=1e-9)
    assert seg.feedback_change == pytest.approx(0.7, abs=1e-9)
    assert seg.erf_late == pytest.approx(6.2, abs=1e-9)
    assert seg.ecs_late == pytest.approx(6.2 / (2 * 0.9), abs=1e-9)


def test_quadratic_fit_recovers_curvature_of_exact_quadratic():
    # ΔN = F + λΔT + aΔT² exactly → least squares returns (F, λ, a) (common practice, no source)
    dT, _ = _synthetic()
    dN = 7.2 - 1.3 * dT + 0.04 * dT**2
    quad = quadratic_fit(dT, dN, (1, 150))
    assert quad.erf == pytest.approx(7.2, abs=1e-8)
    assert quad.feedback == pytest.approx(-1.3, abs=1e-8)
    assert quad.curvature == pytest.approx(0.04, abs=1e-9)
    assert quad.curvature_se < 1e-8 and quad.curvature_se_ols < 1e-8


def test_quadratic_fit_matches_statsmodels_with_noise():
    # reference library: statsmodels OLS on [1, ΔT, ΔT²]
    dT, dN = _synthetic(noise_sd=0.6, seed=8)
    quad = quadratic_fit(dT, dN)
    x = dT.values
    ref = sm.OLS(dN.values, np.column_stack([np.ones_like(x), x, x * x])).fit()
    np.testing.assert_allclose([quad.erf, quad.feedback, quad.curvature], ref.params, atol=1e-10)
    assert quad.curvature_se_ols == pytest.approx(ref.bse[2], abs=1e-10)


def _anomalies_with_clear_sky(seed=9):
    dT, dN = _synthetic(noise_sd=0.6, seed=seed)
    rng = np.random.default_rng(seed)
    n = dT.size
    rlutcs = -240.0 - 1.9 * dT.values + rng.normal(0, 0.4, n)
    rsutcs = 50.0 - 0.7 * dT.values + rng.normal(0, 0.3, n)
    rsdt = 340.0 + rng.normal(0, 0.05, n)
    rlut = 239.0 - 1.2 * dT.values + rng.normal(0, 0.4, n)
    rsut = rsdt - rlut - dN.values
    ds = xr.Dataset(
        {
            "tas": dT,
            **{
                name: ("year", values)
                for name, values in dict(rsdt=rsdt, rsut=rsut, rlut=rlut, rsutcs=rsutcs, rlutcs=-rlutcs).items()
            },
        },
        coords={"year": dT["year"]},
    )
    return toa_budget(ds)


def test_component_feedbacks_sum_to_feedback():
    # N = LW_cs + SW_cs + CRE and OLS is linear in the regressand (common practice, no source)
    ds = _anomalies_with_clear_sky()
    parts = component_feedbacks(ds, (1, 150))
    total = gregory_fit(ds["tas"], ds["rtnt"], (1, 150)).feedback
    assert parts.feedback_lw_cs + parts.feedback_sw_cs + parts.feedback_cre == pytest.approx(total, abs=1e-10)
    # each part equals a direct reference regression
    assert parts.feedback_cre == pytest.approx(scipy.stats.linregress(ds["tas"], ds["cre"]).slope, abs=1e-10)


def test_component_feedbacks_absent_without_clear_sky():
    ds = _anomalies_with_clear_sky().drop_vars(["lw_cs", "sw_cs", "cre"])
    assert component_feedbacks(ds) is None

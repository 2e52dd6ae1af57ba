"""Tests of extractor/serial.py: standard errors of fits under autocorrelated internal variability."""
import numpy as np
import pytest
import statsmodels.api as sm
import xarray as xr

from sensemble.extractor.gregory import ControlVariability, gregory_fit, segment_fits
from sensemble.extractor.serial import (AR1Noise, contrast_dofs, cross_covariance, drift_covariance,
                                       drift_cross_covariance, estimate_ar1, ols_sandwich, summed_dof, variance_dof)


def ar1(rng, n, lag1, sd=1.0, size=None):
    """Stationary AR(1) series with marginal standard deviation ``sd`` (``size`` of them at once)."""
    shape = (n,) if size is None else (size, n)
    shocks = rng.normal(0.0, sd * np.sqrt(1 - lag1**2), shape)
    out = np.empty(shape)
    out[..., 0] = rng.normal(0.0, sd, shape[:-1])
    for k in range(1, n):
        out[..., k] = lag1 * out[..., k - 1] + shocks[..., k]
    return out


def warming(n):
    """A smooth abrupt-run-like ΔT (two exponentials), years 1..n."""
    t = np.arange(1, n + 1)
    return 5.0 - 2.5 * np.exp(-t / 4.0) - 2.0 * np.exp(-t / 150.0)


def test_sandwich_matches_the_spread_of_slopes_over_many_realisations():
    # The covariance of OLS coefficients under AR(1) errors is (XᵀX)⁻¹XᵀΣX(XᵀX)⁻¹ exactly (common practice,
    # no source); checked against the Monte Carlo spread of 4000 realisations (sd of an sd: ~1.1 %).
    rng = np.random.default_rng(0)
    x = warming(150)
    design = np.column_stack([np.ones_like(x), x])
    errors = ar1(rng, 150, 0.8, 0.35, size=4000)
    coefs = np.linalg.lstsq(design, errors.T, rcond=None)[0]
    predicted = np.sqrt(np.diag(ols_sandwich(design, AR1Noise(0.35, 0.8))))
    np.testing.assert_allclose(coefs.std(axis=1), predicted, rtol=0.05)
    # and it is far from the OLS value, which assumes independent years: Bretherton et al. (1999, from memory)
    # give the variance ratio (1 + ρ)/(1 − ρ) = 9 for a slowly varying regressor
    ols = np.sqrt(np.diag(0.35**2 * np.linalg.inv(design.T @ design)))
    assert 2.0 < predicted[1] / ols[1] < 3.2


def test_estimate_of_lag1_and_sd_is_nearly_unbiased_where_the_plain_one_is_not():
    # Lag-1 autocorrelation of residuals is biased low by about (1 + 3ρ)/n and more after a trend fit
    # (Kendall 1954, from memory); the design-aware estimate must remove most of it.
    rng = np.random.default_rng(1)
    x = warming(150)
    design = np.column_stack([np.ones_like(x), x])
    estimates, plain, variances = [], [], []
    for series in ar1(rng, 150, 0.8, 1.0, size=300):
        resid = series - design @ np.linalg.lstsq(design, series, rcond=None)[0]
        noise = estimate_ar1(resid, design)
        estimates.append(noise.lag1)
        variances.append(noise.sd**2)
        plain.append(resid[1:] @ resid[:-1] / (resid @ resid))
    assert np.mean(plain) < 0.77  # the bias the correction is for
    assert np.mean(estimates) == pytest.approx(0.8, abs=0.02)
    assert np.mean(variances) == pytest.approx(1.0, abs=0.05)


def test_white_noise_gives_ols_standard_errors():
    # ρ = 0: the sandwich is σ²(XᵀX)⁻¹, the textbook OLS covariance (statsmodels OLS as reference)
    rng = np.random.default_rng(2)
    x = warming(120)
    y = 7.0 - 1.1 * x + rng.normal(0, 0.3, x.size)
    design = sm.add_constant(x)
    ref = sm.OLS(y, design).fit()
    cov = ols_sandwich(design, AR1Noise(float(np.sqrt(ref.scale)), 0.0))
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), ref.bse, rtol=1e-12)


def test_gregory_standard_errors_agree_with_statsmodels_hac_on_a_long_run():
    # Reference library: statsmodels OLS with cov_type="HAC" (Newey–West, Bartlett kernel). On a long series
    # both estimate the same long-run variance, so with a long bandwidth they must agree; the OLS value, which
    # assumes independent years, must not (ratio √((1+ρ)/(1−ρ)) = 2 at ρ = 0.6; Bretherton et al. 1999).
    rng = np.random.default_rng(3)
    n = 4000
    x = np.linspace(1.0, 6.0, n) + ar1(rng, n, 0.6, 0.1)
    y = 7.0 - 1.1 * x + ar1(rng, n, 0.6, 0.35)
    fit = gregory_fit(x, y, (1, n))
    hac = sm.OLS(y, sm.add_constant(x)).fit(cov_type="HAC", cov_kwds={"maxlags": 40})
    assert fit.feedback_se == pytest.approx(hac.bse[1], rel=0.1)
    assert fit.erf_se == pytest.approx(hac.bse[0], rel=0.1)
    assert fit.feedback_se / fit.feedback_se_ols == pytest.approx(2.0, rel=0.15)
    assert fit.lag1 == pytest.approx(0.6, abs=0.05)


def test_drift_covariance_matches_the_spread_from_noisy_drift_lines():
    # A drift line fitted to m noisy control years and subtracted from the run moves the Gregory coefficients
    # by (XᵀX)⁻¹Xᵀ e_d(t), linear in the control's noise (common practice, no source): Monte Carlo check.
    rng = np.random.default_rng(4)
    m, n = 150, 150
    x = warming(n)
    design = np.column_stack([np.ones_like(x), x])
    segment = np.column_stack([np.ones(m), np.arange(m)])
    noise = ar1(rng, m, 0.5, 0.3, size=4000)
    lines = np.linalg.lstsq(segment, noise.T, rcond=None)[0]  # the fitted drift (truth: none)
    at = np.column_stack([np.ones(n), np.arange(n)])
    moved = np.linalg.lstsq(design, -(at @ lines), rcond=None)[0]
    predicted = np.sqrt(np.diag(drift_covariance(design, np.arange(n), m, 1, AR1Noise(0.3, 0.5))))
    np.testing.assert_allclose(moved.std(axis=1), predicted, rtol=0.05)


def test_control_variability_gives_the_error_process_of_the_regression():
    # The error of a Gregory fit is ΔN' − λΔT'; its AR(1) parameters come from the control's residuals of that
    # combination (internal variability has the same statistics in both runs — the premise of drift removal)
    rng = np.random.default_rng(5)
    years = np.arange(1, 1001)
    tas = ar1(rng, 1000, 0.7, 0.1)
    rtnt = -1.5 * tas + ar1(rng, 1000, 0.7, 0.3)
    residuals = xr.Dataset({"tas": ("year", tas), "rtnt": ("year", rtnt)}, coords={"year": years},
                           attrs={"drift_order": 1})
    variability = ControlVariability(residuals, drift_order=1, drift_years=150)
    noise = variability.noise("rtnt", -1.5)
    assert noise.sd == pytest.approx(0.3, rel=0.1)
    assert noise.lag1 == pytest.approx(0.7, abs=0.05)


def test_cross_covariance_of_two_segments_matches_the_spread_of_their_slopes():
    # Early (years 1–20) and late (21–150) slopes of one run share neighbouring years' errors and one drift
    # line: Cov(β_a, β_b) = A_a Σ_ab A_bᵀ plus the drift line's share (common practice, no source); Monte Carlo
    # check of the variance of the change late − early over 4000 realisations (sd of an sd ~1.1 %).
    rng = np.random.default_rng(6)
    n, m, lag1, sd = 150, 150, 0.8, 0.35
    x = warming(n)
    years = np.arange(1, n + 1)
    e, late = slice(0, 20), slice(20, n)
    designs = [np.column_stack([np.ones(s.stop - s.start), x[s]]) for s in (e, late)]
    errors = ar1(rng, n, lag1, sd, size=4000)
    segment = np.column_stack([np.ones(m), np.arange(m)])
    drift = np.column_stack([np.ones(n), years - 1]) @ np.linalg.lstsq(segment, ar1(rng, m, lag1, sd, size=4000).T,
                                                                      rcond=None)[0]
    total = errors.T - drift
    slopes = [np.linalg.lstsq(d, total[s], rcond=None)[0][1] for d, s in zip(designs, (e, late))]
    noise = AR1Noise(sd, lag1)
    var = [ols_sandwich(d, noise)[1, 1] + drift_covariance(d, years[s] - 1, m, 1, noise)[1, 1]
           for d, s in zip(designs, (e, late))]
    cross = (cross_covariance(designs[0], years[e], designs[1], years[late], sd**2, lag1)
             + drift_cross_covariance(designs[0], years[e] - 1, designs[1], years[late] - 1, m, 1, sd**2, lag1))
    predicted = np.sqrt(var[0] + var[1] - 2 * cross[1, 1])
    assert np.std(slopes[1] - slopes[0]) == pytest.approx(predicted, rel=0.05)
    # the same segment twice gives the plain sandwich back (an identity of the formula)
    np.testing.assert_allclose(cross_covariance(designs[1], years[late], designs[1], years[late], sd**2, lag1),
                               ols_sandwich(designs[1], noise), rtol=1e-12)


def test_feedback_change_se_of_a_run_with_its_control():
    # segment_fits' standard error of the change carries both segments' errors: it lies between the larger of the
    # two and their sum, and is near the root of the sum of squares when the segments barely share errors
    # (common practice, no source)
    rng = np.random.default_rng(7)
    x = warming(150)
    years = np.arange(1, 151)
    tas, rtnt = ar1(rng, 400, 0.5, 0.1), ar1(rng, 400, 0.5, 0.3)
    residuals = xr.Dataset({"tas": ("year", tas), "rtnt": ("year", rtnt)}, coords={"year": np.arange(1, 401)},
                           attrs={"drift_order": 1})
    variability = ControlVariability(residuals, drift_order=1, drift_years=150)
    dT = xr.DataArray(x + ar1(rng, 150, 0.5, 0.1), dims="year", coords={"year": years})
    dN = 7.0 - 1.2 * dT + ar1(rng, 150, 0.5, 0.3)
    seg = segment_fits(dT, dN, control=variability)
    early, late = seg.early.feedback_se, seg.late.feedback_se
    assert max(early, late) < seg.feedback_change_se < early + late
    assert seg.feedback_change_se == pytest.approx(np.hypot(early, late), rel=0.1)


@pytest.mark.parametrize("lag1", [0.5, 0.8])
def test_variance_dof_matches_the_spread_of_estimated_slope_variances(lag1):
    # Satterthwaite's ν = 2 / Var(log V̂) (Satterthwaite 1946, from memory) with Bartlett's (1946) variances of an
    # AR(1) sample variance and lag-1 estimate: checked against the Monte Carlo spread of log V̂ over 1500
    # 250-year controls, each giving σ̂ and ρ̂ as the extractor does (sd of a variance over 1500 draws: ~3.7 %)
    rng = np.random.default_rng(11)
    x = warming(150)
    design = np.column_stack([np.ones_like(x), x])
    drift = np.vander(np.arange(250, dtype=float), 2, increasing=True)
    controls = ar1(rng, 250, lag1, 0.35, size=1500)
    residuals = controls - (drift @ np.linalg.lstsq(drift, controls.T, rcond=None)[0]).T
    variances = np.array([ols_sandwich(design, estimate_ar1(e, drift))[1, 1] for e in residuals])
    [nu] = contrast_dofs(lambda r: ols_sandwich(design, AR1Noise(0.35, r)), lag1, 250, [[0.0, 1.0]])
    assert np.var(np.log(variances)) == pytest.approx(2.0 / nu, rel=0.15)  # measured 0.0485 / 0.135 vs 0.0485 / 0.121
    # the standardized error's variance E[V / V̂] is then that of Student's t with ν degrees of freedom, ν/(ν − 2)
    # (measured 1.041 / 1.116 against 1.051 / 1.138), not 1
    true = ols_sandwich(design, AR1Noise(0.35, lag1))[1, 1]
    assert np.mean(true / variances) == pytest.approx(nu / (nu - 2.0), rel=0.04)
    # and ρ's share is most of it at 0.8: the σ² term alone, 2(1 + ρ²)/(n(1 − ρ²)), is far below
    assert 2.0 / nu > 2.0 * 2.0 * (1 + lag1**2) / (250 * (1 - lag1**2))


def test_variance_dof_of_a_variance_proportional_to_sigma_squared_alone():
    # With D = 0 only σ̂² varies: ν = n (1 − ρ²)/(1 + ρ²), Bartlett's (1946) variance of an AR(1) sample variance
    # (from memory); and n − 1 ≈ n for white noise, the χ² degrees of freedom of a sample variance
    assert variance_dof(0.6, 250, 0.0) == pytest.approx(250 * (1 - 0.36) / 1.36, rel=1e-12)
    assert variance_dof(0.0, 250, 0.0) == pytest.approx(250.0, rel=1e-12)


def test_summed_dof_of_parts_with_equal_dof_is_that_dof():
    # Fully correlated estimates of equal relative spread: the sum has that spread too (its identity, no source)
    assert summed_dof((2.0, 17.0), (5.0, 17.0)) == pytest.approx(17.0, rel=1e-12)
    # and a part with fewer degrees of freedom lowers the sum's, never below the smallest one's
    assert 9.0 < summed_dof((2.0, 9.0), (5.0, 40.0)) < 40.0


def test_gregory_fit_gives_the_degrees_of_freedom_of_its_variance_when_asked():
    # For a slowly varying regressor the slope's variance goes as σ²(1 + ρ)/(1 − ρ) (Bretherton et al. 1999, from
    # memory), so d log V / dρ = 2/(1 − ρ²) and ν follows from variance_dof; the drift line's share moves it a little
    rng = np.random.default_rng(6)
    years = np.arange(1, 1001)
    residuals = xr.Dataset({"tas": ("year", ar1(rng, 1000, 0.7, 0.1)), "rtnt": ("year", ar1(rng, 1000, 0.7, 0.3))},
                           coords={"year": years}, attrs={"drift_order": 1})
    variability = ControlVariability(residuals, drift_order=1, drift_years=150)
    x = warming(150)
    dN = 6.0 - 1.2 * x + ar1(rng, 150, 0.7, 0.3)
    fit = gregory_fit(x, dN, (1, 150), control=variability, dof=True)
    rho = fit.lag1
    assert fit.feedback_dof == pytest.approx(variance_dof(rho, 1000, 2.0 / (1.0 - rho**2)), rel=0.25)
    assert np.isfinite(fit.ecs_dof) and fit.ecs_dof > 0
    # off by default, and without the control's variability there is no control length to count
    assert gregory_fit(x, dN, (1, 150), control=variability).feedback_dof == np.inf
    assert gregory_fit(x, dN, (1, 150), dof=True).feedback_dof == np.inf
    # the change of slope's: between its two segments' (summed_dof of the two variances; its identity, no source)
    seg = segment_fits(x, dN, (1, 20), (21, 150), control=variability, dof=True)
    low, high = sorted((seg.early.feedback_dof, seg.late.feedback_dof))
    assert low <= seg.feedback_change_dof <= high

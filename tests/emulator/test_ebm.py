"""Two-layer energy-balance model: closed form, exact integration, and the trade's reference numbers."""
import numpy as np
import pytest

from sensemble.emulator.ebm import (
    TwoLayerParameters,
    integrate,
    modes,
    step_response,
    step_response_annual,
    toa_imbalance,
)

# Multi-model-mean parameters of Geoffroy et al. (2013a, J. Climate, Table 3), from memory.
GEOFFROY_MEAN = TwoLayerParameters(lambda_=1.13, heat_capacity=7.3, deep_heat_capacity=106.0, exchange=0.73)
F2X = 3.71  # W m-2, Myhre et al. (1998) 5.35 ln 2


def test_timescales_match_geoffroy_2013a():
    # Geoffroy et al. (2013a), from memory: multi-model-mean τ_f ≈ 4 yr and τ_s ≈ 250 yr.
    m = modes(GEOFFROY_MEAN)
    assert 3.0 < m.tau_fast < 5.0
    assert 200.0 < m.tau_slow < 300.0
    assert m.amp_fast + m.amp_slow == pytest.approx(1.0, abs=1e-12)


def test_closed_form_amplitudes_equal_geoffroy_expressions():
    # Geoffroy et al. (2013a) eqs. for ε = 1, from memory: φ = C/(2γ)(b* ∓ √δ),
    # a_f = φ_s τ_f λ / (C (φ_s − φ_f)), a_s = −φ_f τ_s λ / (C (φ_s − φ_f)).
    lam, c, cd, gam = 1.13, 7.3, 106.0, 0.73
    b = (lam + gam) / c + gam / cd
    b_star = (lam + gam) / c - gam / cd
    delta = b * b - 4 * lam * gam / (c * cd)
    tau_f = c * cd / (2 * lam * gam) * (b - np.sqrt(delta))
    tau_s = c * cd / (2 * lam * gam) * (b + np.sqrt(delta))
    phi_f = c / (2 * gam) * (b_star - np.sqrt(delta))
    phi_s = c / (2 * gam) * (b_star + np.sqrt(delta))
    a_f = phi_s * tau_f * lam / (c * (phi_s - phi_f))
    a_s = -phi_f * tau_s * lam / (c * (phi_s - phi_f))
    m = modes(GEOFFROY_MEAN)
    np.testing.assert_allclose([m.tau_fast, m.tau_slow, m.amp_fast, m.amp_slow], [tau_f, tau_s, a_f, a_s], rtol=1e-10)


@pytest.mark.parametrize("efficacy", [1.0, 1.4])
def test_exact_integration_equals_closed_form(efficacy):
    # The closed form (Geoffroy et al. 2013a,b) and the exact piecewise-constant integration must agree to 1e-8.
    p = TwoLayerParameters(1.13, 7.3, 106.0, 0.73, efficacy)
    forcing = np.full(300, 2 * F2X)
    t_end, d_end = integrate(forcing, p, annual_mean=False)
    t_ref, d_ref = step_response(np.arange(1, 301), 2 * F2X, p)
    np.testing.assert_allclose(t_end, t_ref, rtol=1e-8)
    np.testing.assert_allclose(d_end, d_ref, rtol=1e-8)
    t_ann, d_ann = integrate(forcing, p, annual_mean=True)
    t_ref, d_ref = step_response_annual(300, 2 * F2X, p)
    np.testing.assert_allclose(t_ann, t_ref, rtol=1e-8)
    np.testing.assert_allclose(d_ann, d_ref, rtol=1e-8)


def test_integration_matches_fine_time_stepping():
    # Independent check of the exact scheme: a tiny-step RK4 integration of the ODEs (common practice, no source).
    p = TwoLayerParameters(0.9, 8.0, 90.0, 0.6, 1.3)
    years = 60
    forcing = 0.05 * np.arange(years)  # a ramp, held constant within each year
    t_exact, d_exact = integrate(forcing, p, annual_mean=False)
    x = np.zeros(2)
    h = 1.0 / 200

    def rhs(x, f):
        t, d = x
        return np.array([(f - 0.9 * t - 1.3 * 0.6 * (t - d)) / 8.0, 0.6 * (t - d) / 90.0])

    out = []
    for k in range(years):
        for _ in range(200):
            k1 = rhs(x, forcing[k]); k2 = rhs(x + h / 2 * k1, forcing[k])
            k3 = rhs(x + h / 2 * k2, forcing[k]); k4 = rhs(x + h * k3, forcing[k])
            x = x + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        out.append(x.copy())
    out = np.array(out)
    np.testing.assert_allclose(t_exact, out[:, 0], rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(d_exact, out[:, 1], rtol=1e-8, atol=1e-10)


def test_equilibrium_is_forcing_over_feedback():
    # Energy balance at equilibrium: N = 0 ⇒ T = F/λ (Held et al. 2010; common practice).
    p = TwoLayerParameters(1.13, 7.3, 106.0, 0.73, 1.5)
    t, d = integrate(np.full(20000, F2X), p, annual_mean=False)
    assert t[-1] == pytest.approx(F2X / 1.13, rel=1e-9)
    assert p.equilibrium_warming(F2X) == pytest.approx(F2X / 1.13)
    n = toa_imbalance(np.full(20000, F2X), t, d, p)
    assert abs(n[-1]) < 1e-9


def test_no_feedback_warming_about_1_2_kelvin():
    # Planck-only response: λ ≈ 3.2 W m-2 K-1 gives F2x/3.2 ≈ 1.2 K for doubled CO2 (fact of the trade).
    p = TwoLayerParameters(3.2, 7.3, 106.0, 0.73)
    t, _ = integrate(np.full(5000, F2X), p, annual_mean=False)
    assert t[-1] == pytest.approx(1.16, abs=0.05)


def test_vectorised_over_parameter_sets():
    # Many parameter sets at once equal one-at-a-time runs (common practice, no source).
    lam = np.array([0.8, 1.1, 1.6])
    p = TwoLayerParameters(lam, 7.3, 106.0, 0.73, np.array([1.0, 1.2, 1.5]))
    forcing = np.linspace(0, 7, 50)
    t_all, _ = integrate(forcing, p)
    for i in range(3):
        t_one, _ = integrate(forcing, TwoLayerParameters(lam[i], 7.3, 106.0, 0.73, [1.0, 1.2, 1.5][i]))
        np.testing.assert_allclose(t_all[i], t_one, rtol=1e-12)


def test_efficacy_makes_gregory_line_curve():
    # With ε > 1 the N–T relation of an abrupt run is not a straight line (Geoffroy et al. 2013b; Winton et al. 2010).
    p = TwoLayerParameters(1.13, 7.3, 106.0, 0.73, 1.5)
    f = np.full(150, 2 * F2X)
    t, d = integrate(f, p)
    n = toa_imbalance(f, t, d, p)
    early = np.polyfit(t[:20], n[:20], 1)[0]
    late = np.polyfit(t[20:], n[20:], 1)[0]
    assert late > early  # the late slope is shallower (less negative)

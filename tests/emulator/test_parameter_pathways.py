"""Pathways through sampled parameter vectors: exact two-layer integration, whole pathways, vectorised."""
import numpy as np
import pandas as pd
import pytest

from sensemble.emulator.ebm import TwoLayerParameters, integrate, modes
from sensemble.emulator.parameter_pathways import ParameterRoute, sample_pathways
from sensemble.emulator.parameters import ParameterEmulator
from sensemble.emulator.scenarios import ScenarioForcing, file_scenario

MODEL = dict(f2x=3.9, lambda_=1.1, heat_capacity=7.8, deep_heat_capacity=95.0, exchange=0.66, efficacy=1.3)


def one_model_emulator():
    vector = np.array([[MODEL[k] for k in ("f2x", "lambda_", "heat_capacity", "deep_heat_capacity", "exchange",
                                            "efficacy")]])
    return ParameterEmulator(structural_scatter=False).fit([[MODEL["f2x"] / MODEL["lambda_"]]], vector)


def test_one_model_without_scatter_equals_a_direct_integration(tmp_path):
    # Common practice, no source: with one model and no structural scatter the route is that model's
    # two-layer integration (Geoffroy et al. 2013b form) of the file's forcing, to 1e-8 K.
    path = tmp_path / "forcing.csv"
    years = np.arange(2020, 2271)
    erf = 2.0 + 3.0 * np.sin((years - 2020) / 40.0) ** 2
    pd.DataFrame({"year": years, "erf": erf}).to_csv(path, index=False)
    em = one_model_emulator()
    scenario = file_scenario("user", path, f2x_reference=MODEL["f2x"])  # the ensemble median of one model
    paths = sample_pathways(em, scenario, [[MODEL["f2x"] / MODEL["lambda_"]]], 5, random_state=0)
    direct, _ = integrate(erf, TwoLayerParameters(*(MODEL[k] for k in ("lambda_", "heat_capacity",
                                                                     "deep_heat_capacity", "exchange", "efficacy"))))
    assert paths.shape == (1, 5, 251)  # the whole pathway: 251 years
    np.testing.assert_allclose(paths[0], np.broadcast_to(direct, (5, 251)), atol=1e-8, rtol=0)


def test_stabilised_forcing_approaches_equilibrium_with_the_slow_time_scale():
    # Equilibrium F/λ (common practice); the remaining deficit decays as e^(−t/τ_s) with
    # τ_s = C C_d (b + √δ) / (2λγ), b = (λ + εγ)/C + γ/C_d, δ = b² − 4λγ/(C C_d) (Geoffroy et al. 2013a,
    # from memory, with εγ in the upper layer as in 2013b), computed here from the formula, not from ebm.
    lam, c, cd, gam, eff = (MODEL[k] for k in ("lambda_", "heat_capacity", "deep_heat_capacity", "exchange", "efficacy"))
    b = (lam + eff * gam) / c + gam / cd
    tau_s = c * cd * (b + np.sqrt(b * b - 4 * lam * gam / (c * cd))) / (2 * lam * gam)
    years = np.arange(1, 3001)
    forcing = np.where(years <= 50, 4.0 * years / 50.0, 4.0)  # ramp, then held
    scenario = ScenarioForcing("stable", "file", years, forcing, None)
    route = ParameterRoute(one_model_emulator(), scenario)
    warming = route.mean_pathway([[MODEL["f2x"] / lam]])[0]
    assert warming[-1] == pytest.approx(4.0 / lam, rel=1e-5)
    deficit = 4.0 / lam - warming
    late = (years > 600) & (years < 1500)
    slope = np.polyfit(years[late], np.log(deficit[late]), 1)[0]
    assert -1.0 / slope == pytest.approx(tau_s, rel=1e-6)
    assert modes(TwoLayerParameters(lam, c, cd, gam, eff)).tau_slow == pytest.approx(tau_s, rel=1e-12)


def test_vectorised_samples_carry_parameter_and_forcing_spread():
    # Common practice, no source: sampled pathways differ by their parameters and their F2x-scaled forcing
    rng = np.random.default_rng(0)
    ecs = rng.uniform(2, 5, 10)
    f2x = rng.uniform(3.3, 4.1, 10)
    P = np.column_stack([f2x, f2x / ecs, rng.uniform(6.5, 9, 10), rng.uniform(70, 130, 10), rng.uniform(0.55, 0.85, 10),
                         np.ones(10)])
    em = ParameterEmulator().fit(ecs[:, None], P)
    years = np.arange(1, 201)
    scenario = ScenarioForcing("ramp", "file", years, 0.03 * years, float(np.median(f2x)))
    paths = sample_pathways(em, scenario, [[3.0], [4.0]], 2000, random_state=1)
    assert paths.shape == (2, 2000, 200)
    assert np.all(np.median(paths[1, :, -20:], axis=0) > np.median(paths[0, :, -20:], axis=0))
    # one pathway per row of X (a distribution of inputs)
    one_each = sample_pathways(em, scenario, np.full((300, 1), 3.0), None, random_state=1)
    assert one_each.shape == (300, 200)
    sd_end = one_each[:, -1].std()
    assert 0.05 < sd_end < 1.0
    # internal variability widens it
    noisy = sample_pathways(em, scenario, np.full((300, 1), 3.0), None, random_state=1, internal_variability=(0.3, 0.5))
    assert noisy[:, -1].std() > sd_end

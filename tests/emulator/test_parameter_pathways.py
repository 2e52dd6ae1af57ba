"""Pathways through sampled parameter vectors: exact two-layer integration, whole pathways, vectorised."""
import numpy as np
import pandas as pd
import pytest

from sensemble.emulator.ebm import TwoLayerParameters, integrate, modes
from sensemble.emulator.parameter_pathways import mean_pathway, sample_pathways
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
    warming = mean_pathway(one_model_emulator(), scenario, [[MODEL["f2x"] / lam]])[0]
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


def test_estimator_on_an_archive_scenario_validates_out_of_sample(extract_dir):
    # Leave-one-model-out (common practice in emulator validation, no source): the parameter route never fits
    # the scenario's warming, and still predicts held-out invented models within their 90 % intervals.
    from sklearn.base import clone

    from sensemble.emulator.parameter_pathways import ParameterPathwayEmulator
    from sensemble.emulator.training import load_training_set
    from sensemble.emulator.validate import leave_one_model_out

    path, truth = extract_dir
    ts = load_training_set(path, "scen-rise")
    est = ParameterPathwayEmulator(n_moments=500)
    fitted = clone(est).fit(ts)
    assert fitted.scenario_.kind == "archive" and fitted.scenario_.n_years == 100
    # the diagnosed forcing recovers the invented one in decadal means (Forster et al. 2013 diagnosis, ε = 1)
    decadal = lambda x: np.asarray(x).reshape(10, 10).mean(axis=1)  # noqa: E731
    np.testing.assert_allclose(decadal(fitted.scenario_.reference), decadal(truth["scenario_forcing"]), atol=0.1)
    per_run, summary = leave_one_model_out(ts, est, n_samples=400, random_state=0)
    assert summary["end_rmse"] < 0.35
    assert summary["end_coverage90"] >= 0.7


def test_forcing_file_longer_than_the_runs_gives_the_whole_pathway(extract_dir, tmp_path):
    # Issue 13's finding: a 251-year pathway must come out with 251 years (parameter route), and the GP
    # route, which can only predict the runs' years, refuses in one line instead of cutting it.
    from sensemble.emulator.ensemble import EnsembleEmulator
    from sensemble.emulator.errors import EmulatorInputError
    from sensemble.emulator.parameter_pathways import ParameterPathwayEmulator
    from sensemble.emulator.training import load_physics_set, load_training_set

    path, _ = extract_dir
    years = np.arange(2001, 2252)
    co2 = tmp_path / "co2.csv"
    pd.DataFrame({"year": years, "co2": 278.0 * 1.005 ** (years - 2000)}).to_csv(co2, index=False)
    physics = load_physics_set(path)
    assert physics.Y.shape[1] == 0 and physics.n_runs == 13
    est = ParameterPathwayEmulator(forcing_source="co2", co2_file=str(co2), n_moments=200).fit(physics)
    mean = est.predict([[3.0]])
    assert mean.shape == (1, 251) and est.scenario_.years[-1] == 2251
    with pytest.raises(EmulatorInputError, match="runs to calendar year 2251.*parameter route"):
        EnsembleEmulator(forcing_source="co2", co2_file=str(co2)).fit(load_training_set(path, "scen-rise"))

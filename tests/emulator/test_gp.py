"""PathwayEmulator: scikit-learn reference, physics plausibility, variance bookkeeping."""
import numpy as np
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

from sensemble.emulator.ebm import TwoLayerParameters, integrate
from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.gp import PathwayEmulator
from sensemble.emulator.variability import ar1_noise, internal_variability_from_control

from .synthetic import ar1

MEAN = dict(f2x=3.71, heat_capacity=7.3, deep_heat_capacity=106.0, exchange=0.73, efficacy=1.0)


def step_ensemble(ecs, years, f2x=3.71, noise=0.0, seed=0):
    """Pathways of our two-layer model under a CO2-doubling step, Geoffroy et al. (2013a) mean capacities."""
    p = TwoLayerParameters(f2x / np.asarray(ecs), 7.3, 106.0, 0.73)
    t, _ = integrate(np.full(years, f2x), p)
    if noise:
        t = t + ar1(np.random.default_rng(seed), years, noise, 0.5, size=(len(ecs),))
    return t


def test_single_output_equals_sklearn_reference():
    # Reference library: sklearn GaussianProcessRegressor fitted directly to the same standardised inputs
    # with the same kernel (Matérn 5/2 ARD × amplitude + white noise) must give the same mean and sd to 1e-8
    # when the physics mean is off, one component is kept and the small-sample correction is off (the
    # plug-in variance; the correction is checked against its own sources below).
    rng = np.random.default_rng(3)
    X = rng.uniform(1.5, 5.5, (15, 2))
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1] + rng.normal(0, 0.05, 15)
    em = PathwayEmulator(inputs=("ecs_eff", "tcr"), physics_mean=False, max_components=1,
                         small_sample_correction=False, n_restarts_optimizer=2, random_state=5).fit(X, y[:, None])
    kernel = ConstantKernel(1.0, (1e-3, 1e3)) * Matern(np.ones(2), (0.6, 1e2), nu=2.5) + WhiteKernel(1e-2, (1e-8, 1e1))
    mu, sd = X.mean(0), X.std(0)
    ref = GaussianProcessRegressor(kernel, normalize_y=True, n_restarts_optimizer=2, random_state=5)
    ref.fit((X - mu) / sd, y)
    Xq = rng.uniform(1.0, 6.0, (20, 2))
    m_ref, s_ref = ref.predict((Xq - mu) / sd, return_std=True)
    m, s = em.predict(Xq, return_std=True)
    np.testing.assert_allclose(m[:, 0], m_ref, atol=1e-8, rtol=0)
    np.testing.assert_allclose(s[:, 0], s_ref, atol=1e-8, rtol=0)


def test_small_sample_correction_matches_bayesian_emulator_formula():
    # Bayesian GP emulator with a constant mean (flat prior) and an unknown variance (Jeffreys prior)
    # (Oakley & O'Hagan 2002, Biometrika; Conti & O'Hagan 2010; from memory), at sklearn's fitted kernel K:
    # σ̂² = (y − β̂)ᵀK⁻¹(y − β̂)/(n − 1), var = σ̂²[k** − k*ᵀK⁻¹k* + (1 − 1ᵀK⁻¹k*)²/1ᵀK⁻¹1], Student-t with
    # n − 1 dof widened to the Gaussian of the same 90 % interval (quantiles from scipy.stats). Written out
    # here with plain numpy solves, independently of the emulator's Cholesky route.
    from scipy.stats import norm, t as student_t
    rng = np.random.default_rng(3)
    X = rng.uniform(1.5, 5.5, (9, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 9)
    em = PathwayEmulator(physics_mean=False, max_components=1, n_restarts_optimizer=0).fit(X, y[:, None])
    plain = PathwayEmulator(physics_mean=False, max_components=1, n_restarts_optimizer=0,
                            small_sample_correction=False).fit(X, y[:, None])
    gp = em.gps_[0]
    Xs = em._standardise(X)
    K = gp.kernel_(Xs) + gp.alpha * np.eye(9)
    z = gp.y_train_
    one = np.ones(9)
    beta = one @ np.linalg.solve(K, z) / (one @ np.linalg.solve(K, one))
    sigma2 = (z - beta) @ np.linalg.solve(K, z - beta) / 8
    Xq = np.array([[1.0], [3.0], [6.5]])
    Xqs = em._standardise(Xq)
    ks = gp.kernel_(Xqs, Xs)
    inner = gp.kernel_.diag(Xqs) - np.einsum("ij,ji->i", ks, np.linalg.solve(K, ks.T))
    inner += (1 - ks @ np.linalg.solve(K, one)) ** 2 / (one @ np.linalg.solve(K, one))
    expected = gp._y_train_std * np.sqrt(sigma2 * inner) * student_t.ppf(0.95, 8) / norm.ppf(0.95)
    mean, sd = em.predict(Xq, return_std=True)
    # the emulator's component direction is ±1 for one year: sd is the component's sd
    np.testing.assert_allclose(sd[:, 0], expected, rtol=1e-8)
    np.testing.assert_allclose(mean, plain.predict(Xq), rtol=1e-12)  # the mean is the plug-in GP's
    assert np.all(sd > plain.predict(Xq, return_std=True)[1])


def test_small_sample_correction_pure_noise_is_prediction_interval():
    # Limit of no signal: a new draw from a normal sample of n has the prediction interval
    # ȳ ± t_0.95,n−1 s √(1 + 1/n) (textbook, e.g. Hahn & Meeker 1991, "Statistical Intervals", from memory).
    from scipy.stats import norm, t as student_t
    X = np.linspace(2.0, 5.0, 10)[:, None]
    y = np.array([0.3, -0.5, 0.1, 0.4, -0.2, -0.3, 0.5, -0.1, 0.2, -0.4])  # no trend in X
    em = PathwayEmulator(physics_mean=False, max_components=1, n_restarts_optimizer=0).fit(X, y[:, None])
    amplitude = em.gps_[0].kernel_.k1.k1.constant_value
    assert amplitude < 1e-2  # the fit found no signal (premise of the limit)
    _, sd = em.predict([[3.3]], return_std=True)
    expected = y.std(ddof=1) * np.sqrt(1 + 1 / 10) * student_t.ppf(0.95, 9) / norm.ppf(0.95)
    assert sd[0, 0] == pytest.approx(expected, rel=0.02)


def test_doubled_co2_at_ecs_3_approaches_3_kelvin():
    # Fact of the trade: with ECS = 3 K the warming for doubled CO2 tends to 3 K (equilibrium ΔT = F2x/λ,
    # Held et al. 2010); over years 950–1000 (≈ 4 slow time scales, Geoffroy et al. 2013a) within ~3 %.
    ecs = np.array([2.0, 2.5, 3.5, 4.0, 4.5, 5.0])
    years = 1000
    Y = step_ensemble(ecs, years, noise=0.05)
    em = PathwayEmulator(max_components=3).fit(ecs[:, None], Y, forcing=np.full(years, 3.71), mean_params=MEAN)
    mean, sd = em.predict([[3.0]], return_std=True)
    late = mean[0, -50:].mean()
    assert 2.90 < late < 3.03
    assert late > mean[0, 200:250].mean() + 0.1  # still rising towards it
    assert sd[0, -1] < 0.1
    truth = step_ensemble([3.0], years)[0]
    assert np.mean(np.abs(mean[0] - truth)) < 0.05


def test_no_feedback_case_gives_about_1_2_kelvin():
    # Fact of the trade: Planck response alone, λ ≈ 3.2 W m-2 K-1, gives F2x/λ ≈ 3.71/3.2 ≈ 1.2 K for doubled CO2.
    ecs = np.array([1.0, 1.5, 2.0, 3.0, 4.0, 5.0])
    years = 1000
    Y = step_ensemble(ecs, years, noise=0.05)
    em = PathwayEmulator(max_components=3).fit(ecs[:, None], Y, forcing=np.full(years, 3.71), mean_params=MEAN)
    assert em.predict([[3.71 / 3.2]])[0, -1] == pytest.approx(1.2, abs=0.05)


def test_variance_adds_up_and_sampling_agrees():
    # Bookkeeping (common practice, no source): predictive variance = Σ σ_j² v_j² + truncation + internal,
    # and sampled pathways reproduce the predicted mean and sd.
    ecs = np.linspace(2.0, 5.0, 10)
    Y = step_ensemble(ecs, 80, noise=0.1, seed=2)
    iv = (0.1, 0.5)
    em = PathwayEmulator(physics_mean=True, variance_kept=0.6, internal_variability=iv).fit(
        ecs[:, None], Y, forcing=np.full(80, 3.71), mean_params=MEAN)
    assert em.n_components_ < 9 and em.truncation_variance_.sum() > 0
    assert "single realisation" in em.prediction_target_
    mean, sd = em.predict([[3.2]], return_std=True)
    mu, s = em.component_predictions([[3.2]])
    expected = (s ** 2) @ em.components_ ** 2 + em.truncation_variance_ + iv[0] ** 2
    np.testing.assert_allclose(sd[0] ** 2, expected[0], rtol=1e-12)
    paths = em.sample_paths([[3.2]], 20000, random_state=1)
    np.testing.assert_allclose(paths[0].mean(0), mean[0], atol=4 * sd.max() / np.sqrt(20000))
    np.testing.assert_allclose(paths[0].std(0), sd[0], rtol=0.05)
    # the sd of the last-10-year mean, split into forced and internal parts, adds up to the sampled one; the
    # internal part is an AR(1) 10-year mean: σ² Σ_s Σ_t φ^|s−t| / 100 (textbook, computed by hand here)
    forced, internal = em.spread_of_mean([[3.2]], 10)
    ar1_decade = 0.1 ** 2 * sum(0.5 ** abs(a - b) for a in range(10) for b in range(10)) / 100
    assert internal[0] == pytest.approx(np.sqrt(ar1_decade), rel=1e-12)
    total = np.hypot(forced[0], internal[0])
    assert paths[0, :, -10:].mean(axis=1).std() == pytest.approx(total, rel=0.05)


def test_ar1_noise_is_stationary_with_given_lag1():
    # AR(1) x_t = φ x_{t−1} + e_t, var e = sd²(1 − φ²) is stationary with var sd² (textbook, common practice).
    noise = np.asarray(ar1_noise(np.random.default_rng(0), (40000, 30), 0.1, 0.5), dtype=float)
    np.testing.assert_allclose(noise.std(0), 0.1, rtol=0.03)
    assert np.corrcoef(noise[:, 20], noise[:, 21])[0, 1] == pytest.approx(0.5, abs=0.03)


def test_internal_variability_from_control_recovers_ar1():
    # AR(1) estimates (common practice, no source): sd and lag-1 autocorrelation back within sampling error.
    rng = np.random.default_rng(0)
    series = list(ar1(rng, 500, 0.12, 0.6, size=(8,)))
    sd, phi = internal_variability_from_control(series + [None])
    assert sd == pytest.approx(0.12, rel=0.1)
    assert phi == pytest.approx(0.6, abs=0.08)


def test_learned_attributes_and_errors():
    em = PathwayEmulator()
    assert not hasattr(em, "gps_")
    with pytest.raises(EmulatorInputError, match="not fitted"):
        em.predict([[3.0]])
    X, Y = np.linspace(2, 5, 6)[:, None], np.ones((6, 10))
    with pytest.raises(EmulatorInputError, match="needs forcing"):
        em.fit(X, Y)
    with pytest.raises(EmulatorInputError, match="'ecs_eff' among the inputs"):
        PathwayEmulator(inputs=("tcr",)).fit(X, Y, forcing=np.ones(10), mean_params=MEAN)
    with pytest.raises(EmulatorInputError, match="variance_kept"):
        PathwayEmulator(physics_mean=False, variance_kept=1.5).fit(X, Y)
    with pytest.raises(EmulatorInputError, match="unknown kernel"):
        PathwayEmulator(physics_mean=False, kernel="cubic").fit(X, Y)
    with pytest.raises(EmulatorInputError, match="2 columns"):
        PathwayEmulator(physics_mean=False).fit(np.ones((6, 2)), Y)


def test_rbf_kernel_and_physics_off_fit():
    ecs = np.linspace(2.0, 5.0, 8)
    Y = step_ensemble(ecs, 60, noise=0.05)
    # no smoothing: without a forcing, the Gaussian smoother would blur the step's fast transient (smoothing.py)
    em = PathwayEmulator(physics_mean=False, kernel="rbf", max_components=2, smoothing="none").fit(ecs[:, None], Y)
    assert em.components_.shape == (2, 60) and len(em.gps_) == 2
    np.testing.assert_allclose(em.components_ @ em.components_.T, np.eye(2), atol=1e-12)
    # interpolating between training runs stays close to the true two-layer response (common practice)
    truth = step_ensemble([3.3], 60)[0]
    assert np.max(np.abs(em.predict([[3.3]])[0] - truth)) < 0.15


def test_gridded_physics_mean_matches_exact_response():
    # Above PhysicsMean.exact_limit distinct inputs the mean is interpolated from a dense ln-ECS grid;
    # against the exact two-layer response it must agree to 1e-8 K (our own accuracy claim, no outside source).
    from sensemble.emulator.physics_mean import PhysicsMean
    mean = PhysicsMean(60, np.linspace(0.0, 5.0, 60), **MEAN)
    ecs = np.exp(np.random.default_rng(0).uniform(np.log(1.5), np.log(6.0), PhysicsMean.exact_limit + 500))
    np.testing.assert_allclose(mean(ecs[:, None]), mean.response(ecs), atol=1e-8, rtol=0)


def test_gridded_gp_predictions_match_exact():
    # Above exact_limit points with one input, GP mean/sd are interpolated from a dense grid: within 1e-3 of
    # the component scale against sklearn's own predictions (our accuracy claim, reference library sklearn);
    # that is below 1e-3 K per year here, against predictive sds of ~0.1 K.
    ecs = np.linspace(2.0, 5.0, 9)
    Y = step_ensemble(ecs, 40, noise=0.08, seed=5)
    em = PathwayEmulator(max_components=3).fit(ecs[:, None], Y, forcing=np.full(40, 3.71), mean_params=MEAN)
    x = np.random.default_rng(1).uniform(1.5, 6.0, (em.exact_limit + 100, 1))
    mu, sd = em.component_predictions(x)
    mu0, sd0 = em._component_predictions_exact(em._standardise(x))
    scale = np.abs(em.scores_).max(axis=0)
    assert np.all(np.abs(mu - mu0).max(axis=0) < 1e-3 * scale)
    assert np.all(np.abs(sd - sd0).max(axis=0) < 1e-3 * scale)
    assert np.abs((mu - mu0) @ em.components_).max() < 1e-3

"""PathwayEmulator: scikit-learn reference, physics plausibility, variance bookkeeping."""
import numpy as np
import pytest
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

from sensemble.emulator.ebm import TwoLayerParameters, integrate
from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.component_gp import ComponentGP, correlation
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


def test_plug_in_component_gp_equals_sklearn_reference():
    # Reference library: sklearn GaussianProcessRegressor with the kernel fixed (optimizer=None) at the same
    # correlation parameters — σ̂² × Matérn 5/2 (one length scale per input) + white noise σ̂²η — fitted to the
    # scores minus their GLS mean must give the same mean and sd to 1e-8 as the plug-in (no small-sample
    # correction) component GP: the GP mean and its variance use the same constant mean.
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel
    rng = np.random.default_rng(3)
    X = rng.uniform(-1.5, 1.5, (15, 2))
    z = np.sin(2 * X[:, 0]) + 0.3 * X[:, 1] + rng.normal(0, 0.05, 15)
    theta = np.log([0.8, 1.7, 0.02])
    gp = ComponentGP(small_sample=False).fit(X, z, thetas=[theta], weights=[1.0])
    _, _, _, beta, _, s2, _ = gp._terms(theta, X, z)
    sigma2 = s2 / 15
    kernel = ConstantKernel(sigma2, "fixed") * Matern(np.exp(theta[:2]), "fixed", nu=2.5) + WhiteKernel(sigma2 * 0.02, "fixed")
    ref = GaussianProcessRegressor(kernel, optimizer=None, normalize_y=False, alpha=1e-10 * sigma2).fit(X, z - beta)
    Xq = rng.uniform(-2.0, 2.0, (20, 2))
    m_ref, s_ref = ref.predict(Xq, return_std=True)
    m, s = gp.predict(Xq)
    np.testing.assert_allclose(m, m_ref + beta, atol=1e-8, rtol=0)
    np.testing.assert_allclose(s, s_ref, atol=1e-8, rtol=0)


def test_small_sample_quantiles_are_the_bayesian_emulators_student_t():
    # Bayesian GP emulator with a constant mean (flat prior) and an unknown variance (Jeffreys prior)
    # (Oakley & O'Hagan 2002, Biometrika; Conti & O'Hagan 2010; from memory), at fixed correlation parameters:
    # σ̂² = (y − β̂)ᵀK⁻¹(y − β̂)/(n − 1), scale² = σ̂²[k** − k*ᵀK⁻¹k* + (1 − 1ᵀK⁻¹k*)²/1ᵀK⁻¹1], a Student-t with
    # n − 1 dof. Written out with plain numpy solves; the emulator's quantiles must be scipy.stats.t's.
    from scipy.stats import t as student_t
    rng = np.random.default_rng(3)
    X = rng.uniform(1.5, 5.5, (9, 1))
    y = np.sin(X[:, 0]) + rng.normal(0, 0.2, 9)
    em = PathwayEmulator(physics_mean=False, max_components=1).fit(X, y[:, None])
    Xs = em._standardise(X)
    theta = np.log([0.9, 0.05])
    z = em.scores_[:, 0]
    em.gps_[0] = ComponentGP().fit(Xs, z, thetas=[theta], weights=[1.0])
    K = correlation(Xs, Xs, 0.9) + (0.05 + 1e-10) * np.eye(9)
    one = np.ones(9)
    beta = one @ np.linalg.solve(K, z) / (one @ np.linalg.solve(K, one))
    sigma2 = (z - beta) @ np.linalg.solve(K, z - beta) / 8
    Xq = np.array([[1.0], [3.0], [6.5]])
    Xqs = em._standardise(Xq)
    ks = correlation(Xqs, Xs, 0.9)
    loc = beta + ks @ np.linalg.solve(K, z - beta)
    inner = 1.05 - np.einsum("ij,ji->i", ks, np.linalg.solve(K, ks.T))
    inner += (1 - ks @ np.linalg.solve(K, one)) ** 2 / (one @ np.linalg.solve(K, one))
    scale = np.sqrt(sigma2 * inner)
    sign = em.components_[0, 0]  # the one-year component is ±1
    p = np.array([0.01, 0.05, 0.17, 0.5, 0.83, 0.95, 0.99])
    expected = em.residual_mean_[0] + sign * student_t.ppf(p[None, :] * (sign > 0) + (1 - p[None, :]) * (sign < 0), 8,
                                                           loc[:, None], scale[:, None])
    np.testing.assert_allclose(em.quantiles(Xq, p)[:, :, 0], expected, rtol=1e-8)
    # and the sd is the t's: scale √(ν/(ν − 2))
    np.testing.assert_allclose(em.predict(Xq, return_std=True)[1][:, 0], scale * np.sqrt(8 / 6), rtol=1e-8)


def test_small_sample_correction_pure_noise_is_prediction_interval():
    # Limit of no signal: a new draw from a normal sample of n has the prediction interval
    # ȳ ± t_0.95,n−1 s √(1 + 1/n) (textbook, e.g. Hahn & Meeker 1991, "Statistical Intervals", from memory).
    from scipy.stats import t as student_t
    X = np.linspace(2.0, 5.0, 10)[:, None]
    y = np.array([0.3, -0.5, 0.1, 0.4, -0.2, -0.3, 0.5, -0.1, 0.2, -0.4])  # no trend in X
    em = PathwayEmulator(physics_mean=False, max_components=1).fit(X, y[:, None])
    half = y.std(ddof=1) * np.sqrt(1 + 1 / 10) * student_t.ppf(0.95, 9)
    # the posterior over (ℓ, η) keeps some weight on a weak signal (the nugget prior's median is 1, equal shares),
    # so the interval is a little narrower than the no-signal limit
    q = em.quantiles([[3.3]], [0.05, 0.95])[0, :, 0]
    assert 0.85 * half < (q[1] - q[0]) / 2 <= 1.02 * half
    # the limit itself: all nugget (η → ∞) gives the textbook interval
    em.gps_[0] = ComponentGP().fit(em._standardise(X), em.scores_[:, 0], thetas=[np.log([1.0, 1e8])], weights=[1.0])
    q = em.quantiles([[3.3]], [0.05, 0.95])[0, :, 0]
    assert (q[1] - q[0]) / 2 == pytest.approx(half, rel=1e-6)


class _NoScore:
    """A component GP that predicts its score exactly (location 0, scale 0): only the basis error is left."""
    dof_ = np.inf

    def predict(self, Xs):
        return np.zeros(len(Xs)), np.zeros(len(Xs))


def test_basis_error_quantiles_and_draws_are_student_t_with_n_dof():
    # The basis error's scale is estimated from the n leave-one-out residuals; integrated out under the reference
    # prior p(σ²) ∝ 1/σ² its predictive is a Student-t with n dof (Gelman et al., Bayesian Data Analysis, ch. 3,
    # from memory): per-year quantiles = mean + √(scale²) · t_p,n, checked against scipy.stats.t.
    from scipy.stats import kurtosis, t as student_t
    X = np.linspace(2.0, 5.0, 5)[:, None]
    rng = np.random.default_rng(3)
    Y = rng.normal(size=(5, 12)) + np.outer(X[:, 0], np.linspace(0.0, 1.0, 12))
    em = PathwayEmulator(physics_mean=False, max_components=1, smoothing="none").fit(X, Y)
    assert em.basis_dof_ == 5 and em.truncation_variance_.min() > 0
    em.gps_[0] = _NoScore()
    mean = em.predict([[3.1]])[0]
    q = em.quantiles([[3.1]], [0.05, 0.5, 0.99])[0]
    for row, p in zip(q, (0.05, 0.5, 0.99)):
        np.testing.assert_allclose(row, mean + np.sqrt(em.truncation_variance_) * student_t.ppf(p, 5), rtol=1e-10)
    # sampled pathways: a t with 5 dof has variance 5/3 of its scale² and excess kurtosis 6/(5 − 4) = 6 (textbook);
    # a Gaussian draw would give 1 and 0
    draws = em.sample_paths([[3.1]], 200_000, random_state=4)[0, :, 0] - mean[0]
    assert draws.var() / em.truncation_variance_[0] == pytest.approx(5 / 3, rel=0.05)
    assert kurtosis(draws) > 3.0
    # without the small-sample correction the plug-in Gaussian is kept
    plug_in = PathwayEmulator(physics_mean=False, max_components=1, smoothing="none",
                              small_sample_correction=False).fit(X, Y)
    assert plug_in.basis_dof_ == np.inf


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
    # Bookkeeping (common practice, no source): predictive variance = Σ sd_j² v_j² + basis error + internal,
    # and sampled pathways reproduce the predicted mean and sd.
    from sensemble.emulator.gp import t_sd_factor
    from sensemble.emulator.smoothing import response_smoother
    ecs = np.linspace(2.0, 5.0, 10)
    Y = step_ensemble(ecs, 80, noise=0.1, seed=2)
    iv = (0.1, 0.5)
    em = PathwayEmulator(physics_mean=True, variance_kept=0.6, internal_variability=iv).fit(
        ecs[:, None], Y, forcing=np.full(80, 3.71), mean_params=MEAN)
    assert em.n_components_ < 9 and em.truncation_variance_.sum() > 0
    assert "single realisation" in em.prediction_target_
    mean, sd = em.predict([[3.2]], return_std=True)
    mu, s = em.component_predictions([[3.2]])
    # the basis error is a multivariate t with n = 10 dof: variance scale² · n/(n − 2) (textbook t variance)
    assert em.basis_dof_ == 10
    basis = em.truncation_variance_ * 10 / 8
    expected = ((s * t_sd_factor(em.dof_)) ** 2) @ em.components_ ** 2 + basis + em.internal_variance_
    np.testing.assert_allclose(sd[0] ** 2, expected[0], rtol=1e-12)
    paths = em.sample_paths([[3.2]], 20000, random_state=1)
    np.testing.assert_allclose(paths[0].mean(0), mean[0], atol=4 * sd.max() / np.sqrt(20000))
    np.testing.assert_allclose(paths[0].std(0), sd[0], rtol=0.05)
    # the sd of the last-10-year mean, split into forced and internal parts, adds up to the sampled one; the
    # internal part is the AR(1) noise (Σ_st = σ² φ^|s−t|, textbook) less what the smoother S keeps:
    # aᵀΣa with a = (I − S)ᵀ w, w = 1/10 on the last ten years (computed by hand here)
    forced, internal = em.spread_of_mean([[3.2]], 10)
    S = response_smoother(np.full(80, 3.71))
    w = np.r_[np.zeros(70), np.full(10, 0.1)]
    a = (np.eye(80) - S).T @ w
    cov = 0.1 ** 2 * 0.5 ** np.abs(np.subtract.outer(np.arange(80), np.arange(80)))
    assert internal[0] == pytest.approx(np.sqrt(a @ cov @ a), rel=1e-9)
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


def test_nugget_prior_presumes_neither_share():
    # Our own choice, no outside source (emulator/component_gp.py): the prior on the ratio η of unexplained to
    # explained scatter is symmetric in η and 1/η, so with 4–5 models, where the data hardly inform η, it does
    # not presume that the inputs explain most of a score's scatter.
    from sensemble.emulator.component_gp import NUGGET_PRIOR
    from scipy.stats import norm
    centre, width = NUGGET_PRIOR
    for eta in (0.1, 0.5, 3.0):
        assert norm.logpdf(np.log(eta), centre, width) == pytest.approx(norm.logpdf(-np.log(eta), centre, width))

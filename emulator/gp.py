"""`PathwayEmulator`: warming pathways as a function of sensitivity inputs, with calibrated uncertainty.

What is predicted: the annual warming of *one realisation* of a model with the given inputs. Its mean is
the forced response; its spread = uncertainty of the forced response (the emulator's, including the
model-to-model "structural" scatter the inputs do not explain) + internal variability (when given).

Mean: the two-layer response (emulator.ebm) at each input, with ensemble-typical heat capacities and
λ = F2x / ecs_eff. The training pathways are single noisy realisations, so their residuals from that mean
are first smoothed along years (emulator.smoothing: the forced part; the internal variability is not
interpolated into the mean). The smoothed residuals are reduced to principal components (SVD) keeping at
least `variance_kept` of their variance; one scikit-learn `GaussianProcessRegressor` per component
(Matérn 5/2 with one length scale per standardised input, plus white noise; `normalize_y`). The white
noise is the part of the model-to-model scatter the inputs cannot explain (e.g. heat uptake that differs
between models of equal ecs_eff): it stays in the predictive variance.

Predictive variance of a year = Σ_j σ_j² v_jt² (GP variances through the components) + the variance of the
discarded components + internal variability (AR(1) fitted to the control runs). With
`small_sample_correction`, each σ_j² is the Bayesian GP emulator's variance (Oakley & O'Hagan 2002,
Biometrika; Conti & O'Hagan 2010, J. Stat. Plan. Inference; from memory) at the fitted correlation
lengths and noise ratio: the amplitude re-estimated from the generalised least-squares residuals over
n − 1 degrees of freedom, the uncertainty of the unknown constant mean added, and the Student-t (n − 1
degrees of freedom) widened to a Gaussian with the same 90 % interval. With ~10 training models the
plug-in maximum-likelihood variance is otherwise too small by about a third.
"""
from __future__ import annotations

import os
import warnings
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy.linalg import cho_solve
from scipy.stats import norm, t as student_t
from sklearn.base import BaseEstimator
from sklearn.exceptions import ConvergenceWarning
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Matern, WhiteKernel
from threadpoolctl import threadpool_limits  # installed with scikit-learn

from .errors import EmulatorInputError
from .physics_mean import MEAN_PARAMETERS, PhysicsMean
from .settings import KERNELS, SMOOTHERS  # declared with the estimator's constraints
from .smoothing import forced_part
from .variability import ar1_noise

__all__ = ["PathwayEmulator", "make_kernel", "small_sample_factor", "KERNELS"]

#: Length scales on standardised inputs. The floor sits just above the typical spacing of neighbouring models
#: (≈ 3.5 sd / (n − 1) ≈ 0.3–0.5 sd for 8–13 models): shorter scales let a GP thread each model's own
#: structural deviation and claim certainty near the training points. 0.6 was chosen over 0.3 and 1.0 on the
#: leave-one-model-out scores of the demo and a synthetic ensemble (our own choice, no outside source).
LENGTH_SCALE_BOUNDS = (0.6, 1e2)


def make_kernel(kind: str, n_inputs: int):
    """Amplitude × (Matérn ν = 5/2 or RBF, one length scale per input) + white noise, on standardised inputs."""
    if kind == "matern52":
        shape = Matern(length_scale=np.ones(n_inputs), length_scale_bounds=LENGTH_SCALE_BOUNDS, nu=2.5)
    elif kind == "rbf":
        shape = RBF(length_scale=np.ones(n_inputs), length_scale_bounds=LENGTH_SCALE_BOUNDS)
    else:
        raise EmulatorInputError(f"unknown kernel {kind!r}", hint=f"choose one of {', '.join(KERNELS)}")
    return ConstantKernel(1.0, (1e-3, 1e3)) * shape + WhiteKernel(1e-2, (1e-8, 1e1))


def small_sample_factor(n: int) -> float:
    """Variance factor widening a Student-t with n − 1 degrees of freedom to the Gaussian with the same
    central 90 % interval: (t_0.95,n−1 / z_0.95)² (scipy.stats quantiles)."""
    return float((student_t.ppf(0.95, int(n) - 1) / norm.ppf(0.95)) ** 2)


class PathwayEmulator(BaseEstimator):
    """Gaussian-process emulator of annual warming pathways with a two-layer physics mean.

    Parameters
    ----------
    inputs : names of the input columns (sensitivity-table columns); must contain `ecs_eff` for the physics mean
    physics_mean : use the two-layer mean (needs `forcing` and `mean_params` in `fit`); else the ensemble mean
    variance_kept : smallest fraction of the residual variance the principal components keep
    max_components : upper limit on the number of components
    kernel : "matern52" or "rbf"
    internal_variability : None, or (sd in K, lag-1 autocorrelation) of annual internal variability added
        to predictions as AR(1) noise (see `internal_variability_from_control`); None predicts the forced
        response only
    smoothing : how the training residuals are smoothed along years before the SVD (emulator.smoothing):
        "auto" (the forcing-response projection with the physics mean, else the Gaussian smoother),
        "response", "gaussian", or "none" (the targets are then taken as noise-free)
    small_sample_correction : Bayesian GP variance with the amplitude and the constant mean estimated from
        the n training runs (see the module docstring); False: scikit-learn's plug-in variance
    n_restarts_optimizer : extra random starts of each GP's hyperparameter search
    random_state : seed of the GP optimiser restarts

    Attributes
    ----------
    mean_model_ : PhysicsMean
    residual_mean_ : (n_years,) ensemble mean of the residuals from the physics mean
    components_ : (n_components, n_years) principal directions of the residuals (orthonormal rows)
    scores_ : (n_runs, n_components) training coordinates on them (the GP targets)
    explained_variance_ratio_ : (n_components,) share of the residual variance of each kept component
    truncated_components_, truncated_scale_ : discarded directions and the predictive sd of their scores
        (sample sd, with the small-sample factor (1 + 1/n)·(t/z)² when that correction is on)
    truncation_variance_ : (n_years,) variance left out by the truncation
    gps_ : list of fitted GaussianProcessRegressor, one per component
    variance_scale_ : (n_components,) factor on each GP's variance (1 without the small-sample correction)
    x_mean_, x_scale_ : input standardisation
    X_train_, Y_train_ : training data

    Example
    -------
    >>> import numpy as np
    >>> X = np.linspace(2, 5, 8)[:, None]; Y = np.outer(1 / X[:, 0], np.arange(50.0))
    >>> em = PathwayEmulator(physics_mean=False).fit(X, Y)
    >>> mean, sd = em.predict([[3.5]], return_std=True)
    >>> mean.shape
    (1, 50)
    """

    def __init__(self, inputs=("ecs_eff",), physics_mean=True, variance_kept=0.99, max_components=10,
                 kernel="matern52", internal_variability=None, smoothing="auto", small_sample_correction=True,
                 n_restarts_optimizer=1, random_state=0):
        self.inputs = inputs
        self.physics_mean = physics_mean
        self.variance_kept = variance_kept
        self.max_components = max_components
        self.kernel = kernel
        self.internal_variability = internal_variability
        self.smoothing = smoothing
        self.small_sample_correction = small_sample_correction
        self.n_restarts_optimizer = n_restarts_optimizer
        self.random_state = random_state

    # -- fitting -----------------------------------------------------------------------------------------
    def _validate(self, X, Y, forcing, mean_params):
        inputs = tuple(self.inputs)
        X = np.asarray(X, float)
        if X.ndim == 1:
            X = X[:, None]
        Y = np.atleast_2d(np.asarray(Y, float))
        if X.shape[1] != len(inputs):
            raise EmulatorInputError(f"X has {X.shape[1]} columns but inputs are {inputs}")
        if X.shape[0] != Y.shape[0]:
            raise EmulatorInputError(f"X has {X.shape[0]} runs, Y has {Y.shape[0]}")
        if X.shape[0] < 3:
            raise EmulatorInputError(f"{X.shape[0]} training runs; at least 3 are needed")
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
            raise EmulatorInputError("X and Y must be finite")
        if not 0.0 < float(self.variance_kept) <= 1.0:
            raise EmulatorInputError(f"variance_kept must be in (0, 1], got {self.variance_kept}")
        if int(self.max_components) < 1:
            raise EmulatorInputError(f"max_components must be ≥ 1, got {self.max_components}")
        if self.kernel not in KERNELS:
            raise EmulatorInputError(f"unknown kernel {self.kernel!r}", hint=f"choose one of {', '.join(KERNELS)}")
        iv = self.internal_variability
        if iv is not None and (len(iv) != 2 or iv[0] < 0 or not 0 <= iv[1] < 1):
            raise EmulatorInputError(f"internal_variability must be (sd ≥ 0, 0 ≤ lag-1 < 1), got {iv}")
        if self.smoothing not in SMOOTHERS:
            raise EmulatorInputError(f"unknown smoothing {self.smoothing!r}", hint=f"choose one of {', '.join(SMOOTHERS)}")
        if self.smoothing == "response" and not self.physics_mean:
            raise EmulatorInputError("smoothing 'response' needs the forcing of the physics mean",
                                     hint="use 'gaussian' or 'none' with physics_mean=False")
        if self.physics_mean:
            if "ecs_eff" not in inputs:
                raise EmulatorInputError("the physics mean needs 'ecs_eff' among the inputs",
                                         hint="add it or set physics_mean=False")
            if forcing is None or mean_params is None:
                raise EmulatorInputError("the physics mean needs forcing= and mean_params=")
            forcing = np.asarray(forcing, float)
            if forcing.shape != (Y.shape[1],):
                raise EmulatorInputError(f"forcing has {forcing.shape} values for {Y.shape[1]} years")
            missing = [k for k in MEAN_PARAMETERS if k not in mean_params]
            if missing:
                raise EmulatorInputError(f"mean_params lacks {', '.join(missing)}")
            if np.any(X[:, inputs.index("ecs_eff")] <= 0):
                raise EmulatorInputError("ecs_eff must be > 0 for the physics mean")
        return X, Y, forcing

    def fit(self, X, Y, forcing=None, mean_params=None):
        """Fit to inputs X (n_runs, n_inputs) and pathways Y (n_runs, n_years); returns self.

        forcing : (n_years,) effective radiative forcing of the scenario (W m-2), for the physics mean
        mean_params : mapping with `f2x`, `heat_capacity`, `deep_heat_capacity`, `exchange`, `efficacy`
        """
        X, Y, forcing = self._validate(X, Y, forcing, mean_params)
        inputs = tuple(self.inputs)
        n, n_years = Y.shape
        self.X_train_, self.Y_train_ = X.copy(), Y.copy()
        if self.physics_mean:
            self.mean_model_ = PhysicsMean(n_years, forcing.copy(), *(float(mean_params[k]) for k in MEAN_PARAMETERS),
                                           ecs_index=inputs.index("ecs_eff"))
        else:
            self.mean_model_ = PhysicsMean(n_years)
        self.x_mean_ = X.mean(axis=0)
        scale = X.std(axis=0)
        self.x_scale_ = np.where(scale > 0, scale, 1.0)
        # the forced part of each single realisation; its internal variability re-enters as the AR(1) term
        residuals = forced_part(Y - self.mean_model_(X), self.smoothing, self.mean_model_.forcing)
        self.residual_mean_ = residuals.mean(axis=0)
        centred = residuals - self.residual_mean_
        u, s, vt = np.linalg.svd(centred, full_matrices=False)
        rank = int(np.sum(s > 1e-12 * max(s[0], 1e-300))) if s.size else 0
        total = np.sum(s[:rank] ** 2)
        if rank == 0:
            k = 1  # no residual variance: one (zero) component keeps the machinery uniform
            ratio = np.zeros(1)
        else:
            ratio = s[:rank] ** 2 / total
            k = int(np.searchsorted(np.cumsum(ratio), float(self.variance_kept) - 1e-12) + 1)
            k = max(1, min(k, int(self.max_components), rank))
        self.n_components_ = k
        self.components_ = vt[:k].copy()
        self.scores_ = u[:, :k] * s[:k]
        self.singular_values_ = s.copy()
        self.explained_variance_ratio_ = ratio[:k].copy()
        self.truncated_components_ = vt[k:rank].copy()
        self.truncated_scale_ = s[k:rank] / np.sqrt(max(n - 1, 1))
        if self.small_sample_correction:
            # a new run's score from a sample of n with estimated mean and variance (Student-t, n − 1 dof)
            self.truncated_scale_ = self.truncated_scale_ * np.sqrt((1.0 + 1.0 / n) * small_sample_factor(n))
        self.truncation_variance_ = (self.truncated_scale_ ** 2) @ (self.truncated_components_ ** 2) \
            if rank > k else np.zeros(n_years)
        self.internal_variability_ = None if self.internal_variability is None else \
            (float(self.internal_variability[0]), float(self.internal_variability[1]))
        Xs = self._standardise(X)
        # Tiny matrices: threaded BLAS only adds overhead (measured ×2 on 2 cores).
        with threadpool_limits(limits=1, user_api="blas"), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)
            self.gps_ = [self._fit_gp(Xs, self.scores_[:, j], j) for j in range(k)]
        # hyperparameters at a bound are worth knowing, not worth a console full of warnings
        self.fit_warnings_ = sorted({str(w.message).split(". Decreasing")[0].split(". Increasing")[0] for w in caught
                                     if issubclass(w.category, ConvergenceWarning)})
        self._set_variance_terms()
        return self

    def _set_variance_terms(self):
        """Per component: `variance_scale_` and the GLS terms of the unknown constant mean (`_mean_weights`,
        `_mean_precision`). Depends only on the fitted GPs, so loading a saved emulator rebuilds it exactly."""
        k = self.n_components_
        self.variance_scale_ = np.ones(k)
        self._mean_weights = [None] * k
        self._mean_precision = np.full(k, np.inf)
        if not self.small_sample_correction:
            return
        factor = small_sample_factor(len(self.X_train_))
        for j, gp in enumerate(self.gps_):
            y = np.asarray(gp.y_train_, float).reshape(-1)  # normalised scores (normalize_y)
            ones = np.ones_like(y)
            weights = cho_solve((gp.L_, True), ones)  # K⁻¹1
            precision = float(ones @ weights)  # 1ᵀK⁻¹1
            beta = float(weights @ y) / precision  # GLS constant mean
            r = y - beta
            amplitude = float(r @ cho_solve((gp.L_, True), r)) / (len(y) - 1)  # σ̂² relative to the fitted K
            self.variance_scale_[j] = amplitude * factor
            self._mean_weights[j] = weights
            self._mean_precision[j] = precision

    def _fit_gp(self, Xs, z, j, kernel=None):
        gp = GaussianProcessRegressor(
            kernel=kernel if kernel is not None else make_kernel(self.kernel, Xs.shape[1]),
            normalize_y=True,
            n_restarts_optimizer=int(self.n_restarts_optimizer) if kernel is None else 0,
            optimizer="fmin_l_bfgs_b" if kernel is None else None,
            random_state=None if self.random_state is None else int(self.random_state) + j,
        )
        return gp.fit(Xs, z)

    def _standardise(self, X):
        X = np.asarray(X, float)
        if X.ndim == 1:
            X = X.reshape(-1, len(self.x_mean_))
        if X.shape[1] != len(self.x_mean_):
            raise EmulatorInputError(f"X has {X.shape[1]} columns, the emulator {len(self.x_mean_)} inputs {tuple(self.inputs)}")
        return (X - self.x_mean_) / self.x_scale_

    # -- prediction ---------------------------------------------------------------------------------------
    def _check_fitted(self):
        if not hasattr(self, "gps_"):
            raise EmulatorInputError("this PathwayEmulator is not fitted yet; call fit first")

    #: above this many points with a single input, GP predictions are interpolated from a dense grid
    exact_limit = 4096
    grid_points = 8193

    def component_predictions(self, X):
        """GP mean and sd of each component at X: two arrays (n_cases, n_components).

        With one input and more than `exact_limit` points (large input distributions), each GP is evaluated
        exactly on a `grid_points` grid spanning them and linearly interpolated (the Matérn 5/2 and RBF posterior
        mean and sd are smooth; error below 1e-3 of the component's scale, far below the predictive sd; tested).
        """
        self._check_fitted()
        Xs = self._standardise(X)
        if Xs.shape[1] == 1 and Xs.shape[0] > self.exact_limit:
            grid = np.linspace(Xs.min(), Xs.max(), self.grid_points)[:, None]
            mu_g, sd_g = self._component_predictions_exact(grid)
            x = Xs[:, 0]
            mu = np.column_stack([np.interp(x, grid[:, 0], mu_g[:, j]) for j in range(self.n_components_)])
            sd = np.column_stack([np.interp(x, grid[:, 0], sd_g[:, j]) for j in range(self.n_components_)])
            return mu, sd
        return self._component_predictions_exact(Xs)

    def _component_predictions_exact(self, Xs):
        mu = np.empty((Xs.shape[0], self.n_components_))
        sd = np.empty_like(mu)

        def one(j):
            gp = self.gps_[j]
            mu[:, j], sd[:, j] = gp.predict(Xs, return_std=True)
            if self._mean_weights[j] is not None:
                # Bayesian emulator variance: σ̂² [c** − k*ᵀK⁻¹k* + (1 − 1ᵀK⁻¹k*)² / 1ᵀK⁻¹1], widened to t's 90 %
                unexplained = 1.0 - gp.kernel_(Xs, gp.X_train_) @ self._mean_weights[j]
                var = sd[:, j] ** 2 + (gp._y_train_std ** 2) * unexplained ** 2 / self._mean_precision[j]
                sd[:, j] = np.sqrt(self.variance_scale_[j] * var)

        if Xs.shape[0] >= 5000 and self.n_components_ > 1:
            # large batches: the GPs' numpy work releases the GIL, so threads use both cores
            with ThreadPoolExecutor(max_workers=min(os.cpu_count() or 1, self.n_components_)) as pool:
                list(pool.map(one, range(self.n_components_)))
        else:
            for j in range(self.n_components_):
                one(j)
        return mu, sd

    def _base(self, X, mu):
        X = np.asarray(X, float).reshape(-1, len(self.x_mean_))
        return self.mean_model_(X) + self.residual_mean_ + mu @ self.components_

    @property
    def internal_variance_(self) -> float:
        return 0.0 if self.internal_variability_ is None else self.internal_variability_[0] ** 2

    @property
    def prediction_target_(self) -> str:
        """What `predict` and `sample_paths` describe, in words (written into the outputs' attributes)."""
        self._check_fitted()
        if self.internal_variability_ is None or self.internal_variability_[0] == 0:
            return ("forced response: mean = forced warming; spread = emulator and structural (model-to-model) "
                    "uncertainty only, no internal variability")
        sd, phi = self.internal_variability_
        return ("annual warming of a single realisation: mean = forced warming; spread = emulator and structural "
                f"(model-to-model) uncertainty + internal variability (AR(1), sd {sd:.3f} K, lag-1 {phi:.2f})")

    def predict(self, X, return_std: bool = False):
        """Mean pathway (n_cases, n_years) at inputs X; with `return_std` also the predictive sd per year.

        The mean is the forced response; the sd is that of a single realisation's annual warming when
        internal variability is set, of the forced response otherwise (`prediction_target_`)."""
        mu, sd = self.component_predictions(X)
        mean = self._base(X, mu)
        if not return_std:
            return mean
        var = (sd ** 2) @ (self.components_ ** 2) + self.truncation_variance_ + self.internal_variance_
        return mean, np.sqrt(var)

    def spread_of_mean(self, X, last_years: int = 10) -> tuple[np.ndarray, np.ndarray]:
        """Sd of the mean over the last `last_years` years at X, in two parts: (forced response — emulator
        and structural, through the components and the truncation —, internal variability). Each (n_cases,).

        The internal part is the sd of an L-year mean of AR(1) noise, σ² Σ_s Σ_t φ^|s−t| / L² (textbook).
        """
        _, sd = self.component_predictions(X)
        last = int(min(max(1, last_years), self.components_.shape[1]))
        kept = self.components_[:, -last:].mean(axis=1)
        forced = (sd ** 2) @ (kept ** 2)
        if len(self.truncated_scale_):
            forced = forced + (self.truncated_scale_ ** 2) @ (self.truncated_components_[:, -last:].mean(axis=1) ** 2)
        internal = 0.0
        if self.internal_variability_ is not None:
            sd_iv, phi = self.internal_variability_
            lags = np.abs(np.subtract.outer(np.arange(last), np.arange(last)))
            internal = sd_iv ** 2 * np.sum(phi ** lags) / last ** 2
        return np.sqrt(forced), np.full(len(forced), np.sqrt(internal))

    def sample_paths(self, X, n_samples: int = 1000, random_state=None):
        """Random pathways from the predictive distribution: array (n_cases, n_samples, n_years).

        Components are drawn from their GP marginals at each input (Gaussian, with the small-sample variance
        when that correction is on); discarded components from their training spread; internal variability as
        AR(1) noise, so each pathway is one realisation. Correlations between years are kept, so derived
        quantities (decadal means, crossing years) are sampled consistently.
        """
        rng = np.random.default_rng(random_state)
        mu, sd = self.component_predictions(X)
        base = self._base(X, mu)
        n_cases, n_years = base.shape
        shape = (n_cases, int(n_samples))
        # all cases and samples at once: (cases, samples, components) @ (components, years)
        deviations = sd[:, None, :] * rng.standard_normal(shape + (self.n_components_,))
        out = np.matmul(deviations, self.components_)
        out += base[:, None, :]
        if len(self.truncated_scale_):
            xi = rng.standard_normal(shape + (len(self.truncated_scale_),)) * self.truncated_scale_
            out += np.matmul(xi, self.truncated_components_)
        if self.internal_variability_ is not None and self.internal_variability_[0] > 0:
            out += ar1_noise(rng, shape + (n_years,), *self.internal_variability_)
        return out

"""`PathwayEmulator`: warming pathways as a function of sensitivity inputs, with calibrated uncertainty.

What is predicted: the annual warming of *one realisation* of a model with the given inputs. Its mean is
the forced response; its spread = uncertainty of the forced response (the emulator's, including the
model-to-model "structural" scatter the inputs do not explain) + internal variability (when given).

Mean: the two-layer response (emulator.physics_mean) at each input. The training pathways are single noisy
realisations, so their residuals from that mean are first smoothed along years (emulator.smoothing: the
forced part). The smoothed residuals are reduced to principal components (SVD) keeping at least
`variance_kept` of their variance; each component's score gets a Bayesian GP (emulator.component_gp: constant
mean and amplitude integrated out, correlation parameters integrated over a grid; a Student-t
with n − 1 degrees of freedom for a new model).

A new model's forced residual is: the components' t variables through their directions + the part outside the
kept components — the basis error of Higdon et al. (2008, JASA, from memory), estimated by leave-one-model-out:
each training model's residual outside the components of the others — + the internal variability the smoothing
removes. The internal variability the smoothing keeps stays in the training residuals, so it is already in the
GP's nugget and the basis error: only (I − S)·ε is added (S the smoother, ε AR(1) from the control runs), so it
is not counted twice. (The truth's ε = Sε + (I − S)ε also has the cross term 2·SΣ(I − S), which this split
omits: for a last-decade mean, AR(1) sd 0.1 K, it is 1.3e-4 K² at lag-1 0.5 and 3.3e-4 K² at 0.8 — under 1 % of
the end-of-pathway variance of 5–12 models; computed with the response smoother, 100 years.) The basis error's covariance is estimated from the n training models' leave-one-out
residuals alone, so, as for a component's amplitude, its scale is integrated out under the reference prior
p(σ²) ∝ 1/σ² of a zero-mean normal: a multivariate Student-t with n degrees of freedom (Gelman et al.,
Bayesian Data Analysis, ch. 3, from memory; the mean is already in the leave-one-out departures) — with 4
training models its variance is twice the plug-in one, which a Gaussian with the plug-in variance ignored.
Quantiles per year: the sum is matched to one Student-t (scale² the sum of the terms' scale², degrees of freedom
by Welch–Satterthwaite); exact when one component dominates.
"""
from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from scipy.stats import norm, t as student_t
from sklearn.base import BaseEstimator
from threadpoolctl import threadpool_limits  # installed with scikit-learn

from .component_gp import ComponentGP
from .errors import EmulatorInputError
from .physics_mean import MEAN_PARAMETERS, PhysicsMean
from .settings import KERNELS, SMOOTHERS  # declared with the estimator's constraints
from .smoothing import gaussian_smoother, response_span, smoother_kind
from .variability import ar1_noise

__all__ = ["PathwayEmulator", "t_sd_factor", "KERNELS"]


#: inputs that can drive the physics mean (λ = F2x / sensitivity): the 150-year effective sensitivity, or the
#: late-segment one, nearer an equilibrium value (see the README on published equilibrium ranges)
SENSITIVITY_INPUTS = ("ecs_eff", "ecs_late")


def sensitivity_index(inputs) -> int:
    """Column of the input that drives the physics mean: `ecs_eff` if given, else `ecs_late`."""
    inputs = tuple(inputs)
    return inputs.index("ecs_eff") if "ecs_eff" in inputs else inputs.index("ecs_late")


def t_sd_factor(dof) -> np.ndarray:
    """Standard deviation of a Student-t per unit scale: √(ν/(ν − 2)); for ν ≤ 2 (infinite variance) the
    Gaussian with the same central 90 % interval, t_0.95,ν / z_0.95 (scipy.stats quantiles)."""
    dof = np.asarray(dof, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(dof > 2, np.sqrt(dof / (dof - 2.0)), student_t.ppf(0.95, np.maximum(dof, 1.0)) / norm.ppf(0.95))
    return np.where(np.isinf(dof), 1.0, factor)


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
    basis_error_ : (n_runs, n_years) leave-one-model-out residuals outside the kept components, over √n
    truncation_variance_ : (n_years,) their sum of squares per year: the basis error's scale² (its variance is
        that times ν/(ν − 2), ν = `basis_dof_`)
    gps_ : list of fitted `ComponentGP`, one per component
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
            if not set(SENSITIVITY_INPUTS) & set(inputs):
                raise EmulatorInputError("the physics mean needs 'ecs_eff' among the inputs (or 'ecs_late')",
                                         hint="add it or set physics_mean=False")
            if forcing is None or mean_params is None:
                raise EmulatorInputError("the physics mean needs forcing= and mean_params=")
            forcing = np.asarray(forcing, float)
            if forcing.shape != (Y.shape[1],):
                raise EmulatorInputError(f"forcing has {forcing.shape} values for {Y.shape[1]} years")
            missing = [k for k in MEAN_PARAMETERS if k not in mean_params]
            if missing:
                raise EmulatorInputError(f"mean_params lacks {', '.join(missing)}")
            if np.any(X[:, sensitivity_index(inputs)] <= 0):
                raise EmulatorInputError(f"{inputs[sensitivity_index(inputs)]} must be > 0 for the physics mean")
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
            extraction = {k: mean_params[k] for k in ("forcing_ratio", "fit_years") if mean_params.get(k) is not None}
            self.mean_model_ = PhysicsMean(n_years, forcing.copy(), *(float(mean_params[k]) for k in MEAN_PARAMETERS),
                                           ecs_index=sensitivity_index(inputs), **extraction)
        else:
            self.mean_model_ = PhysicsMean(n_years)
        self.x_mean_ = X.mean(axis=0)
        scale = X.std(axis=0)
        self.x_scale_ = np.where(scale > 0, scale, 1.0)
        self._set_smoother()
        # the forced part of each single realisation; what the smoothing removes re-enters as internal variability
        residuals = self._smooth(Y - self.mean_model_(X))
        self.residual_mean_ = residuals.mean(axis=0)
        self.components_, self.scores_, ratio = principal_components(residuals - self.residual_mean_,
                                                                     self.variance_kept, self.max_components)
        self.n_components_ = len(self.components_)
        self.explained_variance_ratio_ = ratio
        self.basis_error_ = basis_error(residuals, self.n_components_)
        self.truncation_variance_ = np.sum(self.basis_error_ ** 2, axis=0)
        self.internal_variability_ = None if self.internal_variability is None else \
            (float(self.internal_variability[0]), float(self.internal_variability[1]))
        self._set_internal_variance()
        Xs = self._standardise(X)
        # Tiny matrices: threaded BLAS only adds overhead (measured ×2 on 2 cores).
        with threadpool_limits(limits=1, user_api="blas"):
            self.gps_ = [self._component_gp().fit(Xs, self.scores_[:, j]) for j in range(self.n_components_)]
        self.fit_warnings_ = []
        return self

    def _component_gp(self) -> ComponentGP:
        return ComponentGP(self.kernel, bool(self.small_sample_correction))

    def _set_smoother(self):
        """The smoother S along years: `_span` (orthonormal columns, S = U Uᵀ) for "response", `_smoother` (a full
        matrix) for "gaussian", both None for "none" (S = I). Rebuilt from the forcing on loading."""
        kind = smoother_kind(self.smoothing, self.mean_model_.forcing)
        n_years = self.mean_model_.n_years
        self._span = response_span(self.mean_model_.forcing) if kind == "response" else None
        self._smoother = gaussian_smoother(n_years) if kind == "gaussian" and n_years >= 3 else None
        self._smooths = kind != "none" and n_years >= 3

    def _smooth(self, series):
        if self._span is not None:
            return (series @ self._span) @ self._span.T
        if self._smoother is not None:
            return series @ self._smoother.T
        return np.array(series, float)

    def _unsmoothed(self, series):
        """(I − S) applied along the last axis: the part of a series the smoothing removes."""
        if not self._smooths:
            return np.zeros_like(series)
        return series - self._smooth(series)

    def _set_internal_variance(self):
        """Per-year variance of (I − S)ε with ε the AR(1) internal variability (0 without one)."""
        n_years = self.mean_model_.n_years
        self._iv_covariance = None
        self.internal_variance_ = np.zeros(n_years)
        if self.internal_variability_ is None or self.internal_variability_[0] == 0 or not self._smooths:
            return
        sd, phi = self.internal_variability_
        lags = np.abs(np.subtract.outer(np.arange(n_years), np.arange(n_years)))
        cov = sd ** 2 * phi ** lags  # AR(1) covariance (textbook)
        kept = self._unsmoothed(np.eye(n_years))  # rows: (I − S) e_i, i.e. (I − S)ᵀ
        self._iv_covariance = kept.T @ cov @ kept
        self.internal_variance_ = np.diag(self._iv_covariance).copy()

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
        """Location and scale of each component's predictive t at X: two arrays (n_cases, n_components);
        degrees of freedom `dof_`.

        With one input and more than `exact_limit` points (large input distributions), each GP is evaluated
        exactly on a `grid_points` grid spanning them and linearly interpolated (the Matérn 5/2 and RBF posterior
        location and scale are smooth; error below 1e-3 of the component's scale, far below the predictive sd; tested).
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

    @property
    def dof_(self) -> np.ndarray:
        """Degrees of freedom of each component's predictive t (inf: Gaussian)."""
        return np.array([gp.dof_ for gp in self.gps_], float)

    @property
    def basis_dof_(self) -> float:
        """Degrees of freedom of the basis error's multivariate t: the n leave-one-out residuals it is estimated
        from (inf, a Gaussian, without the small-sample correction)."""
        return float(len(self.basis_error_)) if self.small_sample_correction else np.inf

    def _component_predictions_exact(self, Xs):
        mu = np.empty((Xs.shape[0], self.n_components_))
        sd = np.empty_like(mu)

        def one(j):
            mu[:, j], sd[:, j] = self.gps_[j].predict(Xs)

        if Xs.shape[0] >= 5000 and self.n_components_ > 1:
            # large batches: numpy's work releases the GIL, so threads use both cores
            with ThreadPoolExecutor(max_workers=min(os.cpu_count() or 1, self.n_components_)) as pool:
                list(pool.map(one, range(self.n_components_)))
        else:
            for j in range(self.n_components_):
                one(j)
        return mu, sd

    def _base(self, X, mu):
        X = np.asarray(X, float).reshape(-1, len(self.x_mean_))
        ecs = X[:, self.mean_model_.ecs_index] if self.mean_model_.forcing is not None else None
        if ecs is not None and np.any(ecs <= 0):
            raise EmulatorInputError(f"sensitivity {float(ecs[ecs <= 0][0]):g} K: the two-layer mean needs a positive "
                                     "sensitivity", hint="predict at ecs_eff > 0")
        return self.mean_model_(X) + self.residual_mean_ + mu @ self.components_

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
        mu, scale = self.component_predictions(X)
        mean = self._base(X, mu)
        if not return_std:
            return mean
        sd = scale * t_sd_factor(self.dof_)
        basis = self.truncation_variance_ * t_sd_factor(self.basis_dof_) ** 2
        var = (sd ** 2) @ (self.components_ ** 2) + basis + self.internal_variance_
        return mean, np.sqrt(var)

    def quantiles(self, X, probabilities) -> np.ndarray:
        """Per-year quantiles (n_cases, n_probabilities, n_years) of the predictive distribution at X.

        One Student-t per year: scale² = Σ_j s_j² v_jt² + basis error + internal variability, degrees of
        freedom ν = (scale²)² / [Σ_j (s_j² v_jt²)² / ν_j + (basis error)² / ν_b] (Welch–Satterthwaite, from
        memory; ν_b = `basis_dof_`, the internal variability Gaussian); with a single component and nothing
        else it is that component's t exactly (scipy.stats.t).
        """
        mu, scale = self.component_predictions(X)
        mean = self._base(X, mu)
        terms = (scale ** 2)[:, :, None] * (self.components_ ** 2)[None, :, :]  # (cases, components, years)
        terms = np.concatenate([terms, np.broadcast_to(self.truncation_variance_, (len(mu), 1, terms.shape[2]))], 1)
        total = terms.sum(axis=1) + self.internal_variance_
        dof = np.r_[self.dof_, self.basis_dof_][None, :, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            denominator = np.sum(np.where(np.isinf(dof), 0.0, terms ** 2 / dof), axis=1)
            nu = np.where(denominator > 0, total ** 2 / denominator, np.inf)
        p = np.asarray(probabilities, float)[None, :, None]
        factor = np.where(np.isinf(nu)[:, None, :], norm.ppf(p), student_t.ppf(p, np.minimum(nu, 1e6)[:, None, :]))
        return mean[:, None, :] + np.sqrt(total)[:, None, :] * factor

    def spread_of_mean(self, X, last_years: int = 10) -> tuple[np.ndarray, np.ndarray]:
        """Sd of the mean over the last `last_years` years at X, in two parts: (forced response — emulator,
        structural and basis error —, internal variability the smoothing removed). Each (n_cases,)."""
        mu, scale = self.component_predictions(X)
        last = int(min(max(1, last_years), self.components_.shape[1]))
        kept = self.components_[:, -last:].mean(axis=1)
        forced = ((scale * t_sd_factor(self.dof_)) ** 2) @ (kept ** 2)
        basis = np.sum(self.basis_error_[:, -last:].mean(axis=1) ** 2) * float(t_sd_factor(self.basis_dof_)) ** 2
        forced = forced + basis
        internal = 0.0
        if self._iv_covariance is not None:
            internal = float(self._iv_covariance[-last:, -last:].sum()) / last ** 2
        return np.sqrt(forced), np.full(len(forced), np.sqrt(internal))

    def sample_paths(self, X, n_samples: int = 1000, random_state=None):
        """Random pathways from the predictive distribution: array (n_cases, n_samples, n_years).

        Components are drawn from their predictive t (Gaussian without the small-sample correction); the basis
        error as Σ_i ξ_i e_i/√n over the leave-one-out residuals e_i, with ξ_i standard normal times one
        √(ν/χ²_ν) per pathway (a multivariate t with ν = `basis_dof_`, as a normal over an inverse-χ² scale); internal
        variability as AR(1) noise less its smoothed part, so each pathway is one realisation. Correlations
        between years are kept, so derived quantities (decadal means, crossing years) are sampled consistently.
        """
        rng = np.random.default_rng(random_state)
        mu, scale = self.component_predictions(X)
        base = self._base(X, mu)
        n_cases, n_years = base.shape
        shape = (n_cases, int(n_samples))
        draws = np.stack([rng.standard_t(dof, shape) if np.isfinite(dof) else rng.standard_normal(shape)
                          for dof in self.dof_], axis=-1)
        out = np.matmul(scale[:, None, :] * draws, self.components_)
        out += base[:, None, :]
        if len(self.basis_error_):
            basis = np.matmul(rng.standard_normal(shape + (len(self.basis_error_),)), self.basis_error_)
            if np.isfinite(self.basis_dof_):
                basis *= np.sqrt(self.basis_dof_ / rng.chisquare(self.basis_dof_, shape))[..., None]
            out += basis
        if self.internal_variability_ is not None and self.internal_variability_[0] > 0 and self._smooths:
            noise = ar1_noise(rng, shape + (n_years,), *self.internal_variability_)
            out += self._unsmoothed(noise)
        return out


def principal_components(centred, variance_kept: float, max_components: int):
    """(components (k, n_years), scores (n, k), explained variance ratios (k,)) of centred residuals:
    the fewest leading directions keeping `variance_kept` of the variance, at most `max_components`."""
    u, s, vt = np.linalg.svd(centred, full_matrices=False)
    rank = int(np.sum(s > 1e-12 * max(s[0], 1e-300))) if s.size else 0
    if rank == 0:  # no residual variance: one (zero) component keeps the machinery uniform
        return vt[:1].copy(), np.zeros((centred.shape[0], 1)), np.zeros(1)
    ratio = s[:rank] ** 2 / np.sum(s[:rank] ** 2)
    k = int(np.searchsorted(np.cumsum(ratio), float(variance_kept) - 1e-12) + 1)
    k = max(1, min(k, int(max_components), rank))
    return vt[:k].copy(), u[:, :k] * s[:k], ratio[:k].copy()


def basis_error(residuals, n_components: int) -> np.ndarray:
    """(n, n_years) rows e_i/√n: each model's residual outside the leading components of the others' (their
    mean removed) — the basis (discrepancy) error of Higdon et al. (2008, JASA; from memory) estimated by
    leave-one-model-out, so it also holds what a new model has outside the span of the training models.
    Σ_i (e_i/√n)² per year is its variance; Σ_i ξ_i e_i/√n, ξ_i ~ N(0, 1), a draw with that covariance."""
    n = residuals.shape[0]
    rows = []
    for i in range(n):
        others = np.delete(residuals, i, axis=0)
        centre = others.mean(axis=0)
        _, s, vt = np.linalg.svd(others - centre, full_matrices=False)
        rank = int(np.sum(s > 1e-12 * max(s[0], 1e-300))) if s.size else 0
        basis = vt[: min(n_components, rank)]
        departure = residuals[i] - centre
        rows.append(departure - (departure @ basis.T) @ basis)
    return np.array(rows) / np.sqrt(n)

"""`ParameterEmulator`: the two-layer parameter vector of a model as a function of its sensitivity inputs.

Each model's abrupt run calibrates (emulator.calibrate; Geoffroy et al. 2013a,b) a parameter vector
(F2x, λ, C, C_d, γ, ε). Across an ensemble those vectors follow the inputs (a model with a high ecs_eff has
a small λ) and scatter about that dependence in a correlated way (a large deep-ocean heat capacity comes with
its own exchange coefficient). This estimator learns both, so that any forcing pathway can be run through
sampled parameter vectors (emulator.parameter_pathways) and inherit the ensemble's full physical spread.

Model: the transformed vector
    θ = (ln F2x, ln ECS₂ₗ, ln C, ln C_d, ln γ, ln ε),   ECS₂ₗ = F2x / λ,
is linear in the features (1, g(x₁), …), g = ln for an input positive on all training models (ecs_eff, tcr,
erf_4x), identity otherwise (feedback_change). ln ECS₂ₗ rather than ln λ: with ecs_eff among the inputs its
dependence is then exactly linear (slope 1 when the calibration and the table use the same years), and λ
follows F2x — the correlation the ensemble shows by construction. Logs keep every sampled value positive.

Uncertainty (Bayesian multivariate linear regression with a flat prior on the coefficients, Gelman et al.,
Bayesian Data Analysis, ch. 14, from memory): for one parameter j the predictive distribution at a new x is
Student-t with n − p degrees of freedom, location x B̂_j and scale² s_jj (1 + x (XᵀX)⁻¹ xᵀ), s_jj the residual
variance over n − p; that marginal is exact under Gaussian scatter. The parameters are sampled jointly as the
multivariate t with that location, scale matrix S (1 + x (XᵀX)⁻¹ xᵀ), S = residual covariance over n − p,
and n − p degrees of freedom: its marginals are exactly those Student-t distributions and its correlations
are the residual correlations (the structural scatter the inputs do not explain). `small_sample=False`
uses the Gaussian plug-in instead; `structural_scatter=False` returns the regression mean only.
One point per model: members are averaged before fitting (one model, one vote).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import t as student_t
from sklearn.base import BaseEstimator

from .ebm import TwoLayerParameters
from .errors import EmulatorInputError

__all__ = ["ParameterEmulator", "PARAMETER_NAMES", "TRANSFORMED_NAMES", "parameter_table"]

#: The calibrated vector, in the order of the columns `fit` reads (calibration.csv names; f2x = forcing_4x / 2).
PARAMETER_NAMES = ("f2x", "lambda_", "heat_capacity", "deep_heat_capacity", "exchange", "efficacy")
#: What the regression models, one column per parameter.
TRANSFORMED_NAMES = ("ln_f2x", "ln_ecs_two_layer", "ln_heat_capacity", "ln_deep_heat_capacity", "ln_exchange",
                     "ln_efficacy")
#: A residual variance below this (in ln units²) is treated as none: the parameter follows the inputs exactly.
_TINY_VARIANCE = 1e-20


def parameter_table(calibration: pd.DataFrame, forcing_ratio: float = 2.0) -> pd.DataFrame:
    """(model, member, f2x, lambda_, …) from a calibration table (`calibration.csv`), runs with status ok only."""
    ok = calibration[calibration["status"] == "ok"].copy()
    ok["f2x"] = ok["forcing_4x"].astype(float) / forcing_ratio
    return ok[["model", "member", *PARAMETER_NAMES]].reset_index(drop=True)


def _transform(parameters: np.ndarray) -> np.ndarray:
    f2x, lam, c, cd, gam, eff = parameters.T
    return np.column_stack([np.log(f2x), np.log(f2x / lam), np.log(c), np.log(cd), np.log(gam), np.log(eff)])


def _untransform(theta: np.ndarray) -> dict:
    """{name: array} from θ (..., 6)."""
    f2x = np.exp(theta[..., 0])
    return {"f2x": f2x, "lambda_": f2x / np.exp(theta[..., 1]), "heat_capacity": np.exp(theta[..., 2]),
            "deep_heat_capacity": np.exp(theta[..., 3]), "exchange": np.exp(theta[..., 4]),
            "efficacy": np.exp(theta[..., 5])}


def _psd_sqrt(cov: np.ndarray) -> np.ndarray:
    """A matrix L with L Lᵀ = cov for a positive semi-definite cov. A parameter with no residual variance
    (below 1e-12 of the largest: it follows the inputs exactly) gets a zero row, so rounding in the
    decomposition of the others cannot leak into it; Cholesky would fail on it, this does not."""
    variance = np.diag(cov)
    free = variance > 1e-12 * max(float(variance.max()), _TINY_VARIANCE)
    out = np.zeros_like(cov)
    if free.any():
        sub = cov[np.ix_(free, free)]
        values, vectors = np.linalg.eigh((sub + sub.T) / 2.0)
        out[np.ix_(free, free)] = vectors * np.sqrt(np.clip(values, 0.0, None))
    return out


class ParameterEmulator(BaseEstimator):
    """Joint predictive distribution of the two-layer parameter vector at given sensitivity inputs.

    Parameters
    ----------
    inputs : names of the input columns (sensitivity-table columns), default ("ecs_eff",)
    structural_scatter : sample the residual scatter between models (else the regression mean only)
    small_sample : Student-t predictive with n − p degrees of freedom and the coefficients' uncertainty
        (else a Gaussian with the plug-in residual covariance)

    Attributes
    ----------
    coef_ : (n_features, 6) regression coefficients of θ on the features (1, g(x)…)
    log_inputs_ : (n_inputs,) bool, which inputs enter as their logarithm
    residual_cov_ : (6, 6) residual covariance of θ over n − p degrees of freedom
    scatter_sqrt_ : (6, 6) its square root used for sampling
    dof_ : n − p, degrees of freedom of the predictive t
    gram_inv_ : (n_features, n_features) (XᵀX)⁻¹ (pseudo-inverse)
    n_models_ : number of training models; x_min_, x_max_ : the training range of each input
    parameters_train_ : (n_models, 6) the training vectors (members averaged in θ)

    Example
    -------
    >>> import numpy as np
    >>> ecs = np.array([2.0, 2.6, 3.1, 3.7, 4.4, 5.0])
    >>> f2x = np.array([3.5, 3.9, 3.6, 3.8, 3.4, 3.7])
    >>> P = np.column_stack([f2x, f2x / ecs, [7, 8, 7.5, 8.2, 6.9, 7.7], [90, 120, 100, 80, 110, 95],
    ...                      [0.6, 0.7, 0.65, 0.8, 0.55, 0.75], np.ones(6)])
    >>> em = ParameterEmulator().fit(ecs[:, None], P)
    >>> round(float(em.predict([[3.0]])["f2x"][0] / em.predict([[3.0]])["lambda_"][0]), 6)
    3.0
    """

    _parameter_constraints = {"inputs": "non-empty sequence of column names", "structural_scatter": "bool",
                              "small_sample": "bool"}

    def __init__(self, inputs=("ecs_eff",), structural_scatter=True, small_sample=True):
        self.inputs = inputs
        self.structural_scatter = structural_scatter
        self.small_sample = small_sample

    # -- fitting -----------------------------------------------------------------------------------------
    def _check_X(self, X) -> np.ndarray:
        X = np.asarray(X, float)
        if X.ndim == 1:
            X = X[:, None]
        if X.ndim != 2 or X.shape[1] != len(tuple(self.inputs)):
            raise EmulatorInputError(f"inputs have {X.shape[-1] if X.ndim else 0} columns, the emulator "
                                     f"expects {len(tuple(self.inputs))} ({', '.join(self.inputs)})")
        if not np.all(np.isfinite(X)):
            raise EmulatorInputError("inputs must be finite")
        return X

    def _features(self, X) -> np.ndarray:
        X = self._check_X(X)
        if np.any(X[:, self.log_inputs_] <= 0):
            bad = [name for name, log in zip(self.inputs, self.log_inputs_) if log]
            raise EmulatorInputError(f"{', '.join(bad)} must be > 0 (they enter the parameter emulator as logs)")
        g = np.where(self.log_inputs_, np.log(np.where(self.log_inputs_, X, 1.0)), X)
        return np.column_stack([np.ones(len(X)), g])

    def fit(self, X, parameters, groups=None):
        """Fit to inputs X (n_runs, n_inputs) and calibrated vectors (n_runs, 6) in `PARAMETER_NAMES` order
        (or a DataFrame with those columns); `groups` (model labels) averages the members of a model first.
        Returns self."""
        if not tuple(self.inputs) or not all(isinstance(n, str) for n in self.inputs):
            raise EmulatorInputError(f"inputs must be a non-empty sequence of column names, got {self.inputs!r}")
        for name in ("structural_scatter", "small_sample"):
            if not isinstance(getattr(self, name), (bool, np.bool_)):
                raise EmulatorInputError(f"{name} must be true or false, got {getattr(self, name)!r}")
        X = self._check_X(X)
        if isinstance(parameters, pd.DataFrame):
            missing = [c for c in PARAMETER_NAMES if c not in parameters.columns]
            if missing:
                raise EmulatorInputError(f"parameter table lacks {', '.join(missing)}")
            parameters = parameters[list(PARAMETER_NAMES)].to_numpy(float)
        P = np.atleast_2d(np.asarray(parameters, float))
        if P.shape != (X.shape[0], len(PARAMETER_NAMES)):
            raise EmulatorInputError(f"parameters have shape {P.shape}; expected ({X.shape[0]}, {len(PARAMETER_NAMES)})")
        if not np.all(np.isfinite(P)) or np.any(P <= 0):
            raise EmulatorInputError("calibrated parameters must be finite and > 0 (λ in the λ > 0 convention)")
        theta = _transform(P)
        if groups is not None:
            groups = np.asarray(groups)
            labels = list(dict.fromkeys(groups))
            X = np.array([X[groups == g].mean(axis=0) for g in labels])
            theta = np.array([theta[groups == g].mean(axis=0) for g in labels])
        n = len(X)
        self.log_inputs_ = np.all(X > 0, axis=0)
        features = self._features(X)
        rank = np.linalg.matrix_rank(features)
        self.dof_ = int(n - rank)
        if self.structural_scatter and self.dof_ < 1:
            raise EmulatorInputError(f"{n} model(s) for {features.shape[1]} regression terms leave no degree of "
                                     "freedom for the scatter between models",
                                     hint="use more models or fewer inputs, or structural_scatter=false")
        self.coef_, *_ = np.linalg.lstsq(features, theta, rcond=None)
        self.gram_inv_ = np.linalg.pinv(features.T @ features)
        residuals = theta - features @ self.coef_
        cov = residuals.T @ residuals / max(self.dof_, 1)
        cov[np.abs(cov) < _TINY_VARIANCE] = 0.0
        self.residual_cov_ = cov
        self.scatter_sqrt_ = _psd_sqrt(cov)
        self.n_models_ = n
        self.x_min_, self.x_max_ = X.min(axis=0), X.max(axis=0)
        self.X_train_ = X
        self.parameters_train_ = np.column_stack([_untransform(theta)[k] for k in PARAMETER_NAMES])
        return self

    # -- prediction --------------------------------------------------------------------------------------
    def _leverage(self, features) -> np.ndarray:
        return np.einsum("ij,jk,ik->i", features, self.gram_inv_, features)

    def predict_transformed(self, X) -> tuple[np.ndarray, np.ndarray]:
        """(location (m, 6), scale multiplier (m,)) of θ: the predictive scale matrix is multiplier² × residual_cov_."""
        features = self._features(X)
        location = features @ self.coef_
        multiplier = np.sqrt(1.0 + self._leverage(features)) if self.small_sample else np.ones(len(features))
        return location, multiplier

    def predict(self, X) -> dict:
        """{parameter: (m,) array}: the predictive median of each parameter (the regression mean of θ,
        back-transformed; λ = F2x / ECS₂ₗ at those medians)."""
        location, _ = self.predict_transformed(X)
        return _untransform(location)

    def interval(self, X, level: float = 0.9) -> dict:
        """{parameter: (m, 2) array}: central predictive interval of each parameter on its own, from the
        marginal Student-t (λ's from ln λ = ln F2x − ln ECS₂ₗ, whose variance follows from the covariance)."""
        location, multiplier = self.predict_transformed(X)
        # ln λ = θ0 − θ1: its location and variance from the joint distribution
        direction = np.eye(6)
        direction[1] = [1.0, -1.0, 0, 0, 0, 0]
        loc = location @ direction.T
        sd = np.sqrt(np.einsum("ij,jk,ik->i", direction, self.residual_cov_, direction))[None, :] * multiplier[:, None]
        q = self._quantile(0.5 + level / 2.0)
        names = ("f2x", "lambda_", "heat_capacity", "deep_heat_capacity", "exchange", "efficacy")
        return {name: np.exp(np.stack([loc[:, j] - q * sd[:, j], loc[:, j] + q * sd[:, j]], axis=-1))
                for j, name in enumerate(names)}

    def _quantile(self, p: float) -> float:
        if not self.structural_scatter:
            return 0.0
        if self.small_sample:
            return float(student_t.ppf(p, self.dof_))
        from scipy.stats import norm
        return float(norm.ppf(p))

    def sample(self, X, n_samples: int | None = None, random_state=None) -> dict:
        """Sampled parameter vectors: {name: array}.

        X (m, n_inputs) with `n_samples` = k gives arrays of shape (m, k) (k vectors per input point); with
        `n_samples` None one vector per row of X, shape (m,) (the form a distribution of inputs takes).
        """
        rng = np.random.default_rng(random_state)
        location, multiplier = self.predict_transformed(X)
        shape = (len(location),) if n_samples is None else (len(location), int(n_samples))
        theta = np.broadcast_to(location[:, None, :] if n_samples is not None else location,
                                shape + (6,)).copy()
        if self.structural_scatter:
            z = rng.standard_normal(shape + (6,)) @ self.scatter_sqrt_.T
            scale = multiplier if n_samples is None else multiplier[:, None]
            if self.small_sample:
                # multivariate t: one χ² draw per vector scales all its parameters together
                scale = scale / np.sqrt(rng.chisquare(self.dof_, shape) / self.dof_)
            theta += z * np.asarray(scale)[..., None]
        return _untransform(theta)

    @staticmethod
    def two_layer(vectors: dict) -> TwoLayerParameters:
        """`TwoLayerParameters` from sampled or predicted vectors (F2x is kept apart: it scales the forcing)."""
        return TwoLayerParameters(vectors["lambda_"], vectors["heat_capacity"], vectors["deep_heat_capacity"],
                                  vectors["exchange"], vectors["efficacy"])

    def extrapolated(self, X) -> np.ndarray:
        """(m,) bool: inputs outside the training range."""
        X = self._check_X(X)
        return np.any((X < self.x_min_) | (X > self.x_max_), axis=1)

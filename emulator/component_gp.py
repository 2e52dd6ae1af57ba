"""`ComponentGP`: a Bayesian Gaussian-process emulator of one principal-component score, for few training models.

Model (Oakley & O'Hagan 2002, Biometrika; Conti & O'Hagan 2010, J. Stat. Plan. Inference; from memory):
z(x) = β + σ [w(x) + e], w a zero-mean GP with unit variance and correlation c(x, x'; ℓ) (Matérn 5/2 or
squared exponential, one length scale ℓ per standardised input), e independent with variance η (the
"nugget": model-to-model scatter the inputs cannot explain, and what internal variability survives the
smoothing). β (a constant mean) and σ² have the reference prior p(β, σ²) ∝ 1/σ², integrated out exactly:
given (ℓ, η) the predictive distribution of a new model's score is a Student-t with n − 1 degrees of freedom,

    location  m(x) = β̂ + r(x)ᵀ R⁻¹ (z − β̂ 1)                 (β̂ the generalised-least-squares mean)
    scale²    s²(x) = σ̂² [1 + η − rᵀR⁻¹r + (1 − 1ᵀR⁻¹r)² / 1ᵀR⁻¹1],   σ̂² = (z − β̂1)ᵀR⁻¹(z − β̂1) / (n − 1)

with R = C + η I. Mean and variance use the same GLS constant mean. The correlation parameters (ℓ, η) are
integrated out too, over a grid (9 length scales 0.1–10 per input for one input, 11 nuggets 1e-4–1e2; affordable
with ≤ 15 training models), weighted by the integrated likelihood (Berger, De Oliveira & Sansó 2001, JASA, from
memory) times the priors below; the few points carrying 99.9 % of the weight are kept:

    log p(z | ℓ, η) = −½ log|R| − ½ log 1ᵀR⁻¹1 − (n − 1)/2 · log (n − 1)σ̂²

under weakly informative priors (our own choice, no outside source): on standardised inputs, ln ℓ ~ N(0, 1)
(a length scale of the order of the inputs' spread; it keeps ℓ away from the spacing of a handful of points,
where the data cannot inform it) and ln η ~ N(0, 2²): a wide prior on the ratio of the scatter the inputs do
not explain to the scatter they do, centred on equal shares, i.e. symmetric in that ratio and its inverse, so
the prior presumes neither. With 4–5 training models the data hardly inform η (the posterior median of ln η
follows the prior's), so the centre matters: the earlier centre, ln 0.1, presumed that the inputs explain 10/11
of each score's scatter — an unsupported claim that made the GP chase scatter the inputs do not explain
(end-of-pathway RMSE +2–5 %). No bound is tuned on the data being scored.
Without `small_sample` the plug-in Gaussian is used instead (σ̂² over n, no mean term, infinite dof).
"""
from __future__ import annotations

import numpy as np
from scipy.linalg import cho_factor, cho_solve

__all__ = ["ComponentGP", "correlation", "LENGTH_PRIOR", "NUGGET_PRIOR"]

#: (mean, sd) of the normal priors on ln ℓ (standardised inputs) and on ln η
LENGTH_PRIOR = (0.0, 1.0)
NUGGET_PRIOR = (0.0, 2.0)  # centred on η = 1: equal shares explained and unexplained (see the docstring)
_JITTER = 1e-10  # added to R's diagonal for a stable Cholesky factor


def correlation(A, B, length_scale, kind: str = "matern52") -> np.ndarray:
    """Correlation matrix c(a_i, b_j) of standardised inputs: Matérn ν = 5/2 or squared exponential."""
    A = np.asarray(A, float) / length_scale
    B = np.asarray(B, float) / length_scale
    d2 = np.maximum(np.sum(A * A, 1)[:, None] + np.sum(B * B, 1)[None, :] - 2.0 * A @ B.T, 0.0)
    if kind == "rbf":
        return np.exp(-0.5 * d2)
    r = np.sqrt(5.0 * d2)
    return (1.0 + r + r * r / 3.0) * np.exp(-r)  # Rasmussen & Williams (2006) eq. 4.17


class ComponentGP:
    """Student-t GP emulator of one score; `fit(Xs, z)` then `predict(Xs)` → (location, scale), dof `dof_`.

    thetas_, weights_ : the posterior points of (ln ℓ per input, ln η) kept and their weights
    """

    def __init__(self, kind: str = "matern52", small_sample: bool = True, max_points: int = 40):
        self.kind = kind
        self.small_sample = small_sample
        self.max_points = max_points

    def _terms(self, theta, X, z):
        n, d = X.shape
        R = correlation(X, X, np.exp(theta[:d]), self.kind)
        R[np.diag_indices(n)] += np.exp(theta[d]) + _JITTER
        factor = cho_factor(R, lower=True)
        ones = np.ones(n)
        r_one = cho_solve(factor, ones)
        precision = float(ones @ r_one)
        beta = float(r_one @ z) / precision
        weights = cho_solve(factor, z - beta)
        s2 = float((z - beta) @ weights)
        log_det = 2.0 * np.sum(np.log(np.diag(factor[0])))
        return factor, r_one, precision, beta, weights, s2, log_det

    def _neg_log_posterior(self, theta, X, z):
        n, d = X.shape
        try:
            _, _, precision, _, _, s2, log_det = self._terms(theta, X, z)
        except np.linalg.LinAlgError:
            return 1e10
        s2 = max(s2, 1e-300)
        value = 0.5 * log_det + 0.5 * np.log(precision) + 0.5 * (n - 1) * np.log(s2)
        value += 0.5 * np.sum(((theta[:d] - LENGTH_PRIOR[0]) / LENGTH_PRIOR[1]) ** 2)
        value += 0.5 * ((theta[d] - NUGGET_PRIOR[0]) / NUGGET_PRIOR[1]) ** 2
        return float(value)

    def _grid(self, d):
        """Grid over (ln ℓ per input, ln η) for integrating the correlation parameters out."""
        per_input = 9 if d == 1 else 6 if d == 2 else 4
        lengths = np.linspace(np.log(0.1), np.log(10.0), per_input)
        nuggets = np.linspace(np.log(1e-4), np.log(1e2), 11)
        mesh = np.meshgrid(*([lengths] * d), nuggets, indexing="ij")
        return np.column_stack([m.ravel() for m in mesh])

    def _posterior_points(self, X, z):
        """The grid points carrying 99.9 % of the posterior of (ℓ, η), at most `max_points`, and their weights."""
        grid = self._grid(X.shape[1])
        log_post = -np.array([self._neg_log_posterior(theta, X, z) for theta in grid])
        weights = np.exp(log_post - log_post.max())
        weights /= weights.sum()
        order = np.argsort(weights)[::-1]
        keep = order[: int(np.searchsorted(np.cumsum(weights[order]), 0.999) + 1)][: self.max_points]
        return grid[keep], weights[keep] / weights[keep].sum()

    def fit(self, Xs, z, thetas=None, weights=None) -> "ComponentGP":
        """Fit to standardised inputs and one score; `thetas` (m, d + 1) and `weights` (m,) fix the posterior
        points of (ln ℓ, ln η) instead of computing them (what loading a saved emulator does)."""
        X = np.asarray(Xs, float)
        z = np.asarray(z, float).reshape(-1)
        self.X_train_, self.z_train_ = X.copy(), z.copy()
        n = len(z)
        if thetas is not None:
            self.thetas_ = np.atleast_2d(np.asarray(thetas, float))
            self.weights_ = np.asarray(weights, float).reshape(-1)
        elif np.ptp(z) == 0.0:  # no variation: a constant score, known exactly
            self.thetas_, self.weights_ = np.r_[np.zeros(X.shape[1]), 0.0][None, :], np.ones(1)
        else:
            self.thetas_, self.weights_ = self._posterior_points(X, z)
        self._points = []
        for theta in self.thetas_:
            factor, r_one, precision, beta, weights_z, s2, _ = self._terms(theta, X, z)
            sigma2 = s2 / (n - 1) if self.small_sample else s2 / n
            self._points.append((np.exp(theta[:-1]), float(np.exp(theta[-1])), factor, r_one, precision, beta,
                                 weights_z, sigma2))
        self.dof_ = float(n - 1) if self.small_sample else np.inf
        return self

    @property
    def theta_(self) -> np.ndarray:
        """The correlation parameters of highest posterior weight (ln ℓ per input, ln η)."""
        return self.thetas_[int(np.argmax(self.weights_))]

    @property
    def length_scale_(self):
        return np.exp(self.theta_[:-1])

    @property
    def nugget_(self) -> float:
        return float(np.exp(self.theta_[-1]))

    def predict(self, Xs):
        """(location, scale) of the predictive t (or Gaussian) of a new model's score at standardised inputs.

        Over several posterior points of (ℓ, η) the predictive is a mixture of t's with a common number of
        degrees of freedom; it is matched to one t with the mixture's mean and variance."""
        Xs = np.asarray(Xs, float)
        mean = np.zeros(len(Xs))
        second = np.zeros(len(Xs))
        # variance of a t per unit scale² (ν > 2); for ν ≤ 2 the scales are mixed as they are
        unit = self.dof_ / (self.dof_ - 2.0) if 2 < self.dof_ < np.inf else 1.0
        for w, (length, nugget, factor, r_one, precision, beta, weights_z, sigma2) in zip(self.weights_, self._points):
            r = correlation(Xs, self.X_train_, length, self.kind)
            location = beta + r @ weights_z
            inner = 1.0 + nugget - np.einsum("ij,ji->i", r, cho_solve(factor, r.T))
            if self.small_sample:
                inner = inner + (1.0 - r @ r_one) ** 2 / precision
            mean += w * location
            second += w * (sigma2 * np.maximum(inner, 0.0) * unit + location ** 2)
        return mean, np.sqrt(np.maximum(second - mean ** 2, 0.0) / unit)

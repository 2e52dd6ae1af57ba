"""`PhysicsMean`: the two-layer energy-balance response (emulator.ebm) at a sensitivity, the emulator's mean.

λ = F2x / ECS with ensemble-typical heat capacities, exchange and efficacy; the response to the scenario's
forcing is exact (closed-form integration), on a dense ln-ECS grid when many distinct inputs are asked for.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ebm import TwoLayerParameters, integrate, step_response_annual, toa_imbalance

__all__ = ["PhysicsMean", "MEAN_PARAMETERS"]

#: Keys of `mean_params`: the ensemble-typical two-layer parameters of the physics mean.
MEAN_PARAMETERS = ("f2x", "heat_capacity", "deep_heat_capacity", "exchange", "efficacy")


@dataclass(frozen=True)
class PhysicsMean:
    """Two-layer response to `forcing` at the sensitivity in column `ecs_index` of X; zero if `forcing` is None.

    The input is `ecs_eff` as the extraction measured it: −erf_4x / (forcing_ratio · feedback) of a Gregory fit
    over `fit_years` of the abrupt run. With ε = 1 the two-layer model's N is linear in T, so that fit returns
    λ itself and λ = f2x / ecs_eff. With ε ≠ 1 the Gregory line is not λ (the (ε − 1)γ(T − T_d) term bends it,
    Geoffroy et al. 2013b, from memory): λ is the one whose noise-free abrupt run, fitted as the extraction
    fits it, gives that ecs_eff (`lambda_for`), so the efficacy is counted once.
    """

    n_years: int
    forcing: np.ndarray | None = None
    f2x: float = np.nan
    heat_capacity: float = np.nan
    deep_heat_capacity: float = np.nan
    exchange: float = np.nan
    efficacy: float = 1.0
    ecs_index: int = 0
    forcing_ratio: float = 2.0  # erf_4x / F2x of the extraction's ecs_eff
    fit_years: tuple = (1, 150)  # the extraction's Gregory window

    #: above this many distinct ECS values the response is computed on a grid and interpolated
    exact_limit = 4096
    grid_points = 16385

    def __call__(self, X) -> np.ndarray:
        X = np.atleast_2d(np.asarray(X, float))
        if self.forcing is None:
            return np.zeros((X.shape[0], self.n_years))
        ecs = X[:, self.ecs_index]
        unique, index = np.unique(ecs, return_inverse=True)
        if len(unique) <= self.exact_limit:
            return self.response(unique)[index.reshape(-1)]
        # The mean depends on ECS alone and smoothly: exact on a dense grid in ln ECS, then linear
        # interpolation (error below 1e-8 K, tested) — what makes 10⁵ distinct inputs affordable.
        lo, hi = np.log(unique[0]), np.log(unique[-1])
        grid = np.linspace(lo, hi, self.grid_points)
        values = self.response(np.exp(grid))
        position = (np.log(ecs) - lo) / (grid[1] - grid[0])
        left = np.clip(position.astype(int), 0, self.grid_points - 2)
        weight = (position - left)[:, None]
        out = values[left + 1] * weight
        out += values[left] * (1.0 - weight)
        return out

    def response(self, ecs) -> np.ndarray:
        """Exact two-layer response (n, n_years) at the given ECS values."""
        params = TwoLayerParameters(self.lambda_for(ecs), self.heat_capacity, self.deep_heat_capacity,
                                    self.exchange, self.efficacy)
        return integrate(self.forcing, params)[0]

    def gregory_ecs(self, lambda_) -> np.ndarray:
        """ecs_eff the extraction would measure for the two-layer model at λ: Gregory OLS over `fit_years` of its
        noise-free abrupt run (annual means, step forcing_ratio · f2x)."""
        lam = np.asarray(lambda_, float)
        params = TwoLayerParameters(lam, self.heat_capacity, self.deep_heat_capacity, self.exchange, self.efficacy)
        first, last = int(self.fit_years[0]), int(self.fit_years[1])
        step = self.forcing_ratio * self.f2x
        temp, deep = step_response_annual(last, step, params)
        rtnt = toa_imbalance(step, temp, deep, params)
        t, n = temp[..., first - 1:], rtnt[..., first - 1:]
        tc = t - t.mean(axis=-1, keepdims=True)
        slope = np.sum(tc * (n - n.mean(axis=-1, keepdims=True)), axis=-1) / np.sum(tc * tc, axis=-1)
        intercept = n.mean(axis=-1) - slope * t.mean(axis=-1)
        return -intercept / (self.forcing_ratio * slope)

    def lambda_for(self, ecs) -> np.ndarray:
        """λ (> 0) at which the model's Gregory-fitted sensitivity is `ecs` (f2x / ecs when ε = 1)."""
        ecs = np.asarray(ecs, float)
        if self.efficacy == 1.0:
            return self.f2x / ecs
        grid = np.exp(np.linspace(np.log(0.02), np.log(20.0), 2001))
        measured = self.gregory_ecs(grid)  # decreasing in λ
        return np.exp(np.interp(np.log(ecs), np.log(measured[::-1]), np.log(grid[::-1])))

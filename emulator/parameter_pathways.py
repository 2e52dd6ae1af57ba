"""Warming pathways for any forcing through sampled two-layer parameter vectors (the "parameters" route).

For each input point (or each sample of an input distribution) parameter vectors are drawn from the
`ParameterEmulator`, every vector is integrated exactly with the two-layer model (emulator.ebm.integrate,
vectorised over vectors: one pass over the years for all of them) under the scenario's reference forcing,
and the response is multiplied by the vector's forcing scale (the model is linear in F; emulator.scenarios).
Internal variability (AR(1) from the control runs) is added when given, so that a pathway is one
realisation, as the archive's runs are. The whole forcing pathway is run: no training run limits its length.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ebm import integrate
from .errors import EmulatorInputError
from .gp import ar1_noise
from .parameters import ParameterEmulator
from .scenarios import ScenarioForcing

__all__ = ["sample_pathways", "ParameterRoute", "ROUTE_NAME"]

ROUTE_NAME = "parameters"


def sample_pathways(emulator: ParameterEmulator, scenario: ScenarioForcing, X, n_samples: int | None = None,
                    random_state=None, internal_variability=None) -> np.ndarray:
    """Sampled warming pathways (K) under the scenario.

    X (m, n_inputs) with `n_samples` k → (m, k, n_years); with `n_samples` None one pathway per row of X →
    (m, n_years). `internal_variability` = (sd, lag-1 autocorrelation) adds AR(1) noise to each pathway.
    """
    rng = np.random.default_rng(random_state)
    vectors = emulator.sample(X, n_samples, random_state=rng)
    warming, _ = integrate(scenario.reference, emulator.two_layer(vectors), deep=False)
    warming *= scenario.scales(vectors["f2x"], rng)[..., None]
    if internal_variability is not None and internal_variability[0] > 0:
        warming += ar1_noise(rng, warming.shape, float(internal_variability[0]), float(internal_variability[1]))
    return warming


@dataclass
class ParameterRoute:
    """A fitted parameter emulator bound to one scenario: the interface the prediction code samples from.

    `predict(X, return_std=True)` gives the mean and sd of `n_moments` sampled pathways per point (the
    distribution is not Gaussian: use `sample_paths` for quantiles); `sample_paths(X, n)` gives (m, n, years).
    """

    emulator: ParameterEmulator
    scenario: ScenarioForcing
    internal_variability: tuple[float, float] | None = None
    n_moments: int = 4000
    random_state: int = 0

    @property
    def inputs(self):
        return tuple(self.emulator.inputs)

    @property
    def prediction_target_(self) -> str:
        what = "one realisation (sampled two-layer parameters and forcing scale"
        return what + (", internal variability)" if self.internal_variability else ")")

    def sample_paths(self, X, n_samples: int, random_state=None) -> np.ndarray:
        return sample_pathways(self.emulator, self.scenario, X, int(n_samples), random_state,
                               self.internal_variability)

    def predict(self, X, return_std: bool = False):
        paths = self.sample_paths(X, self.n_moments, self.random_state)
        mean = paths.mean(axis=1)
        return (mean, paths.std(axis=1, ddof=1)) if return_std else mean

    def mean_pathway(self, X) -> np.ndarray:
        """(m, n_years) response of the predicted median vector to the reference forcing, at its median scale."""
        vectors = self.emulator.predict(X)
        if self.scenario.n_years == 0:
            raise EmulatorInputError(f"scenario {self.scenario.name!r} has no years")
        warming, _ = integrate(self.scenario.reference, self.emulator.two_layer(vectors), deep=False)
        return warming * self.scenario.without_uncertainty().scales(vectors["f2x"])[..., None]

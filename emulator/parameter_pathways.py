"""Warming pathways for any forcing through sampled two-layer parameter vectors (the "parameters" route).

For each input point (or each sample of an input distribution) parameter vectors are drawn from the
`ParameterEmulator`, every vector is integrated exactly with the two-layer model (emulator.ebm.integrate,
vectorised over vectors: one pass over the years for all of them) under the scenario's reference forcing,
and the response is multiplied by the vector's forcing scale (the model is linear in F; emulator.scenarios).
Internal variability (AR(1) from the control runs) is added when given, so that a pathway is one
realisation, as the archive's runs are. The whole forcing pathway is run: no training run limits its length.
"""
from __future__ import annotations

from dataclasses import replace
from numbers import Integral, Real

import numpy as np
import xarray as xr
from sklearn.base import BaseEstimator

from sensemble.contract.constraints import Interval, Options

from .ebm import integrate
from .ensemble import FORCING_RATIO, calibrate_runs, validate_params
from .errors import EmulatorInputError
from .forcing import align_forcing
from .parameters import ParameterEmulator, parameter_table
from .scenarios import ScenarioForcing, co2_scenario, diagnosed_scenario, file_scenario
from .training import TrainingSet
from .variability import ar1_noise, internal_variability_if

__all__ = ["sample_pathways", "mean_pathway", "ParameterPathwayEmulator", "ROUTE_NAME"]

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


def mean_pathway(emulator: ParameterEmulator, scenario: ScenarioForcing, X) -> np.ndarray:
    """(m, n_years) response of the predicted median vector at X to the reference forcing, at its median scale."""
    vectors = emulator.predict(X)
    warming, _ = integrate(scenario.reference, emulator.two_layer(vectors), deep=False)
    return warming * scenario.without_uncertainty().scales(vectors["f2x"])[..., None]


class ParameterPathwayEmulator(BaseEstimator):
    """Pathway emulator of one scenario through the parameter route, learned from an ensemble's training set.

    `fit(training_set)` calibrates each run's abrupt series (Geoffroy et al. 2013a,b), fits the
    `ParameterEmulator` to the calibrated vectors, builds the scenario's forcing (diagnosed from the training
    set's scenario runs, or from a forcing file or a CO2 file: emulator.scenarios) and the internal
    variability of the control runs. It never fits anything to the scenario's warming: with a diagnosed
    forcing the scenario runs enter only through N + λT. A forcing file is run over all its years.

    Parameters
    ----------
    inputs : sensitivity-table columns (default ecs_eff)
    forcing_source : "diagnosed" | "file" | "co2"; forcing_file, co2_file, co2_reference (C0, ppm) as for
        `EnsembleEmulator`; scale_to_f2x : a forcing file is the forcing of a model with F2x = `forcing_f2x`
        (default: the ensemble's median), each sampled vector's forcing scales with its F2x (False: the
        file's values for every vector)
    match_runs : with a file and a training set that holds the scenario's runs, predict exactly the runs'
        years (matched on calendar years, else run years): for validating a forcing file against the runs
    efficacy : calibrate ε (Geoffroy et al. 2013b); internal_variability : add the control runs' AR(1)
    structural_scatter, small_sample : passed to `ParameterEmulator`
    n_moments : sampled pathways behind `predict`'s mean and sd; random_state : their seed

    Attributes
    ----------
    calibration_ : per-run calibration table; parameters_ : the fitted `ParameterEmulator`
    scenario_ : `ScenarioForcing`; internal_variability_ : (sd, lag-1) or None; route_ = "parameters"
    notes_ : what a user should know
    """

    route_ = ROUTE_NAME
    sampled_quantiles = True  # skewed predictive distribution: quantiles from samples (emulator.predict)
    _parameter_constraints = {
        "inputs": [tuple, list], "forcing_source": [Options("diagnosed", "file", "co2")],
        "forcing_file": [str, None], "co2_file": [str, None],
        "co2_reference": [Interval(Real, 0, None, closed="neither")],
        "forcing_f2x": [Interval(Real, 0, None, closed="neither"), None],
        "scale_to_f2x": [bool], "match_runs": [bool], "efficacy": [bool], "internal_variability": [bool],
        "structural_scatter": [bool], "small_sample": [bool], "n_moments": [Interval(Integral, 2, None, closed="left")],
        "random_state": [Interval(Integral, 0, None, closed="left"), None],
    }

    def __init__(self, inputs=("ecs_eff",), forcing_source="diagnosed", forcing_file=None, co2_file=None,
                 co2_reference=278.0, scale_to_f2x=True, forcing_f2x=None, match_runs=False, efficacy=False,
                 internal_variability=True, structural_scatter=True, small_sample=True, n_moments=4000,
                 random_state=0):
        self.inputs = inputs
        self.forcing_source = forcing_source
        self.forcing_file = forcing_file
        self.co2_file = co2_file
        self.co2_reference = co2_reference
        self.scale_to_f2x = scale_to_f2x
        self.forcing_f2x = forcing_f2x
        self.match_runs = match_runs
        self.efficacy = efficacy
        self.internal_variability = internal_variability
        self.structural_scatter = structural_scatter
        self.small_sample = small_sample
        self.n_moments = n_moments
        self.random_state = random_state

    def fit(self, training_set: TrainingSet) -> "ParameterPathwayEmulator":
        """Learn the parameter emulator, the forcing and the internal variability; returns self."""
        validate_params(self)
        ts = training_set
        self.notes_ = []
        self.calibration_ = calibrate_runs(ts, efficacy=self.efficacy)
        ok = (self.calibration_["status"] == "ok").to_numpy()
        if not ok.any():
            raise EmulatorInputError("no run could be calibrated from its abrupt series", path=ts.source or None)
        vectors = parameter_table(self.calibration_, FORCING_RATIO)
        self.parameters_ = ParameterEmulator(tuple(self.inputs), self.structural_scatter, self.small_sample).fit(
            ts.X[ok], vectors, groups=ts.models[ok])
        self.scenario_ = self._scenario(ts, ok, vectors)
        self.internal_variability_ = internal_variability_if(self.internal_variability, ts.control_tas, self.notes_)
        return self

    def _scenario(self, ts: TrainingSet, ok, vectors) -> ScenarioForcing:
        name = ts.scenario or "forcing"
        if self.forcing_source in ("file", "co2"):
            if self.forcing_source == "file":
                reference = self.forcing_f2x or float(np.median(self.parameters_.parameters_train_[:, 0]))
                scenario = file_scenario(name, self.forcing_file, reference if self.scale_to_f2x else None)
            else:
                scenario = co2_scenario(name, self.co2_file, self.co2_reference)
            if self.match_runs and ts.Y.shape[1]:
                series = xr.DataArray(scenario.reference, coords={"year": scenario.years}, dims="year",
                                      attrs={"source_file": self.forcing_file or self.co2_file})
                values, how = align_forcing(series, ts.years, ts.calendar_years, allow_longer=True)
                scenario = replace(scenario, years=np.asarray(ts.years), reference=values,
                                   calendar_years=ts.calendar_years, source=f"{scenario.source} (on the runs' {how}s)")
            return scenario
        if ts.Y.shape[1] == 0:
            raise EmulatorInputError("a diagnosed forcing needs the scenario's runs",
                                     hint="name an experiment of the archive, or give a forcing or CO2 file")
        lam = -ts.table["feedback"].to_numpy(float) if "feedback" in ts.table else np.full(ts.n_runs, np.nan)
        lam = np.where(np.isfinite(lam) & (lam > 0), lam, self.calibration_["lambda_"].to_numpy(float))
        f2x = self.calibration_["forcing_4x"].to_numpy(float) / FORCING_RATIO
        usable = np.isfinite(lam) & (lam > 0) & np.isfinite(f2x)
        if not usable.any():
            raise EmulatorInputError("no run has a feedback parameter to diagnose the forcing with")
        return diagnosed_scenario(ts.scenario, ts.Y[usable], ts.scenario_rtnt[usable], lam[usable], f2x[usable],
                                  groups=ts.models[usable], years=ts.years, calendar_years=ts.calendar_years)

    # -- prediction ----------------------------------------------------------------------------------------
    def _fitted(self):
        if not hasattr(self, "parameters_"):
            raise EmulatorInputError("this ParameterPathwayEmulator is not fitted yet; call fit first")
        return self

    def sample_paths(self, X, n_samples: int = 1000, random_state=None) -> np.ndarray:
        """Random pathways (n_cases, n_samples, n_years)."""
        self._fitted()
        return sample_pathways(self.parameters_, self.scenario_, X, int(n_samples), random_state,
                               self.internal_variability_)

    def predict(self, X, return_std: bool = False):
        """Mean pathway (n_cases, n_years) from `n_moments` sampled pathways; with `return_std` their sd."""
        paths = self.sample_paths(X, self.n_moments, self.random_state)
        mean = paths.mean(axis=1)
        return (mean, paths.std(axis=1, ddof=1)) if return_std else mean

    @property
    def prediction_target_(self) -> str:
        what = "one realisation (sampled two-layer parameters and forcing scale"
        return what + (", internal variability)" if getattr(self, "internal_variability_", None) else ")")

"""`EnsembleEmulator`: everything the emulator learns from a training set, in one scikit-learn-style estimator.

`fit(training_set)` runs the whole chain — two-layer calibration of each run (emulator.calibrate) → the
ensemble-typical mean parameters → the scenario's forcing (emulator.forcing) → the internal variability of
the control runs (emulator.variability) → one point per model (members averaged) → the Gaussian-process
pathway emulator (emulator.gp). So leave-one-model-out validation is `clone(estimator).fit(subset)`, and
nothing of a held-out model leaks into its prediction.

Example
-------
>>> from sensemble.emulator.ensemble import EnsembleEmulator
>>> from sklearn.base import clone
>>> est = EnsembleEmulator(max_components=3)
>>> clone(est).get_params()["max_components"]
3
"""
from __future__ import annotations

from dataclasses import asdict

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from .calibrate import calibrate_two_layer, deep_temperature
from sensemble.contract.constraints import problem

from .errors import EmulatorInputError
from .forcing import align_forcing, co2_forcing, diagnose_forcing, read_forcing_file
from .gp import PathwayEmulator
from .settings import ESTIMATOR_CONSTRAINTS
from .training import TrainingSet
from .variability import internal_variability_if

__all__ = ["EnsembleEmulator", "calibrate_runs", "per_model", "CALIBRATION_COLUMNS", "FORCING_RATIO"]

FORCING_RATIO = 2.0  # erf_4x / F2x, as in the sensitivity table's ecs_eff = -erf_4x / (2 feedback)
CALIBRATION_COLUMNS = ["model", "member", "lambda_", "heat_capacity", "deep_heat_capacity", "exchange", "efficacy",
                       "forcing_4x", "status"]


def calibrate_runs(ts: TrainingSet, efficacy: bool = False) -> pd.DataFrame:
    """Two-layer parameters per run from its abrupt series, the Gregory step over the table's fit window; a run
    that cannot be calibrated, or whose efficacy iteration does not converge, gets a status, not "ok"."""
    rows = []
    for i in range(ts.n_runs):
        row = dict(model=ts.models[i], member=ts.members[i])
        tas, rtnt = ts.abrupt_tas[i], ts.abrupt_rtnt[i]
        if tas is None:
            rows.append({**row, "status": "no abrupt run"})
            continue
        try:
            params, f4x, diagnostics = calibrate_two_layer(tas, rtnt, efficacy=efficacy, fit_years=ts.fit_window(i),
                                                           return_diagnostics=True)
        except EmulatorInputError as exc:
            rows.append({**row, "status": f"calibration failed: {exc}"})
            continue
        status = "ok" if diagnostics.converged else \
            f"efficacy not converged after {diagnostics.iterations} iterations (left out of the mean parameters)"
        rows.append({**row, **{k: float(v) for k, v in asdict(params).items()}, "forcing_4x": f4x, "status": status})
    return pd.DataFrame(rows, columns=CALIBRATION_COLUMNS)


def validate_params(estimator) -> None:
    """Check an estimator's parameters against its declared `_parameter_constraints`, and that a file forcing
    source names its file; one-line `EmulatorInputError` otherwise (shared by the emulator's estimators)."""
    for name, allowed in estimator._parameter_constraints.items():
        phrase = problem(getattr(estimator, name), allowed)
        if phrase:
            raise EmulatorInputError(f"{type(estimator).__name__}: {name} {phrase}")
    if estimator.forcing_source == "file" and not estimator.forcing_file:
        raise EmulatorInputError("forcing_source = 'file' needs forcing_file")
    if estimator.forcing_source == "co2" and not estimator.co2_file:
        raise EmulatorInputError("forcing_source = 'co2' needs co2_file")


def per_model(ts: TrainingSet) -> tuple[np.ndarray, np.ndarray]:
    """(X, Y) with one row per model (in order of first appearance): the means over its members."""
    models = list(dict.fromkeys(ts.models))
    X = np.array([ts.X[ts.models == m].mean(axis=0) for m in models])
    Y = np.array([ts.Y[ts.models == m].mean(axis=0) for m in models])
    return X, Y


def _mean_parameters(calibration: pd.DataFrame, forcing_ratio: float = FORCING_RATIO) -> dict:
    ok = calibration[calibration["status"] == "ok"]
    if ok.empty:
        raise EmulatorInputError("no run could be calibrated, so the physics mean has no heat capacities",
                                 hint="check the abrupt runs, or set physics_mean = false")
    return {
        "f2x": float(ok["forcing_4x"].median() / forcing_ratio),
        "heat_capacity": float(ok["heat_capacity"].median()),
        "deep_heat_capacity": float(ok["deep_heat_capacity"].median()),
        "exchange": float(ok["exchange"].median()),
        "efficacy": float(ok["efficacy"].median()),
        "n_calibrated": int(len(ok)),
    }


class EnsembleEmulator(BaseEstimator):
    """Pathway emulator of one scenario, learned from an ensemble's training set.

    Parameters
    ----------
    inputs : sensitivity-table columns used as inputs (the physics mean needs `ecs_eff`)
    physics_mean : two-layer mean (else the ensemble mean)
    forcing_source : "diagnosed" (F = N + λT from the ensemble's scenario runs), "co2" (`co2_file`) or "file"
    forcing_file, co2_file : CSV/NetCDF by year for those sources; co2_reference : C0 in ppm
    efficacy : calibrate the deep-ocean heat-uptake efficacy (Geoffroy et al. 2013b)
    internal_variability : add the control runs' AR(1) variability to predictions (one realisation)
    variance_kept, max_components, kernel, smoothing, small_sample_correction, n_restarts_optimizer,
    random_state : passed to `PathwayEmulator`

    Attributes
    ----------
    calibration_ : DataFrame, two-layer parameters and status per run
    mean_parameters_ : dict of the ensemble-typical parameters (None without the physics mean)
    forcing_ : (n_years,) scenario forcing (None without the physics mean); forcing_source_ : how it was made
    internal_variability_ : (sd, lag-1) or None
    emulator_ : the fitted `PathwayEmulator` (one point per model)
    models_ : model labels, one per GP training point
    notes_ : list of what a user should know (e.g. a missing control)
    """

    # declared in emulator/settings.py (a light module) so the config checks the same rules without scikit-learn
    _parameter_constraints = ESTIMATOR_CONSTRAINTS

    def __init__(self, inputs=("ecs_eff",), physics_mean=True, forcing_source="diagnosed", forcing_file=None,
                 co2_file=None, co2_reference=278.0, efficacy=False, internal_variability=True, variance_kept=0.99,
                 max_components=10, kernel="matern52", smoothing="auto", small_sample_correction=True,
                 n_restarts_optimizer=1, random_state=0):
        self.inputs = inputs
        self.physics_mean = physics_mean
        self.forcing_source = forcing_source
        self.forcing_file = forcing_file
        self.co2_file = co2_file
        self.co2_reference = co2_reference
        self.efficacy = efficacy
        self.internal_variability = internal_variability
        self.variance_kept = variance_kept
        self.max_components = max_components
        self.kernel = kernel
        self.smoothing = smoothing
        self.small_sample_correction = small_sample_correction
        self.n_restarts_optimizer = n_restarts_optimizer
        self.random_state = random_state

    @classmethod
    def from_settings(cls, settings) -> "EnsembleEmulator":
        """The estimator an `EmulatorSettings` describes (its fields of the same names)."""
        names = cls._get_param_names()
        return cls(**{name: getattr(settings, name) for name in names if hasattr(settings, name)})

    # -- fitting -----------------------------------------------------------------------------------------
    def _validate_params(self):
        validate_params(self)

    def fit(self, training_set: TrainingSet) -> "EnsembleEmulator":
        """Learn everything from `training_set` (an `emulator.training.TrainingSet`); returns self."""
        self._validate_params()
        ts = training_set
        if tuple(ts.inputs) != tuple(self.inputs):
            raise EmulatorInputError(f"the training set's inputs {tuple(ts.inputs)} differ from the estimator's "
                                     f"{tuple(self.inputs)}", hint="load the training set with the same inputs")
        self.notes_ = ["forcing_ratio not in the series files: 2 assumed (erf_4x = 2 F2x)"] \
            if "forcing_ratio_assumed" in ts.flags else []
        self.forcing_ratio_ = ts.forcing_ratio
        self.calibration_ = calibrate_runs(ts, efficacy=self.efficacy)
        forcing = self.mean_parameters_ = None
        self.forcing_source_ = "none (physics mean off)"
        if self.physics_mean:
            self.mean_parameters_ = {**_mean_parameters(self.calibration_, ts.forcing_ratio),
                                     "forcing_ratio": ts.forcing_ratio, "fit_years": ts.fit_window(0) or (1, 150)}
            forcing, self.forcing_source_ = self._scenario_forcing(ts, self.mean_parameters_["f2x"])
        self.forcing_ = forcing
        self.internal_variability_ = internal_variability_if(self.internal_variability, ts.control_tas, self.notes_)
        # one point per model: members differ only by internal variability, which is added separately; as
        # separate points they would look like exact repeats and shrink the structural scatter (one model, one vote)
        X, Y = per_model(ts)
        self.models_ = np.array(list(dict.fromkeys(ts.models)), dtype=object)
        self.emulator_ = PathwayEmulator(
            inputs=tuple(self.inputs), physics_mean=self.physics_mean, variance_kept=self.variance_kept,
            max_components=self.max_components, kernel=self.kernel, internal_variability=self.internal_variability_,
            smoothing=self.smoothing, small_sample_correction=self.small_sample_correction,
            n_restarts_optimizer=self.n_restarts_optimizer, random_state=self.random_state,
        ).fit(X, Y, forcing=forcing, mean_params=self.mean_parameters_)
        return self

    def _scenario_forcing(self, ts: TrainingSet, f2x: float):
        if self.forcing_source == "diagnosed":
            cal = self.calibration_
            uptake = None
            if self.efficacy:
                # N = F − λT − (ε − 1)γ(T − T_d): the calibrated λ and the uptake term, not the bent Gregory slope
                lam = np.where(cal["status"] == "ok", cal["lambda_"].to_numpy(float), np.nan)
                uptake = np.zeros_like(ts.Y)
                for i in np.flatnonzero(np.isfinite(lam)):
                    deep = deep_temperature(ts.Y[i], cal["deep_heat_capacity"].iloc[i], cal["exchange"].iloc[i])
                    uptake[i] = (cal["efficacy"].iloc[i] - 1.0) * cal["exchange"].iloc[i] * (ts.Y[i] - deep)
            else:
                lam = -ts.table["feedback"].to_numpy(float) if "feedback" in ts.table else np.full(ts.n_runs, np.nan)
                lam = np.where(np.isfinite(lam) & (lam > 0), lam, cal["lambda_"].to_numpy(float))
            usable = np.isfinite(lam) & (lam > 0)
            if not usable.any():
                raise EmulatorInputError("no run has a feedback parameter to diagnose the forcing with")
            f = diagnose_forcing(ts.Y[usable], ts.scenario_rtnt[usable], lam[usable], groups=ts.models[usable],
                                 uptake=None if uptake is None else uptake[usable])
            return f.values, f"diagnosed from {int(f.attrs['n_models'])} models (F = N + λT)"
        if self.forcing_source == "file":
            values, how = align_forcing(read_forcing_file(self.forcing_file), ts.years, ts.calendar_years)
            return values, f"file {self.forcing_file} (matched on {how})"
        conc, how = align_forcing(read_forcing_file(self.co2_file), ts.years, ts.calendar_years)
        return (co2_forcing(conc, self.co2_reference, f2x=f2x),
                f"CO2 file {self.co2_file} (5.35 ln C/C0, rescaled to F2x)")

    # -- prediction: the fitted PathwayEmulator's ------------------------------------------------------------
    def _fitted(self) -> PathwayEmulator:
        if not hasattr(self, "emulator_"):
            raise EmulatorInputError("this EnsembleEmulator is not fitted yet; call fit first")
        return self.emulator_

    def predict(self, X, return_std: bool = False):
        """Mean pathway (n_cases, n_years) at inputs X; with `return_std` also the predictive sd per year."""
        return self._fitted().predict(X, return_std=return_std)

    def sample_paths(self, X, n_samples: int = 1000, random_state=None):
        """Random pathways (n_cases, n_samples, n_years) from the predictive distribution."""
        return self._fitted().sample_paths(X, n_samples, random_state=random_state)

    def quantiles(self, X, probabilities):
        """Per-year quantiles (n_cases, n_probabilities, n_years) of the predictive distribution at X."""
        return self._fitted().quantiles(X, probabilities)

    def spread_of_mean(self, X, last_years: int = 10):
        return self._fitted().spread_of_mean(X, last_years)

    @property
    def prediction_target_(self) -> str:
        return self._fitted().prediction_target_



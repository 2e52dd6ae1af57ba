"""Settings of emulation and prediction, with their defaults."""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Integral, Real

from sensemble.contract.constraints import Elements, Interval, Options

_POSITIVE_COUNT = [Interval(Integral, 0, None, closed="neither")]
_SEED = [Interval(Integral, 0, None, closed="left")]

#: Values of the estimator's string parameters (the modules that act on them import these).
KERNELS = ("matern52", "rbf")  # emulator/gp.py make_kernel
SMOOTHERS = ("auto", "response", "gaussian", "none")  # emulator/smoothing.py
FORCING_SOURCES = ("diagnosed", "co2", "file")  # emulator/forcing.py

#: The constraints of `EnsembleEmulator`'s parameters (its `_parameter_constraints`, scikit-learn style), declared
#: here, in this light module, so that the config checks the `[emulator]` keys of the same names against them
#: before any data is read, without importing scikit-learn. Spelled once: the estimator and the config both use it.
ESTIMATOR_CONSTRAINTS = {
    "inputs": [tuple, list],
    "physics_mean": [bool],
    "forcing_source": [Options(*FORCING_SOURCES)],
    "forcing_file": [str, None],
    "co2_file": [str, None],
    "co2_reference": [Interval(Real, 0, None, closed="neither")],
    "efficacy": [bool],
    "internal_variability": [bool],
    "variance_kept": [Interval(Real, 0, 1, closed="right")],
    "max_components": _POSITIVE_COUNT,
    "kernel": [Options(*KERNELS)],
    "smoothing": [Options(*SMOOTHERS)],
    "small_sample_correction": [bool],
    "n_restarts_optimizer": [Interval(Integral, 0, None, closed="left")],
    "random_state": _SEED + [None],
}


@dataclass(frozen=True)
class EmulatorSettings:
    """How the pathway emulator is built (see ../shared/DESIGN.md, Emulator)."""

    scenario: str | None = None  # experiment id of the target scenario; None: the only one present
    inputs: tuple[str, ...] = ("ecs_eff",)  # sensitivity-table columns used as GP inputs
    forcing_source: str = "diagnosed"  # "diagnosed" (from the ensemble) | "co2" | "file"
    forcing_file: str | None = None  # CSV or NetCDF with a year column, for forcing_source = "file"
    co2_file: str | None = None  # CO2 concentrations (ppm) by year, for forcing_source = "co2"
    variance_kept: float = 0.99  # fraction of residual variance the principal components keep
    max_components: int = 10
    kernel: str = "matern52"  # "matern52" | "rbf"
    internal_variability: bool = True  # predict one realisation: add the control runs' AR(1) variability
    # training residuals smoothed along years before the SVD: "auto" (forcing-response projection with the
    # physics mean, else Gaussian), "response", "gaussian" or "none" (emulator/smoothing.py)
    smoothing: str = "auto"
    small_sample_correction: bool = True  # Bayesian GP variance for few training models (emulator/gp.py)
    physics_mean: bool = True
    random_state: int = 0
    efficacy: bool = False  # calibrate the deep-ocean heat-uptake efficacy (Geoffroy et al. 2013b) for the mean
    n_restarts_optimizer: int = 1  # extra random starts of each GP's hyperparameter search
    co2_reference: float = 278.0  # ppm, C0 of the CO2 forcing formula
    validate: bool = True  # leave-one-model-out validation (needs ≥ 4 models)
    validation_samples: int = 1000  # sampled pathways per held-out run for its end-of-pathway interval
    # several scenarios in one batch (emulator.scenario_batch): each {name, experiment | forcing_file | co2_file,
    # route = "auto" | "gp" | "parameters"}; when given, `scenario` and `forcing_source` are not used
    pathways: tuple[dict, ...] = ()

    # Allowed values: the estimator's own declaration for the fields it takes, and the run's own fields.
    _parameter_constraints = {
        **ESTIMATOR_CONSTRAINTS,
        "validation_samples": _POSITIVE_COUNT,
    }


@dataclass(frozen=True)
class PredictionSettings:
    """What to predict and how to summarise it."""

    cases: tuple[dict, ...] = ()  # each {"name": str, inputs...}
    thresholds: tuple[float, ...] = (1.5, 2.0)  # K, for crossing years
    quantiles: tuple[float, ...] = (0.05, 0.17, 0.50, 0.83, 0.95)
    n_samples: int = 2000
    random_state: int = 0
    grid: dict | None = None  # {input: [values…]}: every combination becomes a point case
    # also predict the ensemble's own gaps (midpoints between neighbouring models, one case beyond the range)
    # when other cases are given; with no cases at all they are always predicted
    include_default_cases: bool = False
    crossing_window: int = 20  # years of the running mean whose first exceedance dates a crossing
    figures: bool = True
    max_fan_figures: int = 24  # a fan figure per case, up to this many

    # Allowed values, declared once; the config reader checks them before any file is read.
    _parameter_constraints = {
        "thresholds": [Elements(Interval(Real, 0, None, closed="neither"))],
        "quantiles": [Elements(Interval(Real, 0, 1, closed="neither"))],
        "n_samples": _POSITIVE_COUNT,
        "random_state": _SEED,
        "crossing_window": _POSITIVE_COUNT,
        "max_fan_figures": [Interval(Integral, 0, None, closed="left")],
    }

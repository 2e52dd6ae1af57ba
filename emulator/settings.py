"""Settings of emulation and prediction, with their defaults."""
from __future__ import annotations

from dataclasses import dataclass


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

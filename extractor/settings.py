"""Settings of an extraction: every number the fits and flags depend on, with its default."""
from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class ExtractionSettings:
    """What an extraction needs to know besides the archive.

    Defaults follow ../shared/DESIGN.md: Gregory fit over years 1–150 of the abrupt run,
    early/late segments 1–20 / 21–150, linear drift, TCR over years 61–80 of the 1 % run.
    """

    # experiment roles → experiment ids
    control: str = "piControl"
    abrupt: str = "abrupt-4xCO2"
    onepct: str = "1pctCO2"
    # None: every other experiment whose parent chain reaches the control
    scenarios: tuple[str, ...] | None = None
    include_models: tuple[str, ...] = ()
    exclude_models: tuple[str, ...] = ()
    variables: tuple[str, ...] = ("tas", "rsdt", "rsut", "rlut", "rsutcs", "rlutcs")
    required_variables: tuple[str, ...] = ("tas", "rsdt", "rsut", "rlut")

    # fits (years count from 1 at the branch; both ends inclusive)
    fit_years: tuple[int, int] = (1, 150)
    early_years: tuple[int, int] = (1, 20)
    late_years: tuple[int, int] = (21, 150)
    tcr_years: tuple[int, int] = (61, 80)
    forcing_ratio: float = 2.0  # erf_4x / erf_2x for ecs_eff = -erf_4x / (forcing_ratio * feedback)
    drift_order: int = 1  # 1 linear, 2 quadratic
    min_control_years: int = 30
    bootstrap_samples: int = 1000
    bootstrap_block: int = 10
    seed: int = 20261202
    orthogonal_fit: bool = False

    # flag thresholds
    energy_leak_threshold: float = 0.5  # |mean control N| above this (W m-2) → energy_leak
    poor_fit_r2: float = 0.5  # Gregory r² below this → poor_fit
    ecs_max: float = 20.0  # ecs_eff outside (0, ecs_max] → nonphysical

    extra: dict = field(default_factory=dict, compare=False, repr=False)

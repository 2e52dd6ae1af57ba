"""Settings of an extraction: every number the fits and flags depend on, with its default."""
from __future__ import annotations

from dataclasses import dataclass, field
from numbers import Integral, Real

from sensemble.contract.constraints import Elements, Interval, Options, YearWindow
from sensemble.contract.table import ECS_INTERVAL_METHODS

#: Variables the sensitivity itself needs: ΔT, and N = rsdt − rsut − rlut (extractor/budget.py).
SENSITIVITY_VARIABLES = ("tas", "rsdt", "rsut", "rlut")
#: Every variable the extractor uses: the above, and the clear-sky fluxes of the feedback components.
KNOWN_VARIABLES = SENSITIVITY_VARIABLES + ("rsutcs", "rlutcs")

_POSITIVE_COUNT = [Interval(Integral, 0, None, closed="neither")]
_POSITIVE = [Interval(Real, 0, None, closed="neither")]


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
    # the same roles in CMIP5 runs (told apart by their file names), so that a mixed archive needs no config
    cmip5_control: str = "piControl"
    cmip5_abrupt: str = "abrupt4xCO2"
    cmip5_onepct: str = "1pctCO2"
    # None: every other experiment whose parent chain reaches the control
    scenarios: tuple[str, ...] | None = None
    include_models: tuple[str, ...] = ()
    exclude_models: tuple[str, ...] = ()
    variables: tuple[str, ...] = KNOWN_VARIABLES
    required_variables: tuple[str, ...] = SENSITIVITY_VARIABLES

    # fits (years count from 1 at the branch; both ends inclusive)
    fit_years: tuple[int, int] = (1, 150)
    early_years: tuple[int, int] = (1, 20)
    late_years: tuple[int, int] = (21, 150)
    tcr_years: tuple[int, int] = (61, 80)
    forcing_ratio: float = 2.0  # erf_4x / erf_2x for ecs_eff = -erf_4x / (forcing_ratio * feedback)
    drift_order: int = 1  # 1 linear, 2 quadratic
    min_control_years: int = 30
    # ECS intervals: "fieller" (measured coverage, README) or the former "block_bootstrap", which the three
    # settings after it configure (sensemble.contract.table.ECS_INTERVAL_METHODS)
    ecs_interval: str = "fieller"
    bootstrap_samples: int = 1000
    bootstrap_block: int = 10
    seed: int = 20261202
    orthogonal_fit: bool = False

    # flag thresholds
    energy_leak_threshold: float = 0.5  # |mean control N| above this (W m-2) → energy_leak
    poor_fit_r2: float = 0.5  # Gregory r² below this → poor_fit
    ecs_max: float = 20.0  # ecs_eff outside (0, ecs_max] → nonphysical

    extra: dict = field(default_factory=dict, compare=False, repr=False)

    # Allowed values, declared once (scikit-learn style); the config reader checks them before any file is read.
    # Rules that tie fields together (segments within fit_years, the variables N needs) are in sensemble.config.
    _parameter_constraints = {
        "variables": [Elements(Options(*KNOWN_VARIABLES))],
        "required_variables": [Elements(Options(*KNOWN_VARIABLES))],
        "fit_years": [YearWindow()],
        "early_years": [YearWindow()],
        "late_years": [YearWindow()],
        "tcr_years": [YearWindow()],
        "forcing_ratio": _POSITIVE,
        "drift_order": [Options(1, 2)],
        "min_control_years": _POSITIVE_COUNT,
        "ecs_interval": [Options(*ECS_INTERVAL_METHODS)],
        "bootstrap_samples": _POSITIVE_COUNT,
        "bootstrap_block": _POSITIVE_COUNT,
        "seed": [Interval(Integral, 0, None, closed="left")],
        "energy_leak_threshold": _POSITIVE,
        "poor_fit_r2": [Interval(Real, 0, 1, closed="both")],
        "ecs_max": _POSITIVE,
    }

    def roles(self, mip_era: str = "CMIP6") -> tuple[str, str, str]:
        """Experiment ids of the control, abrupt and 1 % roles for runs of ``mip_era`` (CMIP5 or CMIP6)."""
        if mip_era == "CMIP5":
            return self.cmip5_control, self.cmip5_abrupt, self.cmip5_onepct
        return self.control, self.abrupt, self.onepct

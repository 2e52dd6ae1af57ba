"""The invented models of the demo ensemble: names, calendars, time axes and true parameters.

Every name here is invented (models, institutions, the historical-type and scenario experiments);
none is, or stands for, a real climate model or modelling centre.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "CONTROL", "ABRUPT", "ONEPCT", "HISTORICAL", "SCENARIO", "SCENARIO_LOW", "SCENARIOS", "ROLES", "DEFAULT_YEARS",
    "Run", "ModelSpec", "draw_models", "FORCING_RATIO_4X",
]

# Experiment ids. The control, abrupt and 1 % runs use the standard CMIP ids; the historical-type run
# and the scenario that continues it are invented.
CONTROL = "piControl"
ABRUPT = "abrupt-4xCO2"
ONEPCT = "1pctCO2"
HISTORICAL = "hist-demo"
SCENARIO = "demo-rise"
SCENARIO_LOW = "demo-steady"  # a lower scenario whose forcing levels off (issue 13)
SCENARIOS = (SCENARIO, SCENARIO_LOW)  # both continue the historical-type run, over the same years
ROLES = {"control": CONTROL, "abrupt": ABRUPT, "onepct": ONEPCT, "historical": HISTORICAL, "scenario": SCENARIO}
DEFAULT_YEARS = {"control": 250, "abrupt": 150, "onepct": 150, "historical": 100, "scenario": 60}

# F4x = 2 F2x exactly: forcing logarithmic in CO2 (Myhre et al. 1998), so quadrupling is two doublings.
FORCING_RATIO_4X = 2.0
HISTORICAL_START_YEAR = 1915

_NAMES = ["Alder-2", "Bramble-1-1", "Cobble-3", "Dunlin-2-0", "Ember-1", "Fernwick-4", "Gorse-2-LR",
          "Heron-1-0", "Ibex-5", "Juniper-3", "Kestrel-1", "Lichen-2"]
_INSTITUTIONS = [
    ("QUILLON", "Quillon Institute of Invented Climates, Nowhere (fictional)"),
    ("ZEPHYRA", "Zephyra Modelling Collective, Elsewhere (fictional)"),
    ("ORRERY-LAB", "Orrery Laboratory for Pretend Physics, Nowhere (fictional)"),
    ("TANSY", "Tansy Planetary Workshop, Elsewhere (fictional)"),
]
# (calendar, time units, control start year, experiment start ("parent" = continue the control's clock,
# else a fixed year), years per file or None for one file per run). Cycled over the models.
_LAYOUTS = [
    ("noleap", "days since 1850-01-01", 1850, 1850, 100),
    ("360_day", "days since 0001-01-01", 1, "parent", None),
    ("proleptic_gregorian", "hours since 1900-01-01", 1601, 1850, 50),
    ("standard", "days since 1850-01-01", 1850, 1850, None),
    ("noleap", "days since 0001-01-01", 1, "parent", 100),
    ("360_day", "days since 1850-01-01", 1850, 1850, None),
    ("proleptic_gregorian", "days since 1850-01-01", 1000, "parent", None),
    ("standard", "hours since 1900-01-01", 1700, 1850, 100),
]


@dataclass(frozen=True)
class Run:
    """One run of one model: what it is, where it sits on the control's clock, and how it is filed.

    `control_offset` is the control time (years since the control's first month) at which the run starts;
    the run's month k lies at control time control_offset + (k + 0.5)/12 (its drift continues there).
    """

    experiment_id: str
    role: str
    member: str
    n_years: int
    start_year: int
    control_offset: float
    parent_experiment_id: str | None = None
    parent_member: str | None = None
    branch_year: int | None = None  # year of the parent run (counted from 0 at its start) where this run branches


@dataclass(frozen=True)
class ModelSpec:
    """An invented model: identity, calendar and time axis, true physics, control climate, noise."""

    index: int
    seed: int
    source_id: str
    institution_id: str
    institution: str
    calendar: str
    time_units: str
    control_start_year: int
    file_years: int | None
    # two-layer physics (Geoffroy et al. 2013b, λ > 0)
    f2x: float
    lambda_: float
    efficacy: float
    heat_capacity: float
    deep_heat_capacity: float
    exchange: float
    # control climate: means over the whole control, linear drifts per century
    control_means: dict
    drifts: dict
    control_years: int
    # split of the radiative response (fractions sum to 1) and of the forcing (cloud masking)
    fraction_lw_cs: float
    fraction_sw_cs: float
    fraction_cre: float
    cloud_masking: float
    cre_sw_fraction: float
    # internal variability
    ar1: float
    tas_annual_sd: float
    noise_sd: dict
    polar_amplification: float
    runs: tuple = field(default_factory=tuple)

    @property
    def f4x(self) -> float:
        return FORCING_RATIO_4X * self.f2x

    @property
    def ecs(self) -> float:
        return self.f2x / self.lambda_

    @property
    def leak(self) -> float:
        """Mean net TOA imbalance of the noise-free control (W m-2): the model's energy leak."""
        m = self.control_means
        return m["rsdt"] - m["rsut"] - m["rlut"]

    def run(self, experiment_id: str, member: str = "r1i1p1f1") -> Run:
        for r in self.runs:
            if r.experiment_id == experiment_id and r.member == member:
                return r
        raise KeyError(f"{self.source_id}: no run {experiment_id} {member}")


def _name(i: int) -> str:
    base = _NAMES[i % len(_NAMES)]
    return base if i < len(_NAMES) else f"{base}-x{i // len(_NAMES)}"


def _branch(rng, control_years: int, length: int) -> int:
    """A branch year leaving room for the run inside the control (0 when the control is too short)."""
    room = control_years - length
    if room <= 0:
        return 0
    return int(rng.integers(min(10, room), room + 1))


def draw_models(n_models: int, seed: int, years: dict | None = None) -> list[ModelSpec]:
    """The invented ensemble for a seed: deterministic, one random stream per model.

    ECS values are stratified over 1.8–5.2 K (one model per stratum, strata shuffled), so any ensemble
    size spans the usual assessed range.
    """
    if n_models < 1:
        raise ValueError(f"n_models must be at least 1, got {n_models}")
    lengths = dict(DEFAULT_YEARS)
    for key, value in (years or {}).items():
        if key not in lengths:
            raise ValueError(f"years: unknown run role {key!r}; expected some of {sorted(lengths)}")
        if int(value) < 1:
            raise ValueError(f"years: {key} must be at least 1 year, got {value}")
        lengths[key] = int(value)
    strata = np.random.default_rng([seed, 10_000]).permutation(n_models)
    two_member_model = min(1, n_models - 1)
    leaky_model = min(2, n_models - 1)
    models = []
    for i in range(n_models):
        rng = np.random.default_rng([seed, i])
        calendar, units, control_start, exp_start, file_years = _LAYOUTS[i % len(_LAYOUTS)]
        institution_id, institution = _INSTITUTIONS[i % len(_INSTITUTIONS)]
        ecs = 1.8 + 3.4 * (strata[i] + rng.uniform(0.2, 0.8)) / n_models
        f2x = rng.uniform(3.2, 4.1)
        lam = f2x / ecs
        efficacy = 1.0 if i % 2 == 0 else rng.uniform(1.2, 1.6)
        heat_capacity = rng.uniform(6.5, 9.0)
        deep = rng.uniform(60.0, 150.0)
        exchange = rng.uniform(0.5, 0.9)
        # control climate (global means over the whole control)
        leak = 0.7 if i == leaky_model else rng.uniform(0.2, 0.5)
        rsdt = rng.uniform(339.8, 340.6)
        rsutcs = rng.uniform(50.0, 56.0)
        rsut = rng.uniform(96.0, 104.0)
        rlutcs = rng.uniform(262.0, 268.0)
        rlut = rsdt - rsut - leak
        means = {"tas": rng.uniform(285.5, 288.5), "rsdt": rsdt, "rsut": rsut, "rlut": rlut,
                 "rsutcs": rsutcs, "rlutcs": rlutcs}
        sign = rng.choice([-1.0, 1.0])
        drifts = {"tas": sign * rng.uniform(0.05, 0.2), "rsdt": 0.0}  # insolation is prescribed: no drift
        for var in ("rsut", "rlut", "rsutcs", "rlutcs"):
            drifts[var] = rng.uniform(-0.3, 0.3)
        # radiative response split: clear-sky SW amplifies (surface albedo), clear-sky LW near −1.9 W m-2 K-1
        # (Planck + water vapour + lapse rate), cloud takes the rest; stated as fractions of the response.
        sw = rng.uniform(0.45, 0.8)
        lw = -rng.uniform(1.8, 2.1)
        cre = -lam - sw - lw
        frac = {"lw": lw / -lam, "sw": sw / -lam, "cre": cre / -lam}
        ar1 = rng.uniform(0.86, 0.93)
        tas_sd = rng.uniform(0.08, 0.13)
        noise_sd = {"lw_cs": rng.uniform(0.15, 0.3), "sw_cs": rng.uniform(0.1, 0.25),
                    "cre": rng.uniform(0.25, 0.45)}
        runs = [Run(CONTROL, "control", "r1i1p1f1", lengths["control"], control_start, 0.0)]
        members = ["r1i1p1f1", "r2i1p1f1"] if i == two_member_model else ["r1i1p1f1"]
        for member in members:
            for role in ("abrupt", "onepct"):
                b = _branch(rng, lengths["control"], lengths[role])
                start = control_start + b if exp_start == "parent" else exp_start
                runs.append(Run(ROLES[role], role, member, lengths[role], start, float(b),
                                CONTROL, "r1i1p1f1", b))
        b = _branch(rng, lengths["control"], lengths["historical"] + lengths["scenario"])
        runs.append(Run(HISTORICAL, "historical", "r1i1p1f1", lengths["historical"], HISTORICAL_START_YEAR,
                        float(b), CONTROL, "r1i1p1f1", b))
        for scenario in SCENARIOS:
            runs.append(Run(scenario, "scenario", "r1i1p1f1", lengths["scenario"],
                            HISTORICAL_START_YEAR + lengths["historical"], float(b + lengths["historical"]),
                            HISTORICAL, "r1i1p1f1", lengths["historical"]))
        models.append(ModelSpec(
            index=i, seed=int(seed), source_id=_name(i), institution_id=institution_id, institution=institution,
            calendar=calendar, time_units=units, control_start_year=control_start, file_years=file_years,
            f2x=f2x, lambda_=lam, efficacy=efficacy, heat_capacity=heat_capacity, deep_heat_capacity=deep,
            exchange=exchange, control_means=means, drifts=drifts, control_years=lengths["control"],
            fraction_lw_cs=frac["lw"], fraction_sw_cs=frac["sw"], fraction_cre=frac["cre"],
            cloud_masking=rng.uniform(0.1, 0.2), cre_sw_fraction=rng.uniform(0.5, 0.8),
            ar1=ar1, tas_annual_sd=tas_sd, noise_sd=noise_sd,
            polar_amplification=rng.uniform(1.5, 3.0), runs=tuple(runs),
        ))
    return models

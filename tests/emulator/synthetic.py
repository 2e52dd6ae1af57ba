"""A small synthetic extractor output folder of invented models, generated with our own two-layer model.

Writes what the extractor's contract promises (DEVELOPERS.md, "Internal contracts"):
`sensitivity.csv` and `series/<model>_<member>.nc` with one NetCDF4 group per experiment.
Invented data for the tests only; nothing here is real model output.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from sensemble.emulator.ebm import TwoLayerParameters, integrate, toa_imbalance

CONTRACT_COLUMNS = [
    "model", "member", "erf_4x", "erf_4x_se", "feedback", "feedback_se", "ecs_eff", "ecs_eff_q05",
    "ecs_eff_q95", "feedback_early", "feedback_late", "feedback_change", "ecs_late", "curvature", "tcr",
    "n_years", "flags",
]
SCENARIO = "scen-rise"
CONTROL, ABRUPT, ONEPCT = "piControl", "abrupt-4xCO2", "1pctCO2"


def scenario_forcing(n_years: int) -> np.ndarray:
    """The invented scenario's effective radiative forcing (W m-2): a smooth rise levelling off."""
    t = np.arange(1, n_years + 1, dtype=float)
    return 6.0 * t / (t + 90.0)


def ar1(rng, n, sd, phi, size=()):
    """AR(1) noise with marginal standard deviation `sd` and lag-1 autocorrelation `phi`."""
    out = np.empty(size + (n,))
    x = rng.normal(0.0, sd, size)
    innov = sd * np.sqrt(1 - phi * phi)
    for k in range(n):
        x = phi * x + rng.normal(0.0, innov, size)
        out[..., k] = x
    return out


def model_parameters(n_models: int, seed: int = 0, fixed_capacities: bool = False):
    rng = np.random.default_rng(seed)
    ecs = np.linspace(2.0, 5.0, n_models)
    rng.shuffle(ecs)
    if fixed_capacities:
        f2x = np.full(n_models, 3.7)
        c, cd, gam = np.full(n_models, 7.5), np.full(n_models, 100.0), np.full(n_models, 0.7)
    else:
        f2x = rng.uniform(3.4, 4.0, n_models)
        c = rng.uniform(6.5, 9.0, n_models)
        cd = rng.uniform(70.0, 130.0, n_models)
        gam = rng.uniform(0.55, 0.85, n_models)
    return ecs, f2x, TwoLayerParameters(f2x / ecs, c, cd, gam, 1.0)


def write_extract_dir(
    path,
    n_models: int = 10,
    n_years: int = 100,
    seed: int = 0,
    noise: float = 1.0,
    members: dict | None = None,
    extra_scenarios: tuple[str, ...] = (),
    fixed_capacities: bool = False,
    abrupt_years: int = 150,
    control_years: int = 200,
) -> dict:
    """Write the folder; return the truth (parameters, forcing) for the tests to compare against.

    `members` maps model index → number of members (default: the first three models have two).
    `noise` scales the AR(1) internal variability (0: noise-free).
    """
    path = Path(path)
    (path / "series").mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed + 1)
    ecs, f2x, params = model_parameters(n_models, seed, fixed_capacities)
    lam, c, cd, gam, eff = params.arrays()
    members = members if members is not None else {0: 2, 1: 2, 2: 2}
    scen_f = scenario_forcing(n_years)
    rows, truth_runs = [], []
    for i in range(n_models):
        model = f"TOY-{i + 1:02d}"
        p = TwoLayerParameters(lam[i], c[i], cd[i], gam[i], eff[i])
        for m in range(members.get(i, 1)):
            member = f"r{m + 1}i1p1f1"

            def run(forcing, n_noise_t=0.08, n_noise_n=0.3):
                t, d = integrate(forcing, p)
                n = toa_imbalance(forcing, t, d, p)
                k = forcing.shape[-1]
                dt = noise * ar1(rng, k, n_noise_t, 0.5)
                dn = noise * rng.normal(0.0, n_noise_n, k) - 1.5 * dt  # warmer years radiate more
                return t + dt, n + dn

            t4, n4 = run(np.full(abrupt_years, 2 * f2x[i]))
            years_1pct = np.arange(1, 141)
            t1, n1 = run(f2x[i] * years_1pct * np.log(1.01) / np.log(2.0))
            ts, ns = run(scen_f)
            tc = noise * ar1(rng, control_years, 0.08, 0.5)
            nc = noise * rng.normal(0.0, 0.3, control_years) - 1.5 * tc
            # Gregory regression as the extractor does it: N = F + feedback·T over years 1–150
            slope, intercept = np.polyfit(t4, n4, 1)
            rows.append(dict(
                model=model, member=member, erf_4x=intercept, erf_4x_se=0.1, feedback=slope, feedback_se=0.02,
                ecs_eff=-intercept / (2 * slope), ecs_eff_q05=np.nan, ecs_eff_q95=np.nan,
                feedback_early=np.nan, feedback_late=np.nan, feedback_change=np.nan, ecs_late=np.nan,
                curvature=np.nan, tcr=t1[60:80].mean(), n_years=abrupt_years, flags="",
            ))
            groups = {
                CONTROL: ("control", tc, nc, 1),
                ABRUPT: ("abrupt", t4, n4, 1850),
                ONEPCT: ("onepct", t1, n1, 1850),
                SCENARIO: ("scenario", ts, ns, 2001),
            }
            for extra in extra_scenarios:
                groups[extra] = ("scenario", ts, ns, 2001)
            write_series(path / "series" / f"{model}_{member}.nc", model, member, groups)
            truth_runs.append(dict(model=model, member=member, lambda_=lam[i], heat_capacity=c[i],
                                   deep_heat_capacity=cd[i], exchange=gam[i], ecs=ecs[i], f2x=f2x[i]))
    table = pd.DataFrame(rows, columns=CONTRACT_COLUMNS)
    table.to_csv(path / "sensitivity.csv", index=False)
    return dict(runs=pd.DataFrame(truth_runs), scenario_forcing=scen_f, params=params, ecs=ecs, f2x=f2x)


def write_series(file, model, member, groups: dict) -> None:
    """One run's series file: root attributes, then one group per experiment (NetCDF4 groups)."""
    scenarios = [k for k, v in groups.items() if v[0] == "scenario"]
    root = xr.Dataset(attrs=dict(model=model, member=member, Conventions="CF-1.10", role_control=CONTROL,
                                 role_abrupt=ABRUPT, role_onepct=ONEPCT, scenarios=";".join(scenarios)))
    root.to_netcdf(file, mode="w", engine="netcdf4")
    for exp, (role, tas, rtnt, first_year) in groups.items():
        n = tas.shape[-1]
        ds = xr.Dataset(
            {"tas": ("year", tas, {"units": "K"}), "rtnt": ("year", rtnt, {"units": "W m-2"})},
            coords={"year": np.arange(1, n + 1), "calendar_year": ("year", np.arange(first_year, first_year + n))},
            attrs={"role": role},
        )
        ds.to_netcdf(file, mode="a", group=exp, engine="netcdf4")

"""Global-mean monthly series of every run of an invented model: what its files must average to.

Each run = control state at the corresponding control time (linear drift continues) + forced response
from the two-layer model (`emulator.ebm`, exact integration with dt = 1/12 yr, forcing constant within a
month) + the run's own internal variability.

Radiative bookkeeping (all anomalies positive downward):
    response R = −λT − (ε − 1)γ(T − T_d), so ΔN = F + R (Geoffroy et al. 2013b)
    clear-sky LW   a_lw  = (1 + m) F + f_lw R
    clear-sky SW   a_sw  = f_sw R
    cloud effect   a_cre = −m F + f_cre R          (m: cloud masking of the forcing; f_lw + f_sw + f_cre = 1)
    rlutcs −= a_lw, rsutcs −= a_sw, rsut −= a_sw + q a_cre, rlut −= a_lw + (1 − q) a_cre
so N = rsdt − rsut − rlut gains ΔN, N_cs = rsdt − rsutcs − rlutcs gains a_lw + a_sw, and the cloud
radiative effect N − N_cs gains a_cre.

Internal variability: T' is AR(1) in months (coefficient r, annual-mean standard deviation as drawn);
each component gains f_c (−λT') plus its own white radiative noise, so N' = −λT' + noise.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

from sensemble.emulator.ebm import TwoLayerParameters, integrate

from .calendar import month_days
from .forcing import chain_forcing, run_forcing
from .models import ABRUPT, CONTROL, HISTORICAL, ONEPCT, SCENARIO, SCENARIO_LOW, SCENARIOS, ModelSpec, Run

__all__ = ["VARIABLES", "RunSeries", "simulate", "parameters"]

VARIABLES = ("tas", "rsdt", "rsut", "rlut", "rsutcs", "rlutcs")
_EXPERIMENT_CODES = {CONTROL: 0, ABRUPT: 1, ONEPCT: 2, HISTORICAL: 3, SCENARIO: 3, SCENARIO_LOW: 4}


@dataclass
class RunSeries:
    """Monthly global means of one run.

    values : variable → float64 array (n_months,), what the files' area-weighted means equal
    response : noise-free anomalies against the control (drift removed): `tas`, `rtnt`, `lw_cs`,
        `sw_cs`, `cre` and the forcing `erf` (W m-2)
    days : month lengths in the model's calendar
    """

    run: Run
    values: dict
    response: dict
    days: np.ndarray


def parameters(model: ModelSpec) -> TwoLayerParameters:
    return TwoLayerParameters(model.lambda_, model.heat_capacity, model.deep_heat_capacity,
                              model.exchange, model.efficacy)


def _member_code(member: str) -> int:
    return int(member[1:].split("i", 1)[0])


def _ar1_innovation_sd(r: float, annual_sd: float) -> float:
    """Innovation sd giving the wanted sd of 12-month means of a stationary AR(1) series."""
    lags = np.abs(np.subtract.outer(np.arange(12), np.arange(12)))
    marginal = annual_sd * 12.0 / np.sqrt((r ** lags).sum())
    return marginal * np.sqrt(1.0 - r * r)


def _noise(model: ModelSpec, run: Run, n_months: int, start: float | None = None) -> dict:
    """Internal variability of a run; `start` continues the AR(1) from its parent's last month (a branch)."""
    rng = np.random.default_rng([model.seed, model.index, 1, _EXPERIMENT_CODES[run.experiment_id],
                                 _member_code(run.member)])
    r = model.ar1
    innov = rng.standard_normal(n_months) * _ar1_innovation_sd(r, model.tas_annual_sd)
    if start is None:
        innov[0] /= np.sqrt(1.0 - r * r)  # start from the stationary distribution
        tas = lfilter([1.0], [1.0, -r], innov)
    else:
        tas = lfilter([1.0], [1.0, -r], innov, zi=[r * start])[0]
    radiative = -model.lambda_ * tas
    out = {"tas": tas}
    for comp, frac in (("lw_cs", model.fraction_lw_cs), ("sw_cs", model.fraction_sw_cs),
                       ("cre", model.fraction_cre)):
        out[comp] = frac * radiative + model.noise_sd[comp] * rng.standard_normal(n_months)
    return out


def _responses(model: ModelSpec) -> dict:
    """Noise-free forced anomalies (monthly) for each forced run; the historical chain integrated in one go."""
    runs = {r.experiment_id: r for r in model.runs if r.member == "r1i1p1f1"}
    n_hist, n_scen = runs[HISTORICAL].n_years, runs[SCENARIO].n_years
    forcings = [run_forcing(model, ABRUPT, runs[ABRUPT].n_years),
                run_forcing(model, ONEPCT, runs[ONEPCT].n_years),
                chain_forcing(model, n_hist, n_scen),
                chain_forcing(model, n_hist, n_scen, SCENARIO_LOW)]
    n = max(len(f) for f in forcings)
    stacked = np.zeros((len(forcings), n))
    for k, f in enumerate(forcings):
        stacked[k, : len(f)] = f
    temp, deep = integrate(stacked, parameters(model), annual_mean=True, dt=1.0 / 12.0)
    out = {}
    for k, (key, f) in enumerate(zip((ABRUPT, ONEPCT, "chain", "chain_low"), forcings)):
        t, td = temp[k, : len(f)], deep[k, : len(f)]
        resp = -model.lambda_ * t - (model.efficacy - 1.0) * model.exchange * (t - td)
        m = model.cloud_masking
        out[key] = {
            "tas": t, "erf": f, "rtnt": f + resp,
            "lw_cs": (1.0 + m) * f + model.fraction_lw_cs * resp,
            "sw_cs": model.fraction_sw_cs * resp,
            "cre": -m * f + model.fraction_cre * resp,
        }
    split = 12 * n_hist
    chain, chain_low = out.pop("chain"), out.pop("chain_low")
    out[HISTORICAL] = {k: v[:split] for k, v in chain.items()}
    out[SCENARIO] = {k: v[split:] for k, v in chain.items()}
    out[SCENARIO_LOW] = {k: v[split:] for k, v in chain_low.items()}
    return out


def _control_state(model: ModelSpec, tau: np.ndarray) -> dict:
    """Noise-free control global means at control times tau (years since its start): linear drifts about
    the control's mean, centred on its middle so the stated means are the control means."""
    centre = model.control_years / 2.0
    return {v: model.control_means[v] + model.drifts[v] * (tau - centre) / 100.0 for v in VARIABLES}


def simulate(model: ModelSpec, *, noise: bool = True) -> dict:
    """Monthly global means of every run of the model: {(experiment_id, member): RunSeries}."""
    responses = _responses(model)
    chain_noise = None
    out = {}

    def historical_chain_noise() -> dict:
        # the historical-type run and demo-rise share one noise stream (drawn once)
        nonlocal chain_noise
        if chain_noise is None:
            hist = model.run(HISTORICAL)
            chain_noise = _noise(model, hist, 12 * (hist.n_years + model.run(SCENARIO).n_years))
        return chain_noise

    for run in model.runs:
        n = 12 * run.n_years
        tau = run.control_offset + (np.arange(n) + 0.5) / 12.0
        state = _control_state(model, tau)
        if run.experiment_id == CONTROL:
            resp = {k: np.zeros(n) for k in ("tas", "erf", "rtnt", "lw_cs", "sw_cs", "cre")}
        else:
            resp = responses[run.experiment_id]
        if not noise:
            var = {k: np.zeros(n) for k in ("tas", "lw_cs", "sw_cs", "cre")}
        elif run.experiment_id in (HISTORICAL, SCENARIO):
            # the scenario continues the historical-type run: one noise stream across both
            lo = 0 if run.experiment_id == HISTORICAL else 12 * model.run(HISTORICAL).n_years
            var = {k: v[lo: lo + n] for k, v in historical_chain_noise().items()}
        elif run.experiment_id == SCENARIO_LOW:
            # branches from the historical-type run's last month: its own noise, continuing that state
            last = 12 * model.run(HISTORICAL).n_years - 1
            var = _noise(model, run, n, start=float(historical_chain_noise()["tas"][last]))
        else:
            var = _noise(model, run, n)
        a_lw = resp["lw_cs"] + var["lw_cs"]
        a_sw = resp["sw_cs"] + var["sw_cs"]
        a_cre = resp["cre"] + var["cre"]
        q = model.cre_sw_fraction
        values = {
            "tas": state["tas"] + resp["tas"] + var["tas"],
            "rsdt": state["rsdt"],
            "rsutcs": state["rsutcs"] - a_sw,
            "rlutcs": state["rlutcs"] - a_lw,
            "rsut": state["rsut"] - a_sw - q * a_cre,
            "rlut": state["rlut"] - a_lw - (1.0 - q) * a_cre,
        }
        days = month_days(run.start_year, n, model.calendar)
        out[(run.experiment_id, run.member)] = RunSeries(run, values, dict(resp), days)
    return out

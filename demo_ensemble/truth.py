"""The known truth of the demo ensemble: true parameters and what a noise-free extraction must return.

The extraction targets come from the noise-free series (no internal variability), drift removed exactly,
reduced to annual means weighted by month length in the model's calendar, then fitted with plain numpy:
- Gregory regression ΔN = F + b ΔT over years 1–150 of abrupt-4xCO2 (Gregory et al. 2004):
  `gregory_erf_4x` = F, `gregory_feedback` = b (< 0), `gregory_ecs_eff` = −F / (2 b);
- `feedback_early` / `feedback_late`: slopes over years 1–20 / 21–150, `gregory_ecs_late` = −F_late/(2 b_late);
- `gregory_curvature`: a in ΔN = F + bΔT + aΔT²;
- component slopes `feedback_lw_cs`, `feedback_sw_cs`, `feedback_cre` (they sum to `gregory_feedback`);
- `tcr`: mean ΔT over years 61–80 of 1pctCO2.
"""
from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from sensemble.contract.atomic import atomic_path

from .calendar import annual_mean
from .forcing import REFERENCE_F2X, month_times, reference_chain
from .models import ABRUPT, FORCING_RATIO_4X, HISTORICAL, ONEPCT, SCENARIO, SCENARIOS, ModelSpec

__all__ = ["TRUTH_COLUMNS", "FORCING_COLUMNS", "truth_rows", "forcing_rows", "write_csv", "gregory_targets"]

EARLY_YEARS = (1, 20)
LATE_YEARS = (21, 150)
GREGORY_YEARS = (1, 150)
TCR_YEARS = (61, 80)

TRUTH_COLUMNS = [
    "model", "member", "institution_id", "calendar", "time_units", "control_start_year",
    "f2x", "f4x", "forcing_ratio_4x", "lambda", "efficacy", "heat_capacity", "deep_heat_capacity", "exchange",
    "ecs", "tcr",
    "gregory_erf_4x", "gregory_feedback", "gregory_ecs_eff", "feedback_early", "feedback_late",
    "feedback_change", "gregory_ecs_late", "gregory_curvature",
    "feedback_lw_cs", "feedback_sw_cs", "feedback_cre",
    "fraction_lw_cs", "fraction_sw_cs", "fraction_cre", "cloud_masking",
    "leak", "control_tas_mean", "drift_tas", "drift_rsut", "drift_rlut", "drift_rsutcs", "drift_rlutcs",
    "drift_rtnt", "ar1_monthly", "tas_annual_sd",
    "control_years", "abrupt_years", "onepct_years",
    "branch_year_abrupt", "branch_year_onepct", "branch_year_historical", "branch_year_scenario",
]


def _segment(years: np.ndarray, lo: int, hi: int) -> np.ndarray:
    return (years >= lo) & (years <= hi)


def gregory_targets(tas: np.ndarray, components: dict) -> dict:
    """Gregory-type fits over annual noise-free anomalies; `components` holds `rtnt` and optional parts."""
    years = np.arange(1, len(tas) + 1)
    out = {}
    sel = _segment(years, *GREGORY_YEARS)
    slope, intercept = np.polyfit(tas[sel], components["rtnt"][sel], 1)
    out.update(gregory_erf_4x=intercept, gregory_feedback=slope,
               gregory_ecs_eff=-intercept / (FORCING_RATIO_4X * slope))
    early = _segment(years, *EARLY_YEARS)
    late = _segment(years, *LATE_YEARS)
    out["feedback_early"] = np.polyfit(tas[early], components["rtnt"][early], 1)[0] if early.sum() > 2 else math.nan
    if late.sum() > 2:
        b_late, f_late = np.polyfit(tas[late], components["rtnt"][late], 1)
        out.update(feedback_late=b_late, gregory_ecs_late=-f_late / (FORCING_RATIO_4X * b_late))
    else:
        out.update(feedback_late=math.nan, gregory_ecs_late=math.nan)
    out["feedback_change"] = out["feedback_late"] - out["feedback_early"]
    out["gregory_curvature"] = np.polyfit(tas[sel], components["rtnt"][sel], 2)[0] if sel.sum() > 3 else math.nan
    for comp in ("lw_cs", "sw_cs", "cre"):
        if comp in components:
            out[f"feedback_{comp}"] = np.polyfit(tas[sel], components[comp][sel], 1)[0]
    return out


def truth_rows(model: ModelSpec, noise_free: dict) -> list[dict]:
    """One row per member of the model, from its noise-free series (`series.simulate(model, noise=False)`)."""
    d = model.drifts
    hist = model.run(HISTORICAL)
    base = {
        "model": model.source_id, "institution_id": model.institution_id, "calendar": model.calendar,
        "time_units": model.time_units, "control_start_year": model.control_start_year,
        "f2x": model.f2x, "f4x": model.f4x, "forcing_ratio_4x": FORCING_RATIO_4X, "lambda": model.lambda_,
        "efficacy": model.efficacy, "heat_capacity": model.heat_capacity,
        "deep_heat_capacity": model.deep_heat_capacity, "exchange": model.exchange, "ecs": model.ecs,
        "fraction_lw_cs": model.fraction_lw_cs, "fraction_sw_cs": model.fraction_sw_cs,
        "fraction_cre": model.fraction_cre, "cloud_masking": model.cloud_masking,
        "leak": model.leak, "control_tas_mean": model.control_means["tas"],
        "drift_tas": d["tas"], "drift_rsut": d["rsut"], "drift_rlut": d["rlut"], "drift_rsutcs": d["rsutcs"],
        "drift_rlutcs": d["rlutcs"], "drift_rtnt": d["rsdt"] - d["rsut"] - d["rlut"],
        "ar1_monthly": model.ar1, "tas_annual_sd": model.tas_annual_sd, "control_years": model.control_years,
        "branch_year_historical": hist.branch_year, "branch_year_scenario": model.run(SCENARIO).branch_year,
    }
    rows = []
    members = [r.member for r in model.runs if r.experiment_id == ABRUPT]
    for member in members:
        row = dict(base, member=member)
        abrupt = noise_free[(ABRUPT, member)]
        annual = {k: annual_mean(v, abrupt.days) for k, v in abrupt.response.items()}
        row.update(gregory_targets(annual["tas"], annual))
        row["abrupt_years"] = abrupt.run.n_years
        row["branch_year_abrupt"] = abrupt.run.branch_year
        onepct = noise_free.get((ONEPCT, member))
        if onepct is not None:
            t = annual_mean(onepct.response["tas"], onepct.days)
            years = np.arange(1, len(t) + 1)
            sel = _segment(years, *TCR_YEARS)
            row["tcr"] = t[sel].mean() if sel.sum() == TCR_YEARS[1] - TCR_YEARS[0] + 1 else math.nan
            row["onepct_years"] = onepct.run.n_years
            row["branch_year_onepct"] = onepct.run.branch_year
        rows.append(row)
    return rows


def forcing_rows(model: ModelSpec, noise_free: dict) -> list[dict]:
    """Annual true forcing of the historical-type run and each scenario continuing it (month-length weighted)."""
    rows = []
    hist = model.run(HISTORICAL)
    for exp in (HISTORICAL,) + SCENARIOS:
        s = noise_free[(exp, "r1i1p1f1")]
        offset = 0 if exp == HISTORICAL else hist.n_years
        erf = annual_mean(s.response["erf"], s.days)
        ref = annual_mean(reference_chain(offset + month_times(s.run.n_years), hist.n_years,
                                          SCENARIO if exp == HISTORICAL else exp), s.days)
        for k in range(len(erf)):
            rows.append({"model": model.source_id, "experiment_id": exp, "year": s.run.start_year + k,
                         "erf": erf[k], "erf_reference": ref[k], "scale": model.f2x / REFERENCE_F2X})
    return rows


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, (float, np.floating)):
        return "" if math.isnan(value) else repr(float(value))
    return str(value)


def write_csv(path: Path, rows: list[dict], columns: list[str]) -> Path:
    """Write rows atomically (temporary file, then rename); missing values are empty cells."""
    path = Path(path)
    with atomic_path(path) as tmp, open(tmp, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        for row in rows:
            w.writerow([_cell(row.get(c)) for c in columns])
    return path


FORCING_COLUMNS = ["model", "experiment_id", "year", "erf", "erf_reference", "scale"]

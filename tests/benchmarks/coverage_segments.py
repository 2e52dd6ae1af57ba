"""Coverage of the standard errors of how feedback changes as warming goes on (not run by pytest).

The trials of tests/benchmarks/coverage_extraction.py (invented two-layer models with efficacy 1.0–1.5, so the
Gregory line is curved; AR(1) internal variability at lag-1 0.5 and 0.8; a drifting control whose parallel
segment is as long as the run). Truth: the same fits of the noise-free run — early (years 1–20) and late (21–150)
slopes, their change, and the quadratic coefficient. Reported: estimate ± 1.645·se through the extractor's own
per-model science (`fit_row`), i.e. the table's `feedback_early_se`, `feedback_late_se`, `feedback_change_se`,
`curvature_se`. "if independent" is the change's error taken as √(se_early² + se_late²), without the two
segments' covariance. "Satterthwaite ν" (not adopted) takes Student-t quantiles with the degrees of freedom of the
estimated variances; "true σ and ρ (ceiling)" the slopes' standard errors with the trial's own AR(1) parameters in
place of the control's estimates (see coverage_extraction.py).

Run: python tests/benchmarks/bench_coverage.py --only segments [--quick]

Last measured: see the README's "Uncertainty" section.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from sensemble.extractor.control import control_residuals, drift_corrected
from sensemble.extractor.gregory import ControlVariability, quadratic_fit, segment_fits, window
from sensemble.extractor.science import fit_row

from tests.benchmarks.coverage_extraction import (BRANCH_INDEX, CONTROL_START, SETTINGS, _dataset, _se_row, _true_se,
                                                  _unit, synthetic_trials)


def _reported(trial) -> dict:
    control = _dataset(*trial["control"], CONTROL_START, "piControl")
    abrupt = _dataset(*trial["abrupt"], 2000, "abrupt-4xCO2")
    anomalies, _ = drift_corrected(abrupt, control, CONTROL_START + BRANCH_INDEX, order=SETTINGS.drift_order)
    residuals = control_residuals(control, SETTINGS.drift_order)
    row = fit_row(_unit(), anomalies, None, control, residuals, SETTINGS, []).as_dict()
    variability = ControlVariability.of(residuals, anomalies)
    seg = segment_fits(anomalies["tas"], anomalies["rtnt"], SETTINGS.early_years, SETTINGS.late_years,
                       SETTINGS.forcing_ratio, control=variability, dof=True)
    quad = quadratic_fit(anomalies["tas"], anomalies["rtnt"], SETTINGS.fit_years, control=variability, dof=True)
    truth = _truth(trial)
    true_se = {f"{name}_se_true": _true_se(trial, window(anomalies["tas"], years), truth[name], years[0])
               for name, years in (("feedback_early", SETTINGS.early_years), ("feedback_late", SETTINGS.late_years))}
    return dict(row, feedback_early_dof=seg.early.feedback_dof, feedback_late_dof=seg.late.feedback_dof,
                feedback_change_dof=seg.feedback_change_dof, curvature_dof=quad.curvature_dof, **true_se)


def _truth(trial) -> dict:
    temp, net = trial["forced"]
    seg = segment_fits(temp, net, early=SETTINGS.early_years, late=SETTINGS.late_years)
    quad = quadratic_fit(temp, net, years=SETTINGS.fit_years)
    return {"feedback_early": seg.feedback_early, "feedback_late": seg.feedback_late,
            "feedback_change": seg.feedback_change, "curvature": quad.curvature}


def rows_at(lag1: float, n_trials: int, seed: int) -> list[dict]:
    trials = synthetic_trials(np.random.default_rng(seed), n_trials, lag1)
    reported = [_reported(t) for t in trials]
    truth = [_truth(t) for t in trials]
    rows = []
    for name in ("feedback_early", "feedback_late", "feedback_change", "curvature"):
        rows.append(_se_row(f"{name} ± 1.645 se, lag-1 {lag1}", [t[name] for t in truth],
                            [r[name] for r in reported], [r[f"{name}_se"] for r in reported]))
        rows.append(_se_row(f"{name} ± t se, lag-1 {lag1}, Satterthwaite ν (not adopted)", [t[name] for t in truth],
                            [r[name] for r in reported], [r[f"{name}_se"] for r in reported],
                            [r[f"{name}_dof"] for r in reported]))
        if f"{name}_se_true" in reported[0]:
            rows.append(_se_row(f"{name} ± 1.645 se, lag-1 {lag1}, true σ and ρ (ceiling)", [t[name] for t in truth],
                                [r[name] for r in reported], [r[f"{name}_se_true"] for r in reported]))
    independent = [np.hypot(r["feedback_early_se"], r["feedback_late_se"]) for r in reported]
    rows.append(_se_row(f"feedback_change ± 1.645 se, lag-1 {lag1}, if independent", [t["feedback_change"] for t in truth],
                        [r["feedback_change"] for r in reported], independent))
    return rows


def run(quick: bool = False) -> list[dict]:
    """Rows ``what, nominal, measured, detail``."""
    n_trials = 60 if quick else 400
    return rows_at(0.5, n_trials, 11) + rows_at(0.8, n_trials, 12)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    for row in run(quick="--quick" in sys.argv):
        print(f"{row['what']:<55} {row['nominal']:.2f} {row['measured']:.3f}  {row['detail']}")

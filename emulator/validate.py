"""Leave-one-model-out validation of the pathway emulator.

All members of a model are held out together (members share the model's physics, so holding out one
member alone would flatter the emulator). For each held-out run:
- end-of-pathway warming = mean of the last `END_YEARS` = 10 years (a decadal mean damps single-year noise);
  its predictive interval comes from sampled pathways, so correlations between years are kept: the variance
  is that of a 10-year mean, with the internal variability's AR(1) correlation, not of one year;
- the held-out pathway is a single realisation, so it is judged against the emulator's spread for one
  realisation (forced-response uncertainty + internal variability; `PathwayEmulator.prediction_target_`);
- RMSE and bias over the whole pathway; per-year coverage of the 90 % interval (the emulator's own quantiles);
- the predictive sd of the end-of-pathway warming is the emulator's exact one (`spread_of_mean`) where it has it:
  a sample sd of heavy-tailed Student-t draws is biased low;
- error = predicted − actual, and the standardized error z = (predicted − actual) / predictive sd of the
  end-of-pathway warming: the same sign, so the ensemble's bias and mean z agree in sign.
"""
from __future__ import annotations

from typing import Callable

from sklearn.base import clone

import numpy as np
import pandas as pd
from scipy.stats import norm

from .errors import EmulatorInputError
from .training import TrainingSet

__all__ = ["END_YEARS", "end_of_pathway", "leave_one_model_out", "validation_table"]

END_YEARS = 10
Z90 = norm.ppf(0.95)  # half-width of the central 90 % interval in sd


def end_of_pathway(paths, n_years: int = END_YEARS):
    """Mean warming over the last `n_years` years (last axis)."""
    return np.asarray(paths)[..., -n_years:].mean(axis=-1)


def leave_one_model_out(ts: TrainingSet, estimator, n_samples: int = 1000, random_state=0,
                        progress: Callable[[str], None] | None = None) -> tuple[pd.DataFrame, dict]:
    """Hold out each model in turn and fit `clone(estimator)` to the rest (an `EnsembleEmulator`, fitted or not).

    Returns (per-run DataFrame, summary dict). The estimator's `fit` does everything that learns from data
    (calibration, forcing diagnosis, GP), so nothing of the held-out model leaks into its prediction.
    """
    models = list(dict.fromkeys(ts.models))
    if len(models) < 4:
        raise EmulatorInputError(f"leave-one-model-out needs at least 4 models, have {len(models)}")
    rng = np.random.default_rng(random_state)
    rows = []
    for i, model in enumerate(models):
        if progress:
            progress(f"validation {i + 1}/{len(models)}: holding out {model}")
        held = ts.models == model
        emulator = clone(estimator).fit(ts.subset(~held))
        test = ts.subset(held)
        mean, sd = emulator.predict(test.X, return_std=True)
        samples = emulator.sample_paths(test.X, n_samples, random_state=rng)
        end_samples = end_of_pathway(samples)
        actual_end = end_of_pathway(test.Y)
        pred_end = end_of_pathway(mean)
        if hasattr(emulator, "spread_of_mean"):  # exact; a sample sd of heavy-tailed t draws is biased low
            sd_ends = np.hypot(*emulator.spread_of_mean(test.X, END_YEARS))
        else:
            sd_ends = end_samples.std(axis=1, ddof=1)
        if hasattr(emulator, "quantiles"):
            lower, upper = np.moveaxis(emulator.quantiles(test.X, [0.05, 0.95]), 1, 0)
        else:
            lower, upper = mean - Z90 * sd, mean + Z90 * sd
        for r in range(test.n_runs):
            err = test.Y[r] - mean[r]
            q05, q95 = np.quantile(end_samples[r], [0.05, 0.95])
            sd_end = sd_ends[r]
            rows.append({
                "model": model, "member": test.members[r],
                **{name: test.X[r, j] for j, name in enumerate(ts.inputs)},
                "n_train_runs": int((~held).sum()),
                "end_actual": actual_end[r], "end_predicted": pred_end[r], "end_sd": sd_end,
                "end_q05": q05, "end_q95": q95, "end_error": pred_end[r] - actual_end[r],
                "end_covered90": bool(q05 <= actual_end[r] <= q95),
                "end_z": (pred_end[r] - actual_end[r]) / sd_end,
                "pathway_rmse": float(np.sqrt(np.mean(err ** 2))),
                "pathway_bias": float(-np.mean(err)),
                "pathway_coverage90": float(np.mean((lower[r] <= test.Y[r]) & (test.Y[r] <= upper[r]))),
            })
    per_run = pd.DataFrame(rows)
    summary = {
        "n_models": len(models),
        "n_runs": len(per_run),
        "end_years": END_YEARS,
        "end_rmse": float(np.sqrt(np.mean(per_run["end_error"] ** 2))),
        "end_bias": float(per_run["end_error"].mean()),
        "end_coverage90": float(per_run["end_covered90"].mean()),
        "pathway_rmse": float(np.sqrt(np.mean(per_run["pathway_rmse"] ** 2))),
        "pathway_coverage90": float(per_run["pathway_coverage90"].mean()),
        "mean_z": float(per_run["end_z"].mean()),
        "rms_z": float(np.sqrt(np.mean(per_run["end_z"] ** 2))),
    }
    return per_run, summary


def validation_table(per_run: pd.DataFrame, summary: dict) -> pd.DataFrame:
    """`validation.csv`: one row per held-out run, then a row `model = ALL` with the ensemble scores
    (end_error → bias, end_rmse, coverage as fractions, end_z → mean standardized error, rms_z); errors and z
    are both predicted − actual."""
    table = per_run.copy()
    table["end_rmse"] = table["end_error"].abs()
    table["rms_z"] = table["end_z"].abs()
    total = {c: np.nan for c in table.columns}
    total.update(model="ALL", member="", n_train_runs=np.nan, end_error=summary["end_bias"],
                 end_rmse=summary["end_rmse"], end_covered90=summary["end_coverage90"],
                 pathway_rmse=summary["pathway_rmse"], pathway_coverage90=summary["pathway_coverage90"],
                 end_z=summary["mean_z"], rms_z=summary["rms_z"])
    table["end_covered90"] = table["end_covered90"].astype(float)
    return pd.concat([table, pd.DataFrame([total])], ignore_index=True)

"""`emulate`: from an extractor output folder to pathways, crossings, validation, a saved emulator and figures.

The one entry point the command line needs. Files written into `out_dir` (each atomically):
`pathways.csv`, `pathways.nc`, `crossings.csv`, `validation.csv`, `calibration.csv`, `training_runs.csv`,
`input_distributions.csv` (distribution cases: the input quantiles asked for and achieved),
`emulator.nc`, `figures/fan_<case>.png`, `figures/validation.png`.
"""
from __future__ import annotations

import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from sensemble.contract.cf import CONVENTIONS, TEMPERATURE_DIFFERENCE, history_line
from sensemble.contract.table import COLUMN_META

from sensemble.contract.atomic import atomic_path, local_writes, write_csv
from .ensemble import EnsembleEmulator
from .errors import EmulatorInputError
from .persist import save_emulator
from .predict import predict_cases, prediction_cases
from .settings import EmulatorSettings, PredictionSettings
from .training import TrainingSet, load_training_set
from .validate import END_YEARS, leave_one_model_out, validation_table

__all__ = ["emulate", "EmulationResult", "format_summary"]

@dataclass
class EmulationResult:
    """What `emulate` did: `summary` (small, printable), `files` written, and the objects for further use."""

    summary: dict
    files: list[Path]
    validation: pd.DataFrame | None = None
    prediction: object = None
    emulator: EnsembleEmulator | None = None
    training: TrainingSet | None = None
    calibration: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)


def write_pathways_netcdf(ds, path, scenario):
    """`pathways.nc`, CF-1.11 clean (the IOOS checker's `cf:1.11` suite reports nothing; tests/test_cf_outputs.py).

    CF §1.3 and §2.5.1: a coordinate variable is numeric, strictly monotonic and has no `_FillValue`; so names
    along a dimension (the cases) are a string label variable `<dim>_name` on it (`case_name`, CF §6.1), and no
    coordinate gets a fill value. Years are written as 32-bit integers, which every CF version allows.
    """
    ds = ds.copy()
    ds.attrs.update(Conventions=CONVENTIONS, title=f"emulated warming pathways for scenario {scenario}",
                    source="sensemble pathway emulator", scenario=scenario,
                    history=history_line("sensemble emulate"))
    ds["flags"] = ds["flags"].astype(str)
    for dim in [d for d in ds.dims if d in ds.coords and ds[d].dtype.kind in "OUS"]:  # e.g. case
        labels = ds[dim].values.astype(str)
        ds = ds.drop_vars(dim).assign_coords({f"{dim}_name": (dim, labels, {"long_name": f"name of the {dim}"})})
    for name in ("year", "calendar_year"):
        if name in ds.coords:
            ds = ds.assign_coords({name: ds[name].astype("int32")})
    for name in ("mean", "sd", "warming_quantile"):
        ds[name].attrs["units_metadata"] = TEMPERATURE_DIFFERENCE  # warming is a temperature difference
    for name in str(ds.attrs.get("inputs", "")).split(";"):
        if name in ds and name in COLUMN_META:  # the inputs are table columns: their units come with them
            ds[name].attrs.setdefault("units", COLUMN_META[name][0])
    for name in ds.coords:
        ds[name].encoding["_FillValue"] = None
    with atomic_path(path) as tmp, local_writes():
        ds.to_netcdf(tmp, engine="netcdf4")
    return Path(path)


def emulate(extract_dir, out_dir, settings: EmulatorSettings = EmulatorSettings(),
            prediction: PredictionSettings = PredictionSettings(),
            progress: Callable[[str], None] | None = None) -> EmulationResult:
    """Fit, validate and run the pathway emulator on an extractor output folder; write the contract files.

    Parameters
    ----------
    extract_dir : folder with `sensitivity.csv` and `series/` (the extractor's output)
    out_dir : where the outputs go (created)
    settings : how the emulator is built (scenario, inputs, forcing source, …)
    prediction : what to predict (cases, grid, thresholds, quantiles, samples)
    progress : called with a short message at each stage (e.g. `print`)

    Returns
    -------
    EmulationResult with `summary` (scenario, runs used and skipped, validation scores, files written).
    """
    say = progress or (lambda message: None)
    started = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    files: list[Path] = []
    say(f"reading {extract_dir}")
    ts = load_training_set(extract_dir, settings.scenario, settings.inputs)
    n_models = len(set(ts.models))
    say(f"scenario {ts.scenario}: {ts.n_runs} runs of {n_models} models, {len(ts.years)} years"
        + (f"; {len(ts.skipped)} runs skipped" if len(ts.skipped) else ""))
    say("calibrating the two-layer model per run and fitting the emulator")
    emulator = EnsembleEmulator.from_settings(settings).fit(ts)
    calibration = emulator.calibration_
    details = {"forcing_source": emulator.forcing_source_, "mean_parameters": emulator.mean_parameters_,
               "internal_variability": emulator.internal_variability_,
               **{f"fit_{i}_note": note for i, note in enumerate(emulator.notes_)}}
    files.append(write_csv(calibration, out_dir / "calibration.csv"))
    runs = pd.concat([
        pd.DataFrame({"model": ts.models, "member": ts.members,
                      **{c: ts.X[:, j] for j, c in enumerate(ts.inputs)}, "used": True, "reason": ""}),
        ts.skipped.assign(used=False),
    ], ignore_index=True)
    files.append(write_csv(runs, out_dir / "training_runs.csv"))

    validation_summary, per_run = None, None
    if settings.validate:
        if n_models >= 4:
            per_run, validation_summary = leave_one_model_out(
                ts, emulator, n_samples=settings.validation_samples, random_state=settings.random_state, progress=say)
            files.append(write_csv(validation_table(per_run, validation_summary), out_dir / "validation.csv"))
        else:
            details["validation_note"] = f"validation skipped: {n_models} models, at least 4 needed"
            say(details["validation_note"])

    say("predicting")
    rng = np.random.default_rng(prediction.random_state)
    cases = prediction_cases(prediction, ts.X, ts.models, ts.inputs, rng)
    result = predict_cases(
        emulator, cases, training_X=ts.X, years=ts.years, calendar_years=ts.calendar_years,
        thresholds=prediction.thresholds, quantiles=prediction.quantiles, n_samples=prediction.n_samples,
        crossing_window=prediction.crossing_window, random_state=rng)
    files.append(write_csv(result.pathways_table(), out_dir / "pathways.csv"))
    files.append(write_pathways_netcdf(result.dataset, out_dir / "pathways.nc", ts.scenario))
    files.append(write_csv(result.crossings, out_dir / "crossings.csv"))
    if len(result.input_quantiles):
        files.append(write_csv(result.input_quantiles, out_dir / "input_distributions.csv"))

    metadata = {
        "scenario": ts.scenario, "source": str(extract_dir), "inputs": list(ts.inputs),
        "models": list(ts.models), "members": list(ts.members), "years": ts.years,
        "calendar_years": ts.calendar_years, "settings": asdict(settings),
        "mean_parameters": details.get("mean_parameters"), "forcing_source": details.get("forcing_source"),
        "skipped": ts.skipped.to_dict(orient="records"),
    }
    files.append(save_emulator(emulator.emulator_, out_dir / "emulator.nc", metadata))

    if prediction.figures:
        from sensemble.contract.names import safe_name
        from .figures import fan_figure, validation_figure  # matplotlib only when figures are wanted

        say("drawing figures")
        for name in list(result.dataset["case"].values)[: prediction.max_fan_figures]:
            files.append(fan_figure(result.dataset, name, out_dir / "figures" / f"fan_{safe_name(name)}.png",
                                    training_Y=ts.Y, thresholds=prediction.thresholds, scenario=ts.scenario))
        if per_run is not None:
            files.append(validation_figure(per_run, out_dir / "figures" / "validation.png", END_YEARS))

    summary = {
        "scenario": ts.scenario,
        "inputs": list(ts.inputs),
        "n_runs": ts.n_runs,
        "n_models": n_models,
        "skipped_runs": [f"{r.model} {r.member}: {r.reason}" for r in ts.skipped.itertuples()],
        "calibration_failures": [f"{r.model} {r.member}: {r.status}" for r in calibration.itertuples() if r.status != "ok"],
        "n_components": int(emulator.emulator_.n_components_),
        "variance_explained": float(np.sum(emulator.emulator_.explained_variance_ratio_)),
        "forcing": details.get("forcing_source", "none (physics mean off)"),
        "mean_parameters": details.get("mean_parameters"),
        "internal_variability": details.get("internal_variability"),
        "prediction_of": emulator.prediction_target_,
        "end_spread": _end_spread(emulator, ts),
        "validation": validation_summary,
        "notes": [v for k, v in details.items() if k.endswith("_note")] + (
            [f"{len(emulator.emulator_.fit_warnings_)} GP hyperparameter(s) ended at a search bound (usually a component "
             "the inputs do not explain, fitted as noise)"] if emulator.emulator_.fit_warnings_ else []),
        "n_cases": len(cases),
        "input_quantiles": result.input_quantiles.to_dict(orient="records"),
        "out_dir": str(out_dir),
        "files": [str(f) for f in files],
        "seconds": round(time.perf_counter() - started, 1),
    }
    return EmulationResult(summary, files, validation_table(per_run, validation_summary) if per_run is not None else None,
                           result, emulator, ts, calibration)


def _end_spread(emulator: EnsembleEmulator, ts: TrainingSet) -> dict:
    """Where the spread of the end-of-pathway warming comes from, at the training inputs' median."""
    x = np.median(ts.X, axis=0)
    forced, internal = emulator.spread_of_mean(x[None, :], END_YEARS)
    return {"at": {name: float(v) for name, v in zip(ts.inputs, x)}, "years": END_YEARS,
            "forced_sd": float(forced[0]), "internal_sd": float(internal[0])}


def format_summary(summary: dict) -> str:
    """A few lines for the console: scenario, runs, emulator, validation scores, where the outputs are."""
    lines = [f"scenario {summary['scenario']}: {summary['n_runs']} runs of {summary['n_models']} models, "
             f"inputs {', '.join(summary['inputs'])}"]
    for what in ("skipped_runs", "calibration_failures"):
        for item in summary.get(what, []):
            lines.append(f"  {what.replace('_', ' ')[:-1]}: {item}")
    lines.append(f"emulator: {summary['n_components']} components ({100 * summary['variance_explained']:.1f} % of "
                 f"residual variance); forcing {summary['forcing']}")
    if summary.get("prediction_of"):
        lines.append(f"predicts {summary['prediction_of']}")
    e = summary.get("end_spread")
    if e:
        at = ", ".join(f"{k}={v:.3g}" for k, v in e["at"].items())
        lines.append(f"spread (1 sd) of the last-{e['years']}-year mean at {at}: forced response (emulator and "
                     f"structural) {e['forced_sd']:.3f} K, internal variability {e['internal_sd']:.3f} K")
    v = summary.get("validation")
    if v:
        lines.append(
            f"leave-one-model-out ({v['n_models']} models, {v['n_runs']} runs): end-of-pathway warming "
            f"(mean of last {v['end_years']} years) RMSE {v['end_rmse']:.3f} K, bias {v['end_bias']:+.3f} K, "
            f"90 % coverage {v['end_coverage90']:.2f}; whole pathway RMSE {v['pathway_rmse']:.3f} K, "
            f"90 % coverage {v['pathway_coverage90']:.2f}; standardized error mean {v['mean_z']:+.2f}, rms {v['rms_z']:.2f}")
    for note in summary.get("notes", []):
        lines.append(f"  note: {note}")
    for r in summary.get("input_quantiles", []):
        lines.append(f"  {r['case']}: {r['input']} 17/50/83 % asked {r['requested_q17']:.3g}/{r['requested_q50']:.3g}/"
                     f"{r['requested_q83']:.3g}, achieved {r['achieved_q17']:.3g}/{r['achieved_q50']:.3g}/"
                     f"{r['achieved_q83']:.3g} ({r['n_samples']} samples)")
    lines.append(f"{summary['n_cases']} cases predicted; outputs in {summary['out_dir']} ({len(summary['files'])} files, "
                 f"{summary['seconds']} s)")
    return "\n".join(lines)

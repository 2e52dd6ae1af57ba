"""`emulate_pathways`: several scenarios in one batch — the archive's own, forcing files and CO2 files.

Each pathway spec (config `[[emulator.pathways]]`) names one scenario: an `experiment` of the archive, a
`forcing_file` (W m-2 by year) or a `co2_file` (ppm by year), and a `route`:
- "gp": the pathway Gaussian process on residuals from the two-layer mean (emulator.ensemble), trained on the
  scenario's runs — only for an experiment of the archive, and only over the runs' years;
- "parameters": sampled two-layer parameter vectors under the scenario's forcing (emulator.parameter_pathways)
  — any forcing, over all its years;
- "auto" (default): for an experiment both routes are validated leave-one-model-out and the one with the
  smaller end-of-pathway RMSE predicts; a file can only take the parameter route.
An experiment may also name its known `forcing_file` or `co2_file` (with `forcing_f2x`, the F2x the file's
forcing belongs to): the parameter route is then also validated with that forcing — leave-one-model-out with
no run of the scenario used at all, not even for the forcing (`holdout` = "scenario" in `validation.csv`).
Outputs keyed by scenario, with the route that produced each pathway: `pathways.csv`, `crossings.csv`,
`crossing_ecs.csv` (crossing years against ECS), `validation.csv` (both routes, per scenario),
`scenarios.csv` (what each scenario is, its forcing and route), `calibration.csv`, figures.
"""
from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from sensemble.contract.atomic import write_csv
from sensemble.contract.names import safe_name

from .ensemble import EnsembleEmulator, calibrate_runs
from .errors import EmulatorInputError
from .parameter_pathways import ParameterPathwayEmulator
from .pathway_specs import ROUTES, PathwaySpec, pathway_specs
from .predict import Case, point_case, predict_cases, prediction_cases
from .run import write_pathways_netcdf
from .settings import EmulatorSettings, PredictionSettings
from .training import available_scenarios, load_physics_set, load_training_set
from .validate import leave_one_model_out, validation_table

__all__ = ["PathwaySpec", "pathway_specs", "emulate_pathways", "ROUTES", "format_pathways_summary"]

#: ECS values (K) of the crossing-year table: the assessed range and beyond, every 0.25 K
CROSSING_ECS = tuple(np.round(np.arange(1.5, 6.01, 0.25), 2))


def _parameter_route(settings: EmulatorSettings, **forcing) -> ParameterPathwayEmulator:
    return ParameterPathwayEmulator(inputs=tuple(settings.inputs), efficacy=settings.efficacy,
                                    internal_variability=settings.internal_variability,
                                    co2_reference=settings.co2_reference, random_state=settings.random_state,
                                    **forcing)


def _crossing_cases(X, inputs) -> list[Case]:
    """Point cases along ECS (`CROSSING_ECS`), other inputs at the ensemble's median."""
    median = np.median(X, axis=0)
    return [point_case({name: (ecs if name == "ecs_eff" else float(median[j])) for j, name in enumerate(inputs)},
                       name=f"ecs_eff={ecs:g}") for ecs in CROSSING_ECS]


def _keyed(frame: pd.DataFrame, scenario: str, route: str) -> pd.DataFrame:
    frame = frame.copy()
    frame.insert(0, "route", route)
    frame.insert(0, "scenario", scenario)
    return frame


def emulate_pathways(extract_dir, out_dir, settings: EmulatorSettings, prediction: PredictionSettings,
                     specs: list[PathwaySpec] | None = None, progress: Callable[[str], None] | None = None) -> dict:
    """Emulate every pathway spec (default: `settings.pathways`); write the outputs keyed by scenario.

    Returns a summary dict (scenarios with their route and validation scores, files written).
    """
    say = progress or (lambda message: None)
    started = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    specs = pathway_specs(getattr(settings, "pathways", ()) if specs is None else specs,
                          available_scenarios(extract_dir))
    if not specs:
        raise EmulatorInputError("no pathway to emulate", hint="add [[emulator.pathways]] tables to the config")
    inputs = tuple(settings.inputs)
    physics = load_physics_set(extract_dir, inputs)
    say(f"two-layer calibration of {physics.n_runs} runs of {len(set(physics.models))} models")
    files, pathways, crossings, by_ecs, validation, rows, datasets = [], [], [], [], [], [], {}
    rng = np.random.default_rng(prediction.random_state)
    calibration = calibrate_runs(physics, efficacy=settings.efficacy)  # every run's, whatever its scenarios
    for spec in specs:
        say(f"scenario {spec.name} ({spec.kind}, route {spec.route})")
        scores, reason, held_out_scenario = {}, "", None
        if spec.kind == "archive":
            ts = load_training_set(extract_dir, spec.experiment, inputs)
            candidates = {"gp": EnsembleEmulator.from_settings(replace(settings, forcing_source="diagnosed")),
                          "parameters": _parameter_route(settings, forcing_source="diagnosed")}
            n_models = len(set(ts.models))
            if settings.validate and n_models >= 4:
                for route, estimator in candidates.items():
                    if spec.route not in ("auto", route):
                        continue
                    per_run, summary = leave_one_model_out(ts, estimator, n_samples=settings.validation_samples,
                                                           random_state=settings.random_state,
                                                           progress=lambda m, r=route: say(f"  {r}: {m}"))
                    validation.append(_keyed(validation_table(per_run, summary), spec.name, route)
                                      .assign(holdout="model"))
                    scores[route] = summary
                if spec.forcing():
                    # the scenario's known forcing instead of its runs: no run of the scenario is used at all
                    per_run, summary = leave_one_model_out(
                        ts, _parameter_route(settings, match_runs=True, **spec.forcing()),
                        n_samples=settings.validation_samples, random_state=settings.random_state,
                        progress=lambda m: say(f"  parameters, known forcing: {m}"))
                    validation.append(_keyed(validation_table(per_run, summary), spec.name, "parameters")
                                      .assign(holdout="scenario"))
                    held_out_scenario = summary
            route = spec.route
            if route == "auto":
                if scores:
                    route = min(scores, key=lambda r: scores[r]["end_rmse"])
                    reason = "smaller leave-one-model-out RMSE of end-of-pathway warming " + ", ".join(
                        f"{r} {s['end_rmse']:.3f} K" for r, s in scores.items())
                else:
                    route, reason = "gp", "default (too few models to compare the routes)"
            else:
                reason = "chosen in the config"
            emulator = candidates[route].fit(ts)
            X, models, years, calendar = ts.X, ts.models, ts.years, ts.calendar_years
            forcing_source = (emulator.scenario_.source if route == "parameters" else emulator.forcing_source_)
        else:
            route, reason = "parameters", "the only route for a pathway no model ran"
            emulator = _parameter_route(settings, **spec.forcing()).fit(replace(physics, scenario=spec.name))
            X, models = physics.X, physics.models
            years = calendar = emulator.scenario_.years
            forcing_source = emulator.scenario_.source
        say(f"  predicting with the {route} route")
        result = predict_cases(emulator, prediction_cases(prediction, X, models, inputs, rng), training_X=X, years=years,
                               calendar_years=calendar, thresholds=prediction.thresholds,
                               quantiles=prediction.quantiles, n_samples=prediction.n_samples,
                               crossing_window=prediction.crossing_window, random_state=rng)
        pathways.append(_keyed(result.pathways_table(), spec.name, route))
        datasets[spec.name] = result.dataset.assign_attrs(route=route, forcing=forcing_source)
        crossings.append(_keyed(result.crossings, spec.name, route))
        if "ecs_eff" in inputs:
            along = predict_cases(emulator, _crossing_cases(X, inputs), training_X=X, years=years,
                                  calendar_years=calendar, thresholds=prediction.thresholds,
                                  quantiles=prediction.quantiles, n_samples=prediction.n_samples,
                                  crossing_window=prediction.crossing_window, random_state=rng)
            table = along.crossings.copy()
            table.insert(1, "ecs_eff", [float(c.split("=", 1)[1]) for c in table["case"]])
            by_ecs.append(_keyed(table.drop(columns="case"), spec.name, route))
        rows.append({"scenario": spec.name, "kind": spec.kind, "source": spec.experiment or spec.forcing_file
                     or spec.co2_file, "route": route, "route_reason": reason, "forcing": forcing_source,
                     "first_year": int(np.asarray(calendar if calendar is not None else years)[0]),
                     "last_year": int(np.asarray(calendar if calendar is not None else years)[-1]),
                     "n_years": int(len(years)), "n_models": int(len(set(models))),
                     "prediction_of": emulator.prediction_target_,
                     **{f"end_rmse_{r}": s["end_rmse"] for r, s in scores.items()},
                     **{f"end_coverage90_{r}": s["end_coverage90"] for r, s in scores.items()},
                     **({"end_rmse_scenario_held_out": held_out_scenario["end_rmse"],
                         "end_coverage90_scenario_held_out": held_out_scenario["end_coverage90"]}
                        if held_out_scenario else {})})
    tables = {"pathways.csv": pd.concat(pathways, ignore_index=True),
              "crossings.csv": pd.concat(crossings, ignore_index=True),
              "scenarios.csv": pd.DataFrame(rows)}
    if by_ecs:
        tables["crossing_ecs.csv"] = pd.concat(by_ecs, ignore_index=True)
    if validation:
        tables["validation.csv"] = pd.concat(validation, ignore_index=True)
    tables["calibration.csv"] = calibration
    for name, table in tables.items():
        files.append(write_csv(table, out_dir / name))
    for name, dataset in datasets.items():  # the CF form of each scenario's pathways
        files.append(write_pathways_netcdf(dataset, out_dir / f"pathways_{safe_name(name)}.nc", name))
    if prediction.figures:
        from .scenario_figures import crossing_ecs_figure, routes_figure, scenarios_figure

        say("drawing figures")
        files.append(scenarios_figure(tables["pathways.csv"], out_dir / "figures" / "scenarios.png",
                                      prediction.thresholds))
        if by_ecs:
            files.append(crossing_ecs_figure(tables["crossing_ecs.csv"], out_dir / "figures" / "crossing_ecs.png"))
        if validation:
            files.append(routes_figure(tables["validation.csv"], out_dir / "figures" / "validation_routes.png"))
    return {"scenarios": rows, "out_dir": str(out_dir), "files": [str(f) for f in files],
            "seconds": round(time.perf_counter() - started, 1), "inputs": list(inputs)}


def format_pathways_summary(summary: dict) -> str:
    """A few lines per scenario: what it is, the route and why, the validation scores of each route."""
    lines = []
    for row in summary["scenarios"]:
        lines.append(f"scenario {row['scenario']} ({row['kind']}: {row['source']}), years {row['first_year']}–"
                     f"{row['last_year']}: route {row['route']} — {row['route_reason']}")
        for route, what in (("gp", "gp route"), ("parameters", "parameters route"),
                            ("scenario_held_out", "parameters route with the known forcing, no scenario run used")):
            if f"end_rmse_{route}" in row and np.isfinite(row[f"end_rmse_{route}"]):
                lines.append(f"  leave-one-model-out, {what}: end-of-pathway RMSE {row[f'end_rmse_{route}']:.3f} K, "
                             f"90 % coverage {row[f'end_coverage90_{route}']:.2f}")
    lines.append(f"outputs in {summary['out_dir']} ({len(summary['files'])} files, {summary['seconds']} s)")
    return "\n".join(lines)

"""`generate`: write the whole demo archive, its truth table, forcing table and README."""
from __future__ import annotations

import shutil
import sys
import time
from pathlib import Path

from . import generations
from .calendar import date_number, month_bounds, month_starts
from .fields import make_grid, recipes
from .files import branch_attributes, write_areacella, write_run
import numpy as np

from .forcing import reference_chain, user_pathway
from .models import HISTORICAL, HISTORICAL_START_YEAR, SCENARIO, SCENARIOS, draw_models
from .series import VARIABLES, simulate
from .truth import FORCING_COLUMNS, TRUTH_COLUMNS, forcing_rows, truth_rows, write_csv

__all__ = ["generate", "DEFAULT_GRID"]

DEFAULT_GRID = (8, 16)  # ~90 MB and ~10 s for 8 models on 2 cores (measured); 12x24 would be ~200 MB
_MARKER = ".demo_ensemble"

_README = """\
INVENTED DATA — sensemble demo ensemble
=======================================

Everything under archive/ was produced by sensemble's demo_ensemble generator (seed {seed}, {n} models,
grid {nlat} x {nlon}). The models ({names}), their institutions, the historical-type experiment
`hist-demo`, the scenarios `demo-rise` and `demo-steady` (lower, levelling off) are invented. No file here is output of any real climate model;
do not use these numbers for anything but testing and learning the tool.

Global means follow a two-layer energy-balance model with deep-ocean heat-uptake efficacy
(Held et al. 2010; Geoffroy et al. 2013a,b) plus AR(1) internal variability, a drifting control with an
energy leak, and latitude/season patterns so that area and calendar weighting matter.

truth.csv            true parameters per model and member, and what a noise-free extraction returns
                     (Gregory fit over years 1-150 of abrupt-4xCO2, early/late slopes, components, TCR).
                     F4x = 2 x F2x exactly (column forcing_ratio_4x). Drifts are per century.
                     Branch years count control years from 0 at the control's first January.
scenario_forcing.csv true effective radiative forcing (W m-2, annual means) of hist-demo, demo-rise and
                     demo-steady for each model (the reference curve scaled by F2x / 3.71).
forcing_<scenario>.csv  the true forcing of hist-demo followed by that scenario (W m-2 by calendar year, for
                     a model with F2x = 3.71; each model's is this times its F2x / 3.71).
user_forcing.csv     an invented user pathway no model ran (W m-2 by calendar year, for a model with
                     F2x = 3.71): hist-demo's forcing, then an overshoot; longer than any run.
"""


def _prepare(root: Path) -> Path:
    archive = root / "archive"
    if archive.exists() and any(archive.iterdir()):
        if not (archive / _MARKER).exists():
            raise FileExistsError(f"{archive}: exists, is not empty and was not written by demo_ensemble; "
                                  "choose another directory")
        shutil.rmtree(archive)  # an earlier demo archive: replace it whole, so no stale model remains
    archive.mkdir(parents=True, exist_ok=True)
    (archive / _MARKER).write_text("written by sensemble demo_ensemble; regenerating replaces this folder\n")
    return archive


def _parse_years(text: str) -> dict:
    """"control=60,abrupt=30" → {"control": 60, "abrupt": 30} (for the command line)."""
    years = {}
    for item in filter(None, (part.strip() for part in text.split(","))):
        role, sep, value = item.partition("=")
        if not sep or not value.strip().isdigit():
            raise ValueError(f"years must look like ROLE=N[,ROLE=N...] (e.g. control=60,abrupt=30), got {text!r}")
        years[role.strip()] = int(value)
    return years


def _parse_grid(grid) -> tuple[int, int]:
    if isinstance(grid, str):
        parts = grid.lower().split("x")
        if len(parts) != 2 or not all(p.strip().isdigit() for p in parts):
            raise ValueError(f"grid must look like NLATxNLON (e.g. 12x24), got {grid!r}")
        grid = tuple(int(p) for p in parts)
    nlat, nlon = (int(g) for g in grid)
    return nlat, nlon


def generate(root, *, n_models: int = 8, seed: int = 0, grid=DEFAULT_GRID, years: dict | None = None,
             progress: bool = False, internal_variability: bool = True, mixed: bool = False) -> Path:
    """Write a synthetic CMIP-style archive of invented models under `root`.

    Parameters
    ----------
    root : folder to write into; gets `archive/` (CMIP DRS folders), `truth.csv`,
        `scenario_forcing.csv`, `forcing_<scenario>.csv`, `user_forcing.csv` and `README.txt`
    n_models : number of invented models
    seed : the ensemble is a deterministic function of (seed, n_models, grid, years)
    grid : (nlat, nlon) of the regular latitude–longitude grid, or "NLATxNLON"
    years : run lengths in years by role, overriding the defaults
        {"control": 250, "abrupt": 150, "onepct": 150, "historical": 100, "scenario": 60}
    progress : print one line per model to stderr
    internal_variability : False writes noise-free runs (drift and forced response only), for tests
    mixed : write every second model (the 2nd, 4th, …) the CMIP5 way (`generations`: its directories, names
        without grid label, `abrupt4xCO2`, members r1i1p1, `branch_time`, netCDF-3 files), the others as CMIP6;
        their rows of truth.csv carry the CMIP5 member names

    Returns
    -------
    Path of `root`; the files are under `root / "archive"`, the truth in `root / "truth.csv"`.

    Example
    -------
    >>> import tempfile
    >>> from sensemble import demo as demo_ensemble
    >>> root = demo_ensemble.generate(tempfile.mkdtemp(), n_models=1, grid=(6, 12),
    ...     years={"control": 30, "abrupt": 20, "onepct": 20, "historical": 10, "scenario": 5})
    >>> sorted(p.name for p in (root / "archive").iterdir() if not p.name.startswith("."))
    ['Alder-2']
    """
    root = Path(root)
    nlat, nlon = _parse_grid(grid)
    grd = make_grid(nlat, nlon)
    models = draw_models(n_models, seed, years)
    root.mkdir(parents=True, exist_ok=True)
    archive = _prepare(root)
    truth, forcing = [], []
    started = time.perf_counter()
    for model in models:
        t0 = time.perf_counter()
        series = simulate(model, noise=internal_variability)
        noise_free = series if not internal_variability else simulate(model, noise=False)
        era = generations.CMIP5 if mixed and model.index % 2 == 1 else generations.CMIP6
        rows = truth_rows(model, noise_free)
        if era == generations.CMIP5:
            rows = [dict(row, member=generations.member(row["member"])) for row in rows]
        truth.extend(rows)
        forcing.extend(forcing_rows(model, noise_free))
        field_recipes = recipes(grd, model.control_means, model.polar_amplification)
        write_areacella(archive, model, grd, era)
        runs = {(r.experiment_id, r.member): r for r in model.runs}
        for run in model.runs:
            bounds = month_bounds(run.start_year, 12 * run.n_years, model.time_units, model.calendar)
            branch = None
            if run.parent_experiment_id is not None:
                parent = runs[(run.parent_experiment_id, run.parent_member)]
                at_parent = month_starts(parent.start_year + run.branch_year, 0, model.calendar)[0]
                branch = branch_attributes(model, run, date_number(at_parent, model.time_units, model.calendar),
                                           bounds[0, 0])
            values = series[(run.experiment_id, run.member)].values
            for var in VARIABLES:
                write_run(archive, model, run, branch, var, field_recipes[var], values[var], grd, bounds, era)
        if progress:
            print(f"demo_ensemble: {model.index + 1}/{len(models)} {model.source_id} "
                  f"({len(model.runs)} runs) in {time.perf_counter() - t0:.1f} s", file=sys.stderr, flush=True)
    write_csv(root / "truth.csv", truth, TRUTH_COLUMNS)
    write_csv(root / "scenario_forcing.csv", forcing, FORCING_COLUMNS)
    n_hist = models[0].run(HISTORICAL).n_years
    pathway = user_pathway(n_hist)
    write_csv(root / "user_forcing.csv", [{"year": HISTORICAL_START_YEAR + k, "erf": float(v)}
                                          for k, v in enumerate(pathway)], ["year", "erf"])
    n_scen = models[0].run(SCENARIO).n_years
    for scenario in SCENARIOS:  # each scenario's reference forcing from the historical-type run's start
        values = reference_chain(np.arange(n_hist + n_scen) + 0.5, n_hist, scenario)
        write_csv(root / f"forcing_{scenario}.csv", [{"year": HISTORICAL_START_YEAR + k, "erf": float(v)}
                                                     for k, v in enumerate(values)], ["year", "erf"])
    readme = _README.format(seed=seed, n=n_models, nlat=nlat, nlon=nlon,
                            names=", ".join(m.source_id for m in models))
    if mixed:
        cmip5 = [m.source_id for m in models if m.index % 2 == 1]
        readme += (f"\nFiled the CMIP5 way (under archive/output1/, abrupt4xCO2, members r1i1p1, netCDF-3): "
                   f"{', '.join(cmip5) or 'none'}; the others the CMIP6 way.\n")
    (root / "README.txt").write_text(readme)
    if progress:
        print(f"demo_ensemble: archive at {archive} in {time.perf_counter() - started:.1f} s",
              file=sys.stderr, flush=True)
    return root


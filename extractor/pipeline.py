"""A whole extraction: archive → one lazy graph → per-model fits → table, series, report, figures.

One `dask.compute` reads every needed file once for the whole batch; everything after it works on
small annual series. A model whose files are bad is recorded as failed and the batch goes on.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import dask
import numpy as np
import xarray as xr

from sensemble import __version__
from .annual import annual_means
from .atomic import atomic_path
from .budget import toa_budget
from .catalog import Catalog, RunFiles, parse_file_name, scan
from .control import ControlError, branch_year, control_residuals, drift_corrected, join_chain
from .errors import ArchiveError
from .figures import ensemble_summary, gregory_plot
from .flags import join_flags, quality_flags
from .gregory import (FitWindowError, bootstrap_ecs, component_feedbacks, gregory_fit, odr_fit, quadratic_fit,
                      segment_fits)
from .lock import output_lock
from .report import write_report
from .runs import global_mean_series
from .settings import ExtractionSettings
from .table import ALL_COLUMNS, write_table
from .transient import tcr as transient_response

SERIES_VARIABLES = ("tas", "rtnt", "rtnt_cs", "lw_cs", "sw_cs", "cre")


@dataclass
class Unit:
    """One (model, member): the runs that make one row of the table and one series file."""

    model: str
    member: str
    control: RunFiles | None
    abrupt: RunFiles | None
    onepct: RunFiles | None
    others: list[RunFiles] = field(default_factory=list)
    flags: list[str] = field(default_factory=list)

    @property
    def key(self) -> str:
        return f"{self.model}_{self.member}"

    def runs(self) -> list[RunFiles]:
        return [r for r in (self.control, self.abrupt, self.onepct, *self.others) if r is not None]


@dataclass
class Failure:
    model: str
    member: str
    what: str  # experiment id or "model"
    message: str
    files: list[str] = field(default_factory=list)


@dataclass
class ExtractionResult:
    out_dir: Path
    rows: list[dict]
    failures: list[Failure]
    problems: list[str]
    cached: list[str]
    computed: list[str]
    seconds: float
    files_read: int = 0
    bytes_read: int = 0
    notes: list[str] = field(default_factory=list)  # e.g. a stale lock taken over

    @property
    def ok(self) -> bool:
        return not self.failures


def safe_name(text: str) -> str:
    """A file-name-safe version of a facet: nothing a path could climb out with."""
    cleaned = "".join(c if (c.isalnum() or c in "-.+") else "_" for c in str(text))
    cleaned = cleaned.lstrip(".") or "_"
    return cleaned[:120]


def plan_units(catalog: Catalog, settings: ExtractionSettings) -> tuple[list[Unit], list[Failure]]:
    """Group the catalogue into (model, member) units, each with its control."""
    units, failures = [], []
    for model in catalog.models():
        controls = [r for r in catalog.runs_of(model) if r.experiment_id == settings.control]
        for member in catalog.members(model):
            runs = catalog.runs_of(model, member)
            non_control = [r for r in runs if r.experiment_id != settings.control]
            if not non_control:
                continue
            flags = []
            control = next((r for r in controls if r.member == member), None)
            if control is None and len(controls) == 1:
                control = controls[0]
                flags.append("control_other_member")
            if control is None:
                why = (f"no {settings.control} run" if not controls else
                       f"{settings.control} has several members ({', '.join(r.member for r in controls)}) and none is {member}")
                failures.append(Failure(model, member, "model", f"model {model} member {member}: {why} — "
                                        "add the control run or map the control role in the config"))
                continue
            abrupt = next((r for r in non_control if r.experiment_id == settings.abrupt), None)
            onepct = next((r for r in non_control if r.experiment_id == settings.onepct), None)
            others = [r for r in non_control if r.experiment_id not in (settings.abrupt, settings.onepct)]
            units.append(Unit(model, member, control, abrupt, onepct, others, flags))
    return units, failures


def _settings_record(settings: ExtractionSettings) -> dict:
    """The settings as plain data, for the cache fingerprint and the provenance of the outputs."""
    return {k: v for k, v in dataclasses.asdict(settings).items() if k != "extra"}


def _file_stats(units: list[Unit]) -> dict[Path, os.stat_result]:
    """Size and modification time of every input file, read once per batch (a control serves several members)."""
    return {path: os.stat(path) for unit in units for run in unit.runs() for path in run.all_files()}


def fingerprint(unit: Unit, settings: ExtractionSettings, stats: dict[Path, os.stat_result]) -> str:
    """Hash of everything a unit's results depend on: settings, software version, input files (size, mtime)."""
    h = hashlib.sha256()
    h.update(json.dumps(_settings_record(settings), sort_keys=True, default=str).encode())
    h.update(__version__.encode())
    h.update(",".join(ALL_COLUMNS).encode())  # a cached row must have today's columns
    for run in unit.runs():
        for path in sorted(run.all_files()):
            st = stats[path]
            h.update(f"{run.experiment_id}|{path}|{st.st_size}|{st.st_mtime_ns}\n".encode())
    return h.hexdigest()


def _cached_row(path: Path, fp: str) -> dict | None:
    if not path.exists():
        return None
    try:
        with xr.open_dataset(path, engine="netcdf4") as ds:
            if ds.attrs.get("fingerprint") != fp:
                return None
            row = json.loads(ds.attrs["sensitivity_row"])
    except (OSError, KeyError, ValueError):
        return None
    if not isinstance(row, dict) or set(row) - set(ALL_COLUMNS):
        return None
    return row


def _distributed_client():
    """The distributed client dask would compute on now, or None for a local scheduler."""
    try:
        from distributed import default_client
    except ImportError:  # pragma: no cover — distributed is a dependency
        return None
    try:
        return default_client()
    except ValueError:
        return None


def _compute_all(collections: list, progress: bool) -> list:
    """One `dask.compute` for the whole batch, with the progress bar that suits the scheduler."""
    client = _distributed_client()
    if client is None:
        if not progress:
            return list(dask.compute(*collections))
        from dask.diagnostics import ProgressBar

        with ProgressBar(minimum=1.0):
            return list(dask.compute(*collections))
    # dask's local ProgressBar sees nothing of a cluster: follow the futures instead
    futures = client.compute(collections)
    if progress:
        from distributed import progress as follow

        follow(futures)
    return client.gather(futures)


def _compute(lazy: dict, progress: bool) -> tuple[dict, dict]:
    """Compute all lazy series in one graph; on failure, isolate the failing runs one by one."""
    keys = list(lazy)
    try:
        values = _compute_all([lazy[k] for k in keys], progress)
        return dict(zip(keys, values)), {}
    except Exception:  # noqa: BLE001 — isolate below, each failure becomes a recorded message
        results, errors = {}, {}
        for k in keys:
            try:
                results[k] = _compute_all([lazy[k]], False)[0]
            except Exception as err:  # noqa: BLE001
                errors[k] = err
        return results, errors


def _anomalies(run_annual: xr.Dataset, control_annual: xr.Dataset, settings, run: RunFiles | None = None,
               control_run: RunFiles | None = None) -> tuple[xr.Dataset, list[str]]:
    try:
        year0, flags = branch_year(run_annual.attrs, control_annual)
    except ControlError as err:
        raise _run_error(err, run, run_annual, "fix branch_time_in_parent and parent_time_units in the global "
                         f"attributes of the {run_annual.attrs.get('experiment_id', 'run')} files so that they give "
                         "the branch as a time of the control, or delete both to start at the control's first year "
                         "(flagged branch_assumed)") from None
    try:
        anomalies, more = drift_corrected(run_annual, control_annual, year0, order=settings.drift_order,
                                          min_years=settings.min_control_years)
    except ControlError as err:
        raise _run_error(err, control_run, run_annual, "supply a longer control run, or lower [extraction] "
                         f"min_control_years (now {settings.min_control_years}) in the config") from None
    anomalies.attrs["branch_year"] = int(year0)
    return anomalies, list(flags) + list(more)


def _scenario_chains(annual: dict[str, xr.Dataset], unit: Unit, settings) -> tuple[dict[str, xr.Dataset], list[str]]:
    """Runs other than the control, abrupt and 1 % roles, joined to their parents up to the control."""
    flags = []
    by_id = {ds.attrs.get("experiment_id", k): ds for k, ds in annual.items()}
    children = {}
    for exp_id, ds in by_id.items():
        parent = ds.attrs.get("parent_experiment_id", "")
        if parent and parent != settings.control and parent in by_id:
            children.setdefault(parent, []).append(exp_id)
    chains = {}
    for exp_id, ds in by_id.items():
        parent = ds.attrs.get("parent_experiment_id", "")
        if parent == settings.control:
            if exp_id in children:
                continue  # extracted joined to its continuations
            chains[exp_id] = ds
        elif parent in by_id and by_id[parent].attrs.get("parent_experiment_id") == settings.control:
            chains[exp_id] = join_chain(by_id[parent], ds)
        else:
            flags.append(f"unlinked_{safe_name(exp_id)}")
    if settings.scenarios is not None:
        chains = {k: v for k, v in chains.items() if k in settings.scenarios}
    return chains, flags


def _group(ds: xr.Dataset, role: str) -> xr.Dataset:
    keep = [v for v in SERIES_VARIABLES if v in ds]
    out = ds[keep].astype("float64")
    for v in keep:
        out[v].attrs = dict(ds[v].attrs)
    out.attrs = {"role": role, "experiment_id": str(ds.attrs.get("experiment_id", "")),
                 "branch_year_in_control": int(ds.attrs.get("branch_year", -1))}
    if "chain" in ds.attrs:
        out.attrs["chain"] = ds.attrs["chain"]
    if "calendar_year" in ds.coords:
        out = out.assign_coords(calendar_year=ds["calendar_year"].astype("int64"))
    out["year"] = out["year"].astype("int64")
    out["year"].attrs = {"long_name": "year counted from 1 at the branch from the control", "units": "1"}
    return out


def write_series(path: Path, groups: dict[str, xr.Dataset], attrs: dict) -> Path:
    """One NetCDF file, one group per experiment, written atomically."""
    with atomic_path(path) as tmp:
        root = xr.Dataset(attrs=attrs)
        root.to_netcdf(tmp, mode="w", engine="netcdf4")
        for name, ds in groups.items():
            ds.to_netcdf(tmp, mode="a", group=name, engine="netcdf4")
    return path


def _noise(residuals: xr.Dataset, name: str) -> float | None:
    """Standard deviation of the control's drift-removed annual means: the internal variability of `name`."""
    if name not in residuals:
        return None
    # the drift fit used up drift_order + 1 degrees of freedom
    sd = float(np.std(residuals[name].values, ddof=int(residuals.attrs["drift_order"]) + 1))
    return sd if sd > 0 else None


def _fit_row(unit: Unit, anomalies: xr.Dataset | None, tcr_value, control_annual, residuals, settings,
             flags) -> dict:
    row = {c: None for c in ALL_COLUMNS}
    row.update(model=unit.model, member=unit.member)
    fit = None
    if anomalies is not None:
        dT, dN = anomalies["tas"], anomalies["rtnt"]
        keys = ("fit_years",)
        try:
            fit = gregory_fit(dT, dN, years=settings.fit_years, forcing_ratio=settings.forcing_ratio)
            keys = ("bootstrap_block",)
            q05, q95 = bootstrap_ecs(dT, dN, years=settings.fit_years, block=settings.bootstrap_block,
                                     n_samples=settings.bootstrap_samples, seed=settings.seed,
                                     forcing_ratio=settings.forcing_ratio)
            keys = ("early_years", "late_years")
            seg = segment_fits(dT, dN, early=settings.early_years, late=settings.late_years,
                               forcing_ratio=settings.forcing_ratio)
            keys = ("fit_years",)
            quad = quadratic_fit(dT, dN, years=settings.fit_years)
        except FitWindowError as err:
            raise _run_error(err, unit.abrupt, anomalies, _window_hint(settings, keys)) from None
        row.update(erf_4x=fit.erf, erf_4x_se=fit.erf_se, feedback=fit.feedback, feedback_se=fit.feedback_se,
                   ecs_eff=fit.ecs_eff, ecs_eff_q05=q05, ecs_eff_q95=q95, feedback_early=seg.feedback_early,
                   feedback_late=seg.feedback_late, feedback_change=seg.feedback_change, ecs_late=seg.ecs_late,
                   curvature=quad.curvature, n_years=fit.n_years)
        if settings.orthogonal_fit:
            # errors in both variables (scipy.odr), noise scales from the control's internal variability
            odr = odr_fit(dT, dN, years=settings.fit_years, forcing_ratio=settings.forcing_ratio,
                          tas_noise=_noise(residuals, "tas"), rtnt_noise=_noise(residuals, "rtnt"))
            row.update(erf_4x_odr=odr.erf, feedback_odr=odr.feedback, ecs_eff_odr=odr.ecs_eff)
        comps = component_feedbacks(anomalies, years=settings.fit_years)
        if comps is not None:
            row.update(feedback_lw_cs=comps.feedback_lw_cs, feedback_sw_cs=comps.feedback_sw_cs,
                       feedback_cre=comps.feedback_cre)
    else:
        flags.append("no_abrupt")
    row["tcr"] = tcr_value
    if unit.onepct is None:
        flags.append("no_onepct")
    control_n = float(control_annual["rtnt"].mean()) if "rtnt" in control_annual else float("nan")
    flags.extend(quality_flags(fit, control_n, settings))
    row["flags"] = join_flags(flags)
    for k, v in row.items():
        if isinstance(v, (np.floating, np.integer)):
            row[k] = v.item()
    if row["n_years"] is not None:
        row["n_years"] = int(row["n_years"])
    return row


def _process_unit(unit: Unit, series: dict[str, xr.Dataset], settings, out_dir: Path, fp: str,
                  figures: bool) -> dict:
    """Everything after the compute for one (model, member): anomalies, fits, series file, figure."""
    flags = list(unit.flags)
    annual = {}
    for run in unit.runs():
        try:
            ds = annual_means(series[run.label])
        except ArchiveError as err:
            raise _run_error(err.message, run, None, err.hint or "check the time axis of the run's files") from None
        ds = toa_budget(ds)
        flags.extend(f for f in str(ds.attrs.get("flags", "")).split(";") if f)
        annual[run.experiment_id] = ds
    control = annual[unit.control.experiment_id]
    try:
        residuals = control_residuals(control, order=settings.drift_order)
    except ControlError as err:
        raise _run_error(err, unit.control, control, "supply a longer control run") from None
    groups = {settings.control: _group(residuals, "control")}

    abrupt_anom = tcr_value = None
    if unit.abrupt is not None:
        abrupt_anom, more = _anomalies(annual[unit.abrupt.experiment_id], control, settings, unit.abrupt,
                                       unit.control)
        flags.extend(more)
        groups[unit.abrupt.experiment_id] = _group(abrupt_anom, "abrupt")
    if unit.onepct is not None:
        onepct_anom, more = _anomalies(annual[unit.onepct.experiment_id], control, settings, unit.onepct,
                                       unit.control)
        flags.extend(more)
        groups[unit.onepct.experiment_id] = _group(onepct_anom, "onepct")
        try:
            tcr_value = float(transient_response(onepct_anom["tas"], years=settings.tcr_years))
        except FitWindowError:
            # the Gregory results stand on their own: keep them, leave tcr empty and say why
            flags.append("onepct_short")

    others = {r.experiment_id: annual[r.experiment_id] for r in unit.others}
    try:
        chains, more = _scenario_chains(others, unit, settings)
    except ControlError as err:
        raise ArchiveError(_message(err), model=unit.model, member=unit.member,
                           hint="check parent_experiment_id and the years of the scenario runs, or leave them out "
                           "with [archive] scenarios in the config") from None
    flags.extend(more)
    for exp_id, ds in chains.items():
        anom, more = _anomalies(ds, control, settings, next((r for r in unit.others if r.experiment_id == exp_id),
                                                            None), unit.control)
        flags.extend(more)
        groups[exp_id] = _group(anom, "scenario")

    row = _fit_row(unit, abrupt_anom, tcr_value, control, residuals, settings, flags)
    attrs = {
        "Conventions": "CF-1.10",
        "title": f"Annual global-mean anomalies of {unit.model} {unit.member}, drift-corrected against the control",
        "source": f"sensemble {__version__}",
        "model": unit.model,
        "member": unit.member,
        "role_control": settings.control,
        "role_abrupt": settings.abrupt,
        "role_onepct": settings.onepct,
        "scenarios": ";".join(sorted(chains)),
        "fingerprint": fp,
        "sensitivity_row": json.dumps(row, sort_keys=True),
        "input_files": "\n".join(str(p) for r in unit.runs() for p in r.all_files()),
    }
    write_series(out_dir / "series" / f"{safe_name(unit.key)}.nc", groups, attrs)
    if figures and abrupt_anom is not None:
        gregory_plot(abrupt_anom["tas"].values, abrupt_anom["rtnt"].values, row, settings,
                     out_dir / "figures" / f"gregory_{safe_name(unit.key)}.png")
    return row


def extract(
    archive: str | Path,
    out_dir: str | Path,
    settings: ExtractionSettings | None = None,
    *,
    force: bool = False,
    progress: bool = True,
    figures: bool = True,
    log: Callable[[str], None] | None = None,
) -> ExtractionResult:
    """Run the extraction of a whole archive.

    Parameters
    ----------
    archive : folder of the archive (DRS tree or flat)
    out_dir : output folder; `sensitivity.csv`, `sensitivity.nc`, `series/`, `report.md`, `figures/`
    settings : ExtractionSettings (defaults per ../shared/DESIGN.md)
    force : recompute runs whose cached series are up to date
    progress : show dask's progress bar while reducing
    figures : write the Gregory plots and the ensemble summary
    log : where one-line progress messages go (default: nowhere)

    Returns
    -------
    ExtractionResult

    Raises
    ------
    OutputInUseError
        Another running extraction holds ``out_dir`` (its lock file ``.sensemble.lock``).
    """
    log = log or (lambda message: None)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    notes: list[str] = []
    with output_lock(out_dir, notes):
        for note in notes:
            log(note)
        return _extract_locked(archive, out_dir, settings or ExtractionSettings(), force=force, progress=progress,
                               figures=figures, log=log, notes=notes)


def _extract_locked(archive, out_dir: Path, settings: ExtractionSettings, *, force, progress, figures, log,
                    notes: list[str]) -> ExtractionResult:
    start = time.perf_counter()
    catalog = scan(archive, settings)
    units, failures = plan_units(catalog, settings)
    log(f"catalogue: {len(catalog.runs)} runs of {len(catalog.models())} models in {archive}")
    if not units and not failures:
        failures.append(_nothing_to_extract(archive, catalog, settings))

    rows, cached, todo = [], [], []
    fps = {}
    stats = _file_stats(units)
    for unit in units:
        fps[unit.key] = fingerprint(unit, settings, stats)
        row = None if force else _cached_row(out_dir / "series" / f"{safe_name(unit.key)}.nc", fps[unit.key])
        if row is not None:
            rows.append(row)
            cached.append(unit.key)
        else:
            todo.append(unit)
    if cached:
        log(f"reusing {len(cached)} finished runs from {out_dir / 'series'} (use --force to recompute)")

    lazy, broken, runs_by_label = {}, {}, {}
    for unit in todo:
        for run in unit.runs():
            if run.label in lazy or run.label in broken:
                continue
            runs_by_label[run.label] = run
            try:
                lazy[run.label] = global_mean_series(run, required=settings.required_variables)
            except ArchiveError as err:
                broken[run.label] = err
            except Exception as err:  # noqa: BLE001 — recorded, never hidden
                broken[run.label] = ArchiveError(f"could not be read ({type(err).__name__}: {err})",
                                                 path=";".join(map(str, run.all_files()[:1])), model=run.model)
    files = {p for unit in todo for r in unit.runs() for p in r.all_files()}
    log(f"reducing {len(lazy)} runs ({len(files)} files) in one pass")
    series, errors = _compute(lazy, progress)
    for label, err in errors.items():
        broken[label] = err if isinstance(err, ArchiveError) else _read_failure(runs_by_label[label], err)
    for label, ds in series.items():
        empty = _empty_steps(ds, runs_by_label[label])
        if empty is not None:
            broken[label] = empty

    computed = []
    for position, unit in enumerate(todo, start=1):
        log(f"{position}/{len(todo)} {unit.model} {unit.member}: fitting")
        bad = [r for r in unit.runs() if r.label in broken]
        essential = [r for r in bad if r is unit.control or r is unit.abrupt]
        for run in bad:
            failures.append(Failure(unit.model, unit.member, run.experiment_id, _one_line(broken[run.label], run),
                                    [str(p) for p in run.all_files()]))
        if essential:
            continue
        if bad:
            unit = dataclasses.replace(unit, onepct=None if unit.onepct in bad else unit.onepct,
                                       others=[r for r in unit.others if r not in bad],
                                       flags=unit.flags + ["run_failed"])
        try:
            rows.append(_process_unit(unit, series, settings, out_dir, fps[unit.key], figures))
            computed.append(unit.key)
        except ArchiveError as err:
            failures.append(Failure(unit.model, unit.member, err.experiment_id or "model", str(err),
                                    [err.path] if err.path else []))
        except Exception as err:  # noqa: BLE001 — one model's failure must not stop the batch
            failures.append(Failure(unit.model, unit.member, "model",
                                    f"model {unit.model} member {unit.member}: {_message(err)} — unexpected "
                                    "error: report it with this report.md; the other models are unaffected"))

    provenance = {
        "software_version": __version__,
        "history": f"{time.strftime('%Y-%m-%dT%H:%M:%SZ', time.gmtime())} sensemble extract {archive}",
        "config": _settings_record(settings),
        "input_files": sorted(f"{path} size={st.st_size} mtime={int(st.st_mtime)}" for path, st in stats.items()),
    }
    write_table(rows, out_dir, provenance)
    if figures and rows:
        ensemble_summary(rows, out_dir / "figures" / "ensemble_summary.png")
    result = ExtractionResult(out_dir, sorted(rows, key=lambda r: (r["model"], r["member"])), failures,
                              list(catalog.problems), cached, computed, time.perf_counter() - start,
                              files_read=len(files), bytes_read=sum(stats[p].st_size for p in files), notes=notes)
    write_report(result, settings, archive)
    return result


def _message(err: BaseException) -> str:
    text = str(err) or type(err).__name__
    return " ".join(text.split())


def _one_line(err: BaseException, run: RunFiles) -> str:
    text = _message(err)
    if isinstance(err, ArchiveError) or text.startswith("model "):
        return text
    return f"{run.label}: {text}"


def _who(attrs) -> str:
    return " ".join(str(attrs[k]) for k in ("model", "member", "experiment_id") if attrs.get(k))


def _run_error(err: BaseException | str, run: RunFiles | None, annual: xr.Dataset | None,
               hint: str) -> ArchiveError:
    """A control or fit-window problem as a one-line error naming the run's first file and what to do."""
    attrs = dict(annual.attrs) if annual is not None else {}
    text = _message(err) if isinstance(err, BaseException) else " ".join(err.split())
    who = _who(attrs)
    if who:
        text = text.removeprefix(f"{who}: ").removeprefix(f"{who} ")
    if run is not None and run.experiment_id != attrs.get("experiment_id", run.experiment_id):
        text = f"for {attrs['experiment_id']}: {text}"
    files = run.all_files() if run is not None else []
    return ArchiveError(text, path=files[0] if files else None,
                        model=run.model if run else attrs.get("model"),
                        member=run.member if run else attrs.get("member"),
                        experiment_id=run.experiment_id if run else attrs.get("experiment_id"), hint=hint)


def _window_hint(settings: ExtractionSettings, keys: tuple[str, ...]) -> str:
    def now(value):
        return "-".join(map(str, value)) if isinstance(value, tuple) else str(value)

    which = " and ".join(f"[extraction] {key} (now {now(getattr(settings, key))})" for key in keys)
    return f"set {which} in the config to what the run has, or supply a longer run"


def _read_failure(run: RunFiles, err: BaseException) -> ArchiveError:
    """A run whose values could not be read at compute time: find the damaged file by reading each one."""
    for variable, paths in run.files.items():
        for path in paths:
            try:
                with xr.open_dataset(path, engine="netcdf4", decode_times=False) as ds:
                    ds[variable].load()
            except Exception as file_err:  # noqa: BLE001 — this is the file to name
                return ArchiveError(f"values of {variable} cannot be read ({type(file_err).__name__}: "
                                    f"{_message(file_err)})", path=path, model=run.model, member=run.member,
                                    experiment_id=run.experiment_id,
                                    hint="the file is damaged: replace it with a good copy")
    return ArchiveError(f"could not be reduced ({type(err).__name__}: {_message(err)})",
                        path=";".join(map(str, run.all_files()[:1])), model=run.model, member=run.member,
                        experiment_id=run.experiment_id, hint="check the run's files (e.g. with ncdump) and replace "
                        "the damaged one")


def _file_holding(paths: list[Path], when) -> str:
    """The file whose name's time range holds the month of ``when`` (all of them when names do not say)."""
    month = f"{when.year:04d}{when.month:02d}"
    for path in paths:
        facets = parse_file_name(path)
        if facets is not None and facets.time_range:
            start, _, end = facets.time_range.partition("-")
            if start[:6].ljust(6, "0") <= month <= (end or start)[:6].ljust(6, "9"):
                return str(path)
    return ";".join(map(str, paths))


def _empty_steps(ds: xr.Dataset, run: RunFiles) -> ArchiveError | None:
    """A month whose global mean is missing (no valid cell at all) cannot be averaged into its year: an error."""
    for variable, paths in run.files.items():
        if variable not in ds.data_vars:
            continue
        missing = ~np.isfinite(np.asarray(ds[variable].values, dtype=np.float64))
        if missing.any():
            first = ds["time"].values[int(np.flatnonzero(missing)[0])]
            return ArchiveError(
                f"{variable} has no valid value in any grid cell in {int(missing.sum())} month(s), the first "
                f"{first.year:04d}-{first.month:02d}", path=_file_holding(paths, first), model=run.model,
                member=run.member, experiment_id=run.experiment_id,
                hint="replace the file with a complete one, or leave this run out")
    return None


def _nothing_to_extract(archive, catalog: Catalog, settings: ExtractionSettings) -> Failure:
    """The one failure of a batch that found no run to extract, saying where to look."""
    if not Path(archive).is_dir():
        why, hint = "is not a folder", "give the folder that holds the archive"
    elif not catalog.runs:
        skipped = f" ({len(catalog.problems)} file(s) skipped, see the archive problems)" if catalog.problems else ""
        models = f" of the models {', '.join(settings.include_models)}" if settings.include_models else ""
        why = f"holds no monthly files of {', '.join(settings.variables)}{models}{skipped}"
        hint = ("check the path, the file names (<variable>_<table>_<source>_<experiment>_<member>_<grid>"
                "[_<start>-<end>].nc) and include_models / exclude_models in the config")
    else:
        found = sorted({r.experiment_id for r in catalog.runs})
        why = f"has runs of {', '.join(found)} but none besides a control run of {settings.control!r}"
        hint = "map the experiment roles (control, abrupt, onepct, scenarios) to the archive's ids in the config"
    return Failure("", "", "archive", f"archive {archive}: {why}: nothing to extract — {hint}")

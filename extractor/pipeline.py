"""A whole extraction: archive → one lazy graph → per-model fits → table, series, report, figures.

The batch's stages each live in their own module: planning (`units`), the per-run cache (`cache`), the one
dask compute (`schedule`), per-model science (`science`), series files (`series`), failure messages
(`diagnose`). One `dask.compute` reads every needed file once for the whole batch and fits, on the workers, every
model and member whose runs all took the fast path; the main process fits the rest on small annual series, and
writes. A model whose files are bad is recorded as failed and the batch goes on.
"""
from __future__ import annotations

import dataclasses
import functools
import json
import time
from pathlib import Path
from typing import Callable

from sensemble import __version__
from sensemble.contract.cf import CONVENTIONS, history_line
from sensemble.contract.flags import RUN_FAILED
from sensemble.contract import series as schema
from sensemble.contract.names import safe_name, series_file_name

from .cache import cached_row, file_stats, fingerprint, settings_record
from .catalog import scan
from .diagnose import message, nothing_to_extract, one_line
from .errors import ArchiveError
from .figures import ensemble_summary, gregory_png, write_png
from .lock import output_lock
from .outcome import ExtractionResult, Failure
from .report import write_report
from .schedule import FitFailed, reduce_and_fit
from .science import UnitScience, unit_science
from .series import write_series
from .settings import ExtractionSettings
from .table import write_table
from .units import Unit, plan_units

__all__ = ["extract", "ExtractionResult", "Failure"]


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
        failures.append(nothing_to_extract(archive, catalog, settings))

    rows, cached, todo = [], [], []
    fps = {}
    stats = file_stats(units)
    for unit in units:
        fps[unit.key] = fingerprint(unit, settings, stats)
        row = None if force else cached_row(out_dir / schema.SERIES_FOLDER / series_file_name(unit.model, unit.member),
                                            fps[unit.key])
        if row is not None:
            rows.append(row)
            cached.append(unit.key)
        else:
            todo.append(unit)
    if cached:
        log(f"reusing {len(cached)} finished runs from {out_dir / schema.SERIES_FOLDER} (use --force to recompute)")

    runs = list({run.label: run for unit in todo for run in unit.runs()}.values())
    files = {p for unit in todo for r in unit.runs() for p in r.all_files()}
    log(f"reducing {len(runs)} runs ({len(files)} files) in one pass")
    reduced = reduce_and_fit(runs, settings.required_variables, progress,
                             input_bytes=sum(stats[p].st_size for p in files), units=todo,
                             fit=functools.partial(fit_unit, settings=settings, figures=figures))
    series, broken = reduced.series, reduced.errors
    for label, attrs in reduced.attrs.items():
        if attrs.get("attribute_mismatch"):
            notes.append(f"{label}: file attributes disagree with the path, which names the run (flag "
                         f"attribute_mismatch): {attrs['attribute_mismatch']}")

    computed = []
    for position, unit in enumerate(todo, start=1):
        fitted = reduced.fitted.get(unit.key)
        log(f"{position}/{len(todo)} {unit.model} {unit.member}: " + ("fitting" if fitted is None else "fitted"))
        bad = [r for r in unit.runs() if r.label in broken]
        essential = [r for r in bad if r is unit.control or r is unit.abrupt]
        for run in bad:
            failures.append(Failure(unit.model, unit.member, run.experiment_id, one_line(broken[run.label], run),
                                    [str(p) for p in run.all_files()]))
        if essential:
            continue
        if bad:
            unit = dataclasses.replace(unit, onepct=None if unit.onepct in bad else unit.onepct,
                                       others=[r for r in unit.others if r not in bad],
                                       flags=unit.flags + [RUN_FAILED])
        try:
            rows.append(_finish_unit(unit, series, settings, out_dir, fps[unit.key], figures, fitted))
            computed.append(unit.key)
        except ArchiveError as err:
            failures.append(Failure(unit.model, unit.member, err.experiment_id or "model", str(err),
                                    [err.path] if err.path else []))
        except Exception as err:  # noqa: BLE001 — one model's failure must not stop the batch
            failures.append(Failure(unit.model, unit.member, "model",
                                    f"model {unit.model} member {unit.member}: {message(err)} — unexpected "
                                    "error: report it with this report.md; the other models are unaffected"))

    provenance = {
        "software_version": __version__,
        "history": history_line(f"sensemble extract {archive}"),
        "config": settings_record(settings),
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


@dataclasses.dataclass
class Fitted:
    """One unit fitted where its runs were joined (`schedule.reduce_and_fit`): its science and its Gregory plot."""

    science: UnitScience
    gregory_png: bytes | None


def fit_unit(unit: Unit, series: dict, settings: ExtractionSettings, figures: bool) -> Fitted:
    """A unit's science and, with `figures`, its Gregory plot drawn (matplotlib costs 0.25–0.35 s a plot: drawn on the
    worker, written by the main process)."""
    science = unit_science(unit, series, settings)
    png = None
    if figures and science.abrupt is not None:
        png = gregory_png(science.abrupt["tas"].values, science.abrupt["rtnt"].values, science.row.as_dict(),
                          settings)
    return Fitted(science, png)


def _finish_unit(unit: Unit, series: dict, settings: ExtractionSettings, out_dir: Path, fp: str,
                 figures: bool, fitted: Fitted | FitFailed | None = None) -> dict:
    """One unit's science (`fitted`: as the graph fitted it, if it did), then its series file (with the cache
    record) and its Gregory plot; returns its row."""
    if isinstance(fitted, FitFailed):
        raise fitted.error
    if fitted is None:
        fitted = fit_unit(unit, series, settings, figures)
    science = fitted.science
    row = science.row.as_dict()
    control_id, abrupt_id, onepct_id = settings.roles(unit.mip_era)
    attrs = {
        "Conventions": CONVENTIONS,
        "history": history_line(f"sensemble extract: series of {unit.model} {unit.member}"),
        "title": f"Annual global-mean anomalies of {unit.model} {unit.member}, drift-corrected against the control",
        "source": f"sensemble {__version__}",
        schema.MODEL: unit.model,
        schema.MEMBER: unit.member,
        schema.role_attribute(schema.CONTROL): control_id,
        schema.role_attribute(schema.ABRUPT): abrupt_id,
        schema.role_attribute(schema.ONEPCT): onepct_id,
        schema.MIP_ERA: unit.mip_era,
        schema.SCENARIOS: schema.SEPARATOR.join(science.scenarios),
        schema.FORCING_RATIO: float(settings.forcing_ratio),
        schema.FINGERPRINT: fp,
        schema.SENSITIVITY_ROW: json.dumps(row, sort_keys=True),
        schema.INPUT_FILES: "\n".join(str(p) for r in unit.runs() for p in r.all_files()),
    }
    write_series(out_dir / schema.SERIES_FOLDER / series_file_name(unit.model, unit.member), science.groups, attrs)
    if fitted.gregory_png is not None:
        write_png(fitted.gregory_png, out_dir / "figures" / f"gregory_{safe_name(unit.key)}.png")
    return row

"""Diagnosis: a failure turned into one line naming the model, the file, the problem and what to do.

Also the checks on computed series that only the values can reveal (a month with no valid cell) and the
search for the damaged file when a run's values could not be read.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from .catalog import Catalog, RunFiles, parse_file_name
from .errors import ArchiveError
from .outcome import Failure
from .settings import ExtractionSettings
from .stores import open_dataset


def message(err: BaseException) -> str:
    """The error's text on one line (its type's name when it has none)."""
    text = str(err) or type(err).__name__
    return " ".join(text.split())


def one_line(err: BaseException, run: RunFiles) -> str:
    text = message(err)
    if isinstance(err, ArchiveError) or text.startswith("model "):
        return text
    return f"{run.label}: {text}"


def _who(attrs) -> str:
    return " ".join(str(attrs[k]) for k in ("model", "member", "experiment_id") if attrs.get(k))


def run_error(err: BaseException | str, run: RunFiles | None, annual: xr.Dataset | None,
              hint: str) -> ArchiveError:
    """A control or fit-window problem as a one-line error naming the run's first file and what to do."""
    attrs = dict(annual.attrs) if annual is not None else {}
    text = message(err) if isinstance(err, BaseException) else " ".join(err.split())
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


def window_hint(settings: ExtractionSettings, keys: tuple[str, ...]) -> str:
    def now(value):
        return "-".join(map(str, value)) if isinstance(value, tuple) else str(value)

    which = " and ".join(f"[extraction] {key} (now {now(getattr(settings, key))})" for key in keys)
    return f"set {which} in the config to what the run has, or supply a longer run"


def read_failure(run: RunFiles, err: BaseException) -> ArchiveError:
    """A run whose values could not be read at compute time: find the damaged file by reading each one."""
    for variable, paths in run.files.items():
        for path in paths:
            try:
                with open_dataset(path, decode_times=False) as ds:
                    ds[variable].load()
            except Exception as file_err:  # noqa: BLE001 — this is the file to name
                return ArchiveError(f"values of {variable} cannot be read ({type(file_err).__name__}: "
                                    f"{message(file_err)})", path=path, model=run.model, member=run.member,
                                    experiment_id=run.experiment_id,
                                    hint="the file is damaged: replace it with a good copy")
    return ArchiveError(f"could not be reduced ({type(err).__name__}: {message(err)})",
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


def empty_steps(ds: xr.Dataset, run: RunFiles) -> ArchiveError | None:
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


def nothing_to_extract(archive, catalog: Catalog, settings: ExtractionSettings) -> Failure:
    """The one failure of a batch that found no run to extract, saying where to look."""
    if not Path(archive).is_dir() and not (Path(archive).suffix == ".json" and Path(archive).is_file()):
        why, hint = "is not a folder", "give the folder that holds the archive"
    elif not catalog.runs and Path(archive).suffix == ".json":
        why = "names no usable dataset" + (f" ({'; '.join(catalog.problems[:3])})" if catalog.problems else "")
        hint = "check the catalogue's columns and locations"
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

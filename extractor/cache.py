"""The per-run cache: a fingerprint of everything a unit's row depends on, and the row stored beside it.

Each series file carries root attributes ``fingerprint`` and ``sensitivity_row`` (the row as JSON). A rerun
whose fingerprint matches reuses the row without opening the archive; anything else recomputes. The row is
data, read with `json.loads` and checked against the table's columns: nothing cached is ever executed.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

import xarray as xr

from sensemble import __version__
from sensemble.contract import series as series_schema
from sensemble.contract.table import ALL_COLUMNS

from .settings import ExtractionSettings
from .stores import LocationStat, stat_location
from .units import Unit


def settings_record(settings: ExtractionSettings) -> dict:
    """The settings as plain data, for the cache fingerprint and the provenance of the outputs."""
    return {k: v for k, v in dataclasses.asdict(settings).items() if k != "extra"}


def file_stats(units: list[Unit]) -> dict[Path, LocationStat]:
    """Size and modification time of every input file or store, read once per batch (a control serves several
    members); a Zarr store counts all its files (`extractor.stores.stat_location`)."""
    paths = dict.fromkeys(path for unit in units for run in unit.runs() for path in run.all_files())
    return {path: stat_location(path) for path in paths}


def fingerprint(unit: Unit, settings: ExtractionSettings, stats: dict[Path, LocationStat]) -> str:
    """Hash of everything a unit's results depend on: settings, software version, input files (size, mtime)."""
    h = hashlib.sha256()
    h.update(json.dumps(settings_record(settings), sort_keys=True, default=str).encode())
    h.update(__version__.encode())
    h.update(",".join(ALL_COLUMNS).encode())  # a cached row must have today's columns
    h.update(f"series schema {series_schema.SCHEMA_VERSION}".encode())  # and its file today's attributes
    for run in unit.runs():
        for path in sorted(run.all_files(), key=str):
            st = stats[path]
            h.update(f"{run.experiment_id}|{path}|{st.st_size}|{st.st_mtime_ns}\n".encode())
    return h.hexdigest()


def cached_row(path: Path, fp: str) -> dict | None:
    """The row stored in the series file at ``path`` when its fingerprint is ``fp``; else None."""
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

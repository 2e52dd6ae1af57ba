"""The sensitivity table: one row per (model, member), as CSV and as CF NetCDF."""
from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import xarray as xr

from sensemble.contract.cf import CONVENTIONS
from sensemble.contract.table import (ALL_COLUMNS, COLUMN_META, COLUMNS, ECS_INTERVAL_METHODS, EXTRA_COLUMNS,  # noqa: F401
                                      NUMERIC, TABLE_CSV, TABLE_NC, TEXT_META, column_long_name)

from sensemble.contract.atomic import atomic_path, local_writes, write_text


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return repr(float(value))
    return str(value)


def table_csv(rows: list[dict]) -> str:
    """The CSV text of the table: contract columns first, missing values empty."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(ALL_COLUMNS)
    for row in sorted(rows, key=lambda r: (r["model"], r["member"])):
        writer.writerow([_cell(row.get(c)) for c in ALL_COLUMNS])
    return buf.getvalue()


def table_dataset(rows: list[dict], provenance: dict) -> xr.Dataset:
    """The table as a CF dataset on dimension `run`, with units, long names and provenance."""
    rows = sorted(rows, key=lambda r: (r["model"], r["member"]))
    data = {}
    for col in NUMERIC:
        values = np.array([np.nan if r.get(col) is None else float(r[col]) for r in rows], dtype=float)
        long_name = column_long_name(col, tcr_years=provenance.get("config", {}).get("tcr_years"),
                                     ecs_interval=provenance.get("config", {}).get("ecs_interval"))
        data[col] = ("run", values, {"units": COLUMN_META[col][0], "long_name": long_name})
    for col, long_name in TEXT_META.items():
        data[col] = ("run", np.array([str(r.get(col) or "") for r in rows], dtype=object), {"long_name": long_name})
    ds = xr.Dataset(data)
    ds.attrs = {
        "Conventions": CONVENTIONS,
        "title": "Climate sensitivity from Gregory regression, per model and member",
        "source": f"sensemble {provenance.get('software_version', '')}",
        "history": provenance.get("history", ""),
        "references": "Gregory et al. (2004), Geophys. Res. Lett., doi:10.1029/2003GL018747",
        "ecs_interval_method": ECS_INTERVAL_METHODS[provenance.get("config", {}).get("ecs_interval", "fieller")],
        "sensemble_config": json.dumps(provenance.get("config", {}), sort_keys=True, default=str),
        # erf_4x / erf_2x behind ecs_eff, for readers that must not assume it (the emulator)
        "forcing_ratio": float(provenance.get("config", {}).get("forcing_ratio", 2.0)),
        "sensemble_input_files": "\n".join(provenance.get("input_files", [])),
    }
    return ds


def write_table(rows: list[dict], out_dir: str | Path, provenance: dict) -> tuple[Path, Path]:
    """Write `sensitivity.csv` and `sensitivity.nc` atomically into `out_dir`."""
    out_dir = Path(out_dir)
    csv_path = write_text(out_dir / TABLE_CSV, table_csv(rows))
    nc_path = out_dir / TABLE_NC
    ds = table_dataset(rows, provenance)
    with atomic_path(nc_path) as tmp, local_writes():
        ds.to_netcdf(tmp, engine="netcdf4")
    return csv_path, nc_path


def read_table(path: str | Path) -> list[dict]:
    """Read a `sensitivity.csv` back into rows (numbers as floats, empty cells as None)."""
    rows = []
    with open(path, newline="", encoding="utf-8") as fh:
        for raw in csv.DictReader(fh):
            row = {}
            for key, value in raw.items():
                if key in NUMERIC:
                    row[key] = float(value) if value != "" else None
                else:
                    row[key] = value
            rows.append(row)
    return rows

"""The sensitivity table: one row per (model, member), as CSV and as CF NetCDF."""
from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import xarray as xr

from .atomic import atomic_path, write_text

# The contract's columns, in order (../shared/DESIGN.md), then our extras.
COLUMNS = (
    "model", "member", "erf_4x", "erf_4x_se", "feedback", "feedback_se", "ecs_eff", "ecs_eff_q05",
    "ecs_eff_q95", "feedback_early", "feedback_late", "feedback_change", "ecs_late", "curvature", "tcr",
    "n_years", "flags",
)
EXTRA_COLUMNS = ("feedback_lw_cs", "feedback_sw_cs", "feedback_cre", "erf_4x_odr", "feedback_odr", "ecs_eff_odr")
ALL_COLUMNS = COLUMNS + EXTRA_COLUMNS

COLUMN_META = {
    "erf_4x": ("W m-2", "effective radiative forcing of CO2 quadrupling (Gregory intercept)"),
    "erf_4x_se": ("W m-2", "standard error of erf_4x (OLS)"),
    "feedback": ("W m-2 K-1", "climate feedback parameter (Gregory slope; negative is stable)"),
    "feedback_se": ("W m-2 K-1", "standard error of feedback (OLS)"),
    "ecs_eff": ("K", "effective climate sensitivity, -erf_4x / (forcing_ratio * feedback)"),
    "ecs_eff_q05": ("K", "5th percentile of ecs_eff, moving-block bootstrap over years"),
    "ecs_eff_q95": ("K", "95th percentile of ecs_eff, moving-block bootstrap over years"),
    "feedback_early": ("W m-2 K-1", "feedback over the early segment"),
    "feedback_late": ("W m-2 K-1", "feedback over the late segment"),
    "feedback_change": ("W m-2 K-1", "feedback_late - feedback_early"),
    "ecs_late": ("K", "effective climate sensitivity from the late segment"),
    "curvature": ("W m-2 K-2", "quadratic coefficient a in dN = F + lambda dT + a dT^2"),
    "tcr": ("K", "transient climate response: mean warming in years 61-80 of the 1 % per year CO2 run"),
    "n_years": ("1", "number of annual means in the Gregory fit"),
    "feedback_lw_cs": ("W m-2 K-1", "clear-sky longwave component of feedback"),
    "feedback_sw_cs": ("W m-2 K-1", "clear-sky shortwave component of feedback"),
    "feedback_cre": ("W m-2 K-1", "cloud radiative effect component of feedback"),
    "erf_4x_odr": ("W m-2", "erf_4x from an orthogonal-distance (errors-in-variables) fit"),
    "feedback_odr": ("W m-2 K-1", "feedback from an orthogonal-distance (errors-in-variables) fit"),
    "ecs_eff_odr": ("K", "ecs_eff from an orthogonal-distance (errors-in-variables) fit"),
}
NUMERIC = tuple(c for c in ALL_COLUMNS if c not in ("model", "member", "flags"))


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
        units, long_name = COLUMN_META[col]
        data[col] = ("run", values, {"units": units, "long_name": long_name})
    for col, long_name in (("model", "source_id of the model"), ("member", "variant_label of the member"),
                           ("flags", "quality flags, semicolon-separated")):
        data[col] = ("run", np.array([str(r.get(col) or "") for r in rows], dtype=object), {"long_name": long_name})
    ds = xr.Dataset(data)
    ds.attrs = {
        "Conventions": "CF-1.10",
        "title": "Climate sensitivity from Gregory regression, per model and member",
        "source": f"sensemble {provenance.get('software_version', '')}",
        "history": provenance.get("history", ""),
        "references": "Gregory et al. (2004), Geophys. Res. Lett., doi:10.1029/2003GL018747",
        "sensemble_config": json.dumps(provenance.get("config", {}), sort_keys=True, default=str),
        "sensemble_input_files": "\n".join(provenance.get("input_files", [])),
    }
    return ds


def write_table(rows: list[dict], out_dir: str | Path, provenance: dict) -> tuple[Path, Path]:
    """Write `sensitivity.csv` and `sensitivity.nc` atomically into `out_dir`."""
    out_dir = Path(out_dir)
    csv_path = write_text(out_dir / "sensitivity.csv", table_csv(rows))
    nc_path = out_dir / "sensitivity.nc"
    ds = table_dataset(rows, provenance)
    with atomic_path(nc_path) as tmp:
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

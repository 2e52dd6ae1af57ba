"""The sensitivity table's contract: column order, empty cells, CF NetCDF twin, atomic writes."""
import csv

import numpy as np
import xarray as xr

from sensemble.extractor.table import ALL_COLUMNS, COLUMNS, read_table, write_table

ROWS = [
    {"model": "ZED-2", "member": "r1i1p1f1", "erf_4x": 7.1, "feedback": -1.2, "ecs_eff": 2.9583333, "n_years": 150,
     "flags": "energy_leak"},
    {"model": "ALDER-1", "member": "r2i1p1f1", "erf_4x": 6.5, "feedback": -0.8, "ecs_eff": 4.0625, "tcr": None,
     "n_years": 150, "flags": ""},
]
PROVENANCE = {"software_version": "0.1.0", "config": {"fit_years": [1, 150]}, "input_files": ["a.nc size=1 mtime=2"]}


def test_csv_columns_in_contract_order(tmp_path):
    write_table(ROWS, tmp_path, PROVENANCE)
    with open(tmp_path / "sensitivity.csv") as fh:
        header = next(csv.reader(fh))
    # the contract of ../shared/DESIGN.md first, extras after
    assert tuple(header[: len(COLUMNS)]) == COLUMNS
    assert tuple(header) == ALL_COLUMNS


def test_round_trip_keeps_values_and_empty_cells(tmp_path):
    write_table(ROWS, tmp_path, PROVENANCE)
    rows = read_table(tmp_path / "sensitivity.csv")
    assert [r["model"] for r in rows] == ["ALDER-1", "ZED-2"]  # sorted by model
    assert rows[1]["ecs_eff"] == 2.9583333
    assert rows[0]["tcr"] is None and rows[0]["curvature"] is None


def test_netcdf_twin_is_cf_with_units_and_provenance(tmp_path):
    _, nc = write_table(ROWS, tmp_path, PROVENANCE)
    with xr.open_dataset(nc) as ds:
        assert ds.attrs["Conventions"].startswith("CF-")
        assert ds["ecs_eff"].attrs["units"] == "K"
        assert ds["feedback"].attrs["units"] == "W m-2 K-1"
        assert "a.nc" in ds.attrs["sensemble_input_files"]
        assert list(ds["model"].values) == ["ALDER-1", "ZED-2"]
        assert np.isnan(ds["tcr"].values).all()


def test_no_temporary_files_left(tmp_path):
    write_table(ROWS, tmp_path, PROVENANCE)
    write_table(ROWS, tmp_path, PROVENANCE)  # overwrite in place
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sensitivity.csv", "sensitivity.nc"]

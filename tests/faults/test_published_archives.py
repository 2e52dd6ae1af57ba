"""Archives as modelling centres publish them (issue 11), each through `sensemble extract`.

Every case starts from a copy of the fault suite's clean archive (tests/faults/conftest.py: two invented models
whose abrupt runs lie exactly on a Gregory line after drift removal) and re-files or rewrites the target
model's files the way a published archive has them: the CMIP5 layout, a branch in mid-year, one file whose
attributes disagree with its path, one time step per storage chunk, netCDF-3 classic files, a regional
subset. Where the data are unchanged the extraction must give the clean reference's numbers exactly.
"""
from __future__ import annotations

import csv
import json
from pathlib import Path

import netCDF4
import numpy as np
import pytest
import xarray as xr

from tests.cli.test_cli import TINY_TOML
from tests.cli.test_run import run_cli
from tests.extractor.conftest import write_monthly_file
from tests.faults.conftest import (BRANCH_YEAR, F4X, FEEDBACK, LEAKS, MEMBER, TARGET, delta_t, file_of, files_of,
                                   rewrite, rows_by_model)

CONFIG = TINY_TOML  # the fault suite's windows (tests/faults/conftest.py SETTINGS), for the command line
NUMBERS = ("erf_4x", "erf_4x_se", "feedback", "feedback_se", "ecs_eff", "ecs_eff_q05", "ecs_eff_q95",
           "feedback_early", "feedback_late", "ecs_late", "curvature", "n_years")


def extract_cli(archive, tmp_path):
    config = tmp_path / "published.toml"
    config.write_text(CONFIG)
    out = tmp_path / "out"
    status, stdout, stderr = run_cli("extract", archive, "--out", out, "--config", config, "--quiet")
    with open(out / "sensitivity.csv", newline="") as fh:
        rows = {r["model"]: r for r in csv.DictReader(fh)}
    return status, stderr, rows, (out / "report.md").read_text()


def assert_same_numbers(row: dict, reference: dict) -> None:
    for column in NUMBERS:
        assert float(row[column]) == pytest.approx(float(reference[column]), rel=0, abs=0), column


def copy_file(src: Path, dst: Path, *, file_format="NETCDF4", chunk_steps=None, keep=None, attrs=None) -> Path:
    """Rewrite a netCDF file: another format, time chunking, a lat/lon subset, changed global attributes.

    ``keep``: {"lat": slice, "lon": slice} to cut a region; ``attrs``: name → value, or None to delete.
    """
    dst.parent.mkdir(parents=True, exist_ok=True)
    keep = keep or {}
    tmp = dst.with_name(dst.name + ".tmp")
    with netCDF4.Dataset(src) as nc, netCDF4.Dataset(tmp, "w", format=file_format) as out:
        for name, dim in nc.dimensions.items():
            size = len(range(len(dim))[keep[name]]) if name in keep else len(dim)
            out.createDimension(name, None if dim.isunlimited() else size)
        glob = {k: nc.getncattr(k) for k in nc.ncattrs()}
        for name, value in (attrs or {}).items():
            glob.pop(name, None) if value is None else glob.__setitem__(name, value)
        out.setncatts(glob)
        for name, var in nc.variables.items():
            index = tuple(keep.get(d, slice(None)) for d in var.dimensions)
            fill = var.getncattr("_FillValue") if "_FillValue" in var.ncattrs() else None
            chunks = None
            if chunk_steps and file_format == "NETCDF4" and var.dimensions[:1] == ("time",) and var.ndim == 3:
                chunks = (chunk_steps,) + tuple(len(range(len(nc.dimensions[d]))[keep.get(d, slice(None))])
                                                for d in var.dimensions[1:])
            new = out.createVariable(name, var.dtype, var.dimensions, fill_value=fill, chunksizes=chunks)
            new.setncatts({k: var.getncattr(k) for k in var.ncattrs() if k != "_FillValue"})
            new.set_auto_maskandscale(False)
            var.set_auto_maskandscale(False)
            new[:] = var[index] if var.ndim else var.getValue()
    src_path = Path(src)
    if src_path != dst:
        src_path.unlink()
    tmp.replace(dst)
    return dst


def target_files(root, model=TARGET) -> list[Path]:
    return sorted(p for p in Path(root).rglob(f"*_{model}_*.nc"))


# 1 ------------------------------------------------------------------------------------------ CMIP5


def to_cmip5(root: Path, model=TARGET) -> None:
    """Re-file every file of ``model`` the CMIP5 way: directories, names without grid label, ids, attributes."""
    for path in target_files(root, model):
        variable, table, _, experiment, member, _grid, *time_range = path.stem.split("_")
        experiment = {"abrupt-4xCO2": "abrupt4xCO2"}.get(experiment, experiment)
        ensemble = "r0i0p0" if table == "fx" else member.split("f")[0]
        frequency = "fx" if table == "fx" else "mon"
        name = "_".join([variable, table, model, experiment, ensemble, *time_range]) + ".nc"
        folder = (root / "cmip5" / "output1" / "INVENTED" / model / experiment / frequency / "atmos" / table /
                  ensemble / "v20120101" / variable)
        with netCDF4.Dataset(path) as nc:
            branch = nc.getncattr("branch_time_in_parent") if "branch_time_in_parent" in nc.ncattrs() else 0.0
        attrs = {"source_id": None, "variant_label": None, "parent_time_units": None, "branch_time_in_parent": None,
                 "parent_variant_label": None, "model_id": model, "experiment_id": experiment,
                 "realization": np.int32(1), "initialization_method": np.int32(1), "physics_version": np.int32(1),
                 "parent_experiment_rip": "r1i1p1", "branch_time": branch}
        copy_file(path, folder / name, attrs=attrs)


def test_cmip5_archive_beside_cmip6_gives_the_same_numbers(clean, broken_copy, tmp_path):
    # issue 11 point 1: the abrupt files split in two time chunks (the names' date ranges once read as grid labels,
    # dropping half the files and failing with a wrong "set fit_years" hint); branch_time is in the control's own
    # units with no parent_time_units (ignoring it moves the branch to the control's start: a different number).
    # Same data, so the same numbers, exactly (common practice, no source).
    for variable in ("tas", "rsdt", "rsut", "rlut"):
        rewrite(file_of(broken_copy, variable=variable), [range(0, 240), range(240, 480)])
    to_cmip5(broken_copy)
    assert sorted(broken_copy.rglob(f"tas_Amon_{TARGET}_abrupt4xCO2_r1i1p1_185001-186912.nc"))
    assert sorted(broken_copy.rglob(f"areacella_fx_{TARGET}_piControl_r0i0p0.nc"))
    status, stderr, rows, report = extract_cli(broken_copy, tmp_path)
    assert status == 0, stderr
    row = rows[TARGET]
    assert (row["member"], row["mip_era"]) == ("r1i1p1", "CMIP5")
    assert row["flags"] == rows_by_model(clean)[TARGET]["flags"]  # no branch_assumed, no areacella_other_member
    assert_same_numbers(row, rows_by_model(clean)[TARGET])
    other = next(m for m in rows if m != TARGET)
    assert rows[other]["mip_era"] == "CMIP6" and "set [extraction] fit_years" not in report


# 2 ---------------------------------------------------------------------------------------- mid-year


def test_branch_in_mid_year_keeps_every_year_and_matches_the_control_months(clean, broken_copy, tmp_path):
    # issue 11 point 2: the abrupt run starts on 1 July of control year BRANCH_YEAR. Its values follow the control's
    # own monthly values at the matching months (the control steps once a calendar year: drift 0.003 W m-2 and
    # 0.002 K per year) plus a response constant over each twelve-month block, exactly on the line
    # ΔN = F4X + FEEDBACK ΔT (Gregory et al. 2004). Blocks of twelve months from the branch give 40 whole years;
    # a drift evaluated at the control's January-aligned years would shift every ΔT by 1e-3 K (half a year of
    # drift), far above the float32 rounding of the files (~2e-5 K at 287 K, IEEE 754): ΔT is checked to 2e-4 K,
    # erf_4x and feedback to 2e-4 (common practice, no source).
    for path in files_of(broken_copy, experiment="abrupt-4xCO2", variable="*"):
        path.unlink()
    months = 40 * 12
    control_month = BRANCH_YEAR * 12 + 6 + np.arange(months)
    year_c = control_month // 12
    d_t = delta_t(np.arange(months) // 12 + 1)
    n = LEAKS[TARGET] - 0.003 * year_c + F4X + FEEDBACK * d_t
    values = {"tas": 287.0 + 0.002 * year_c + d_t, "rsdt": np.full(months, 340.0), "rsut": np.full(months, 100.0),
              "rlut": 240.0 - n}
    july = 365 * BRANCH_YEAR + 181  # days since 1850-01-01 (noleap) to 1 July of the control year
    attrs = {"source_id": TARGET, "experiment_id": "abrupt-4xCO2", "variant_label": MEMBER,
             "parent_experiment_id": "piControl", "branch_time_in_parent": float(july),
             "parent_time_units": "days since 1850-01-01 00:00:00", "parent_variant_label": MEMBER}
    for variable, series in values.items():
        folder = broken_copy / TARGET / "abrupt-4xCO2" / MEMBER / "Amon" / variable / "gn" / "v20260101"
        write_monthly_file(folder / f"{variable}_Amon_{TARGET}_abrupt-4xCO2_{MEMBER}_gn_186007-190006.nc", variable,
                           series, start_year=1850 + BRANCH_YEAR, start_month=7, nmonths=months, attrs=attrs)
    status, stderr, rows, _ = extract_cli(broken_copy, tmp_path)
    assert status == 0, stderr
    row = rows[TARGET]
    assert int(row["n_years"]) == 40 and "partial_years" not in row["flags"]
    assert float(row["erf_4x"]) == pytest.approx(F4X, abs=2e-4)
    assert float(row["feedback"]) == pytest.approx(FEEDBACK, abs=2e-4)
    with xr.open_dataset(tmp_path / "out" / "series" / f"{TARGET}_{MEMBER}.nc", group="abrupt-4xCO2") as ds:
        assert ds.attrs["branch_year_in_control"] == 1850 + BRANCH_YEAR
        np.testing.assert_allclose(ds["tas"].values, delta_t(np.arange(1, 41)), rtol=0, atol=2e-4)


# 3 -------------------------------------------------------------------------------- attribute typo


def test_one_file_with_a_source_id_typo_is_flagged_and_named_not_failed(clean, broken_copy, tmp_path):
    # issue 11 point 3: the path names the run; the file is named in the report; the numbers are those of the
    # clean archive (same data) — common practice, no source
    typo = file_of(broken_copy, variable="rlut")
    copy_file(typo, typo, attrs={"source_id": TARGET.replace("-", "_")})
    status, stderr, rows, report = extract_cli(broken_copy, tmp_path)
    assert status == 0, stderr
    assert "attribute_mismatch" in rows[TARGET]["flags"].split(";")
    assert typo.name in report and "attribute_mismatch" in report
    assert_same_numbers(rows[TARGET], rows_by_model(clean)[TARGET])


# 5 ------------------------------------------------------------------------------------- storage layouts


@pytest.mark.parametrize("layout", [{"chunk_steps": 1}, {"file_format": "NETCDF3_CLASSIC"}],
                         ids=["one_step_per_chunk", "netcdf3_classic"])
def test_storage_layouts_read_the_same(clean, broken_copy, tmp_path, layout):
    # issue 11 point 5: one time step per HDF5 chunk (the usual CMIP6 writer's layout) and uncompressed netCDF-3
    # classic files hold the same values, so the numbers are the clean ones, exactly (common practice, no source)
    for path in target_files(broken_copy):
        copy_file(path, path, **layout)
    with netCDF4.Dataset(file_of(broken_copy)) as nc:
        if "chunk_steps" in layout:
            assert nc["tas"].chunking()[0] == 1
        else:
            assert nc.data_model == "NETCDF3_CLASSIC"
    status, stderr, rows, _ = extract_cli(broken_copy, tmp_path)
    assert status == 0, stderr
    assert_same_numbers(rows[TARGET], rows_by_model(clean)[TARGET])


# 6 ------------------------------------------------------------------------------------- regional grid


@pytest.mark.parametrize("with_areacella", [True, False], ids=["areacella", "bounds"])
def test_regional_subset_is_refused_naming_file_and_fraction(clean, broken_copy, tmp_path, with_areacella):
    # issue 11 point 6: the northernmost band (45–90 °N) of half the longitudes: (1 − sin 45°)/2 × 1/2 = 7.3 % of
    # the sphere (spherical-zone area, any geometry handbook). The run is refused, the other model unaffected.
    keep = {"lat": slice(3, 4), "lon": slice(0, 4)}
    for path in target_files(broken_copy):
        copy_file(path, path, keep=keep)
    if not with_areacella:
        for path in broken_copy.rglob(f"areacella_fx_{TARGET}_*.nc"):
            path.unlink()
    status, stderr, rows, report = extract_cli(broken_copy, tmp_path)
    assert status == 1 and TARGET not in rows and len(rows) == 1
    named = (next(broken_copy.rglob(f"areacella_fx_{TARGET}_*.nc")) if with_areacella
             else file_of(broken_copy, experiment="piControl"))
    line = next(line for line in report.splitlines() if "of the sphere" in line and "piControl" in line)
    assert f"file {named}" in line and "7.3% of the sphere" in line and "regional subset" in line, line
    assert " — give the run's global fields" in line


# 4 ------------------------------------------------------------------------------- Zarr stores, catalogues


def to_zarr(root: Path, dest: Path, model=TARGET) -> list[dict]:
    """Every dataset of ``model`` as one Zarr store (v2, consolidated metadata, as cloud CMIP6 collections), filed
    ``dest/<source>/<experiment>/<member>/<table>/<variable>/<grid>/<version>/``; the NetCDF files are removed.
    Returns the catalogue rows of the stores."""
    rows = []
    for path in target_files(root, model):
        variable, table, source, experiment, member, grid, *_ = path.stem.split("_")
        store = dest / source / experiment / member / table / variable / grid / "v20260101"
        with xr.open_dataset(path, decode_times=False, mask_and_scale=False) as ds:
            ds.load().to_zarr(store, mode="w", zarr_format=2, consolidated=True)
        path.unlink()
        rows.append({"activity_id": "DEMO", "source_id": source, "experiment_id": experiment, "member_id": member,
                     "table_id": table, "variable_id": variable, "grid_label": grid, "version": "20260101",
                     "path": store})
    return rows


def netcdf_rows(root: Path) -> list[dict]:
    rows = []
    for path in sorted(root.rglob("*.nc")):
        variable, table, source, experiment, member, grid, *_ = path.stem.split("_")
        rows.append({"activity_id": "DEMO", "source_id": source, "experiment_id": experiment, "member_id": member,
                     "table_id": table, "variable_id": variable, "grid_label": grid, "version": "20260101",
                     "path": path})
    return rows


def test_zarr_stores_in_the_archive_tree_give_the_same_numbers(clean, broken_copy, tmp_path):
    # issue 11 point 4: one store per dataset beside the other model's NetCDF files; same values, so the clean
    # numbers exactly (common practice, no source); the table says where each model came from
    to_zarr(broken_copy, broken_copy / "zarr")
    assert not target_files(broken_copy)
    status, stderr, rows, _ = extract_cli(broken_copy, tmp_path)
    assert status == 0, stderr
    assert_same_numbers(rows[TARGET], rows_by_model(clean)[TARGET])
    assert rows[TARGET]["flags"] == rows_by_model(clean)[TARGET]["flags"]
    assert {model: row["origin"] for model, row in rows.items()} == {TARGET: "zarr", "BIRCH-2": "netcdf"}


def test_esm_catalogue_of_zarr_urls_and_netcdf_files_gives_the_same_numbers(clean, broken_copy, tmp_path):
    # issue 11 point 4: an ESM catalogue (JSON + CSV, written here) whose rows name the datasets — the target's as
    # fsspec URLs of Zarr stores (file://, so no network), the other model's as NetCDF paths relative to the CSV
    stores = to_zarr(broken_copy, tmp_path / "bucket")
    for row in stores:
        row["path"] = Path(row["path"]).as_uri()
    files = netcdf_rows(broken_copy)
    for row in files:
        row["path"] = Path(row["path"]).relative_to(broken_copy).as_posix()
    with open(broken_copy / "datasets.csv", "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(stores[0]))
        writer.writeheader()
        writer.writerows(stores + files + [dict(files[0], path="")])  # a row without a location is reported
    spec = {"esmcat_version": "0.1.0", "id": "published-test", "description": "invented test datasets",
            "catalog_file": "datasets.csv", "attributes": [{"column_name": "source_id"}],
            "assets": {"column_name": "path"},
            "aggregation_control": {"variable_column_name": "variable_id", "groupby_attrs": ["source_id"],
                                    "aggregations": []}}
    catalogue = broken_copy / "datasets.json"
    catalogue.write_text(json.dumps(spec))
    status, stderr, rows, report = extract_cli(catalogue, tmp_path)
    assert status == 0, stderr
    for model, reference in rows_by_model(clean).items():
        assert_same_numbers(rows[model], reference)
        assert rows[model]["origin"] == f"esm catalogue {catalogue}"
    assert f"catalogue {catalogue}: row {len(stores) + len(files) + 2}: no path" in report


def test_run_lacking_months_is_not_told_to_shorten_the_fit_window(clean, broken_copy, tmp_path):
    # issue 11: "set fit_years" for a run that only lacks months would fit other years than the other models'
    # (a wrong number); the hint names the incomplete year instead. The last six months are cut from every file.
    for variable in ("tas", "rsdt", "rsut", "rlut"):
        rewrite(file_of(broken_copy, variable=variable), [range(0, 40 * 12 - 6)])
    status, _, rows, report = extract_cli(broken_copy, tmp_path)
    assert status == 1 and TARGET not in rows
    line = next(line for line in report.splitlines() if f"**{TARGET}" in line)
    assert "lack months of the years 1889" in line and "supply the missing months" in line, line
    assert "set [extraction] fit_years" not in report

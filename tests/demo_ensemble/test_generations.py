"""A mixed CMIP5 + CMIP6 demo archive (`generate(..., mixed=True)`) extracts in one command with no config.

Two invented models, noise-free, on a 4×8 grid with the default run lengths (so the default fit windows
apply): Alder-2 filed the CMIP6 way, Bramble-1-1 (two members, 360_day calendar) the CMIP5 way — directories
``output1/<institute>/<model>/<experiment>/mon/atmos/Amon/<ensemble>/<version>/<variable>/``, names without a
grid label, ``abrupt4xCO2``, members ``r1i1p1``, fixed fields under ``r0i0p0``, ``branch_time`` in the
parent's units without ``parent_time_units``, netCDF-3 classic files.
"""
from __future__ import annotations

import csv

import netCDF4
import pytest

from sensemble import demo as demo_ensemble
from tests.cli.test_run import run_cli


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    root = tmp_path_factory.mktemp("mixed")
    demo_ensemble.generate(root, n_models=2, seed=0, grid=(4, 8), internal_variability=False, mixed=True)
    status, stdout, stderr = run_cli("extract", root / "archive", "--out", root / "out", "--quiet")
    assert status == 0, stderr
    with open(root / "truth.csv", newline="") as fh:
        truth = {(r["model"], r["member"]): r for r in csv.DictReader(fh)}
    with open(root / "out" / "sensitivity.csv", newline="") as fh:
        rows = {(r["model"], r["member"]): r for r in csv.DictReader(fh)}
    return root, truth, rows


def test_mixed_archive_is_filed_in_both_generations(mixed):
    root, _, _ = mixed
    archive = root / "archive"
    cmip5 = sorted(archive.glob("output1/*/Bramble-1-1/abrupt4xCO2/mon/atmos/Amon/r1i1p1/v*/tas/*.nc"))
    assert cmip5 and cmip5[0].name.startswith("tas_Amon_Bramble-1-1_abrupt4xCO2_r1i1p1_")
    assert sorted(archive.glob("output1/*/Bramble-1-1/piControl/fx/atmos/fx/r0i0p0/v*/areacella/"
                               "areacella_fx_Bramble-1-1_piControl_r0i0p0.nc"))
    assert sorted(archive.glob("Alder-2/abrupt-4xCO2/r1i1p1f1/Amon/tas/gn/v*/*_gn_*.nc"))
    with netCDF4.Dataset(cmip5[0]) as nc:
        assert nc.data_model == "NETCDF3_CLASSIC"
        assert nc.model_id == "Bramble-1-1" and nc.parent_experiment_rip == "r1i1p1"
        assert "branch_time" in nc.ncattrs()
        assert "parent_time_units" not in nc.ncattrs() and "source_id" not in nc.ncattrs()


def test_mixed_archive_extracts_without_config_and_matches_truth(mixed):
    # Tolerance 1e-4 relative, as in tests/extractor/test_demo_truth.py: float32 storage (IEEE 754 rounding,
    # ~6e-8 relative) is the only error left in a noise-free run (common practice, no source). A branch
    # taken at the control's start instead of CMIP5's branch_time would miss by far more (the control drifts).
    _, truth, rows = mixed
    assert sorted(rows) == sorted(truth)
    assert {key: rows[key]["mip_era"] for key in rows} == {
        ("Alder-2", "r1i1p1f1"): "CMIP6", ("Bramble-1-1", "r1i1p1"): "CMIP5", ("Bramble-1-1", "r2i1p1"): "CMIP5"}
    for key, row in rows.items():
        assert row["origin"] == "netcdf"
        flags = row["flags"].split(";")
        assert "branch_assumed" not in flags and "areacella_other_member" not in flags, (key, flags)
        for column, truth_column in (("ecs_eff", "gregory_ecs_eff"), ("feedback", "gregory_feedback"),
                                     ("tcr", "tcr")):
            assert float(row[column]) == pytest.approx(float(truth[key][truth_column]), rel=1e-4), (key, column)
